"""The crossed hierarchical logit (family 2 of the statistical contract).

logit p_ij = mu + a_i + b_j + c_ij (+ beta r_i): parts (a_i), appraisers (b_j) and
appraiser-by-part disagreement (c_ij) as crossed group effects on cell counts.
"""

from __future__ import annotations

from typing import TYPE_CHECKING

import numpy as np
import xarray as xr
from scipy.special import expit, log_expit

from bayes_rr.core.moments import (
    decompose_population_logit,
    integrated_cell_log_lik,
    log_binom_coef,
    split_reproducibility_logit,
)
from bayes_rr.families import forward
from bayes_rr.families.base import (
    Family,
    LatentDraws,
    cell_index,
    cell_memory,
    draws_of,
    optional_draws,
    part_linear_predictor,
    single_intercept,
    term_hyper_parameters,
)
from bayes_rr.families.terms import (
    APPRAISER_TERM,
    INTERACTION_TERM,
    PART_TERM,
    REFERENCE_TERM,
    FamilyInfo,
)

if TYPE_CHECKING:
    import pymc as pm

    from bayes_rr.priors.spec import ModelSpec
    from bayes_rr.study.data import StudyData

EFFECT_DIMS = {"part": "part", "appraiser": "appraiser", "interaction": "cell"}

INFO = FamilyInfo(
    "logit",
    "crossed hierarchical logit: logit p_ij = mu + a_i + b_j + c_ij (docs/statistics.md family 2)",
    {t.name: t for t in (PART_TERM, APPRAISER_TERM, INTERACTION_TERM, REFERENCE_TERM)},
    required_terms=("part",),
)


def build(spec: ModelSpec, study: StudyData) -> pm.Model:
    """logit p_ij = mu + a_i + b_j + c_ij (+ beta r_i); s_ij ~ Binomial(n_ij, p_ij)."""
    import pymc as pm

    from bayes_rr.families.pymc_parts import (
        coords,
        group_effect,
        observed_calls,
        pymc_prior,
        reference_term,
        resolve_parameterization,
    )

    cells = study.cells
    part, app = cell_index(study)
    index = {"part": part, "appraiser": app, "interaction": slice(None)}
    with pm.Model(coords=coords(study)) as model:
        eta = pymc_prior("intercept", spec.intercept)
        for term in spec.terms:
            if term.kind != "group":
                continue
            scale = pymc_prior(f"sigma_{term.name}", term.prior)
            effect = group_effect(
                f"{term.name}_effect",
                scale,
                EFFECT_DIMS[term.name],
                resolve_parameterization(term, study),
            )
            eta = eta + effect[index[term.name]]
        eta = eta + reference_term(spec, study, index["part"])
        pm.Binomial(
            "s",
            n=cells["n"].to_numpy(),
            logit_p=eta,
            observed=observed_calls(study),
            dims="cell",
        )
    return model


def prior_draws(spec: ModelSpec, study: StudyData, rng: np.random.Generator, draws: int):
    out = {"intercept": ((), forward.draw(spec.intercept, rng, (draws,)))}
    out.update(forward.group_effects(spec, study, rng, draws, ("part", "appraiser", "interaction")))
    out.update(forward.reference_effect(spec, study, rng, draws))
    return out


def cell_linear_predictor(posterior: xr.Dataset, study: StudyData) -> np.ndarray:
    """(S, cell) logit p_ij of the observed cells."""
    part, app = cell_index(study)
    eta = part_linear_predictor(posterior, study)[:, part]
    if "appraiser_effect" in posterior:
        eta = eta + draws_of(posterior, "appraiser_effect")[:, app]
    if "interaction_effect" in posterior:
        eta = eta + draws_of(posterior, "interaction_effect")
    return eta


def latent(posterior: xr.Dataset, spec, study: StudyData, rng) -> LatentDraws:
    n_parts, n_app = len(study.parts), len(study.appraisers)
    eta_part = part_linear_predictor(posterior, study)
    s = eta_part.shape[0]
    b = optional_draws(posterior, "appraiser_effect", (s, n_app))
    sigma_b = optional_draws(posterior, "sigma_appraiser", (s,))
    sigma_c = optional_draws(posterior, "sigma_interaction", (s,))
    # Cells without calls get c_ij from its prior given sigma_c: the posterior of
    # an unobserved interaction effect.
    c = rng.standard_normal((s, n_parts, n_app)) * sigma_c[:, None, None]
    part, app = cell_index(study)
    if "interaction_effect" in posterior:
        c[:, part, app] = draws_of(posterior, "interaction_effect")
    eta = eta_part[:, :, None] + b[:, None, :] + c
    p, q = expit(eta), expit(-eta)
    population = decompose_population_logit(eta_part, np.sqrt(sigma_b**2 + sigma_c**2))
    if "sigma_appraiser" in posterior and "sigma_interaction" in posterior:
        population.update(split_reproducibility_logit(eta_part, sigma_b, sigma_c))
    cells = study.cells
    n, k = cells["n"].to_numpy(), cells["s"].to_numpy()
    if "interaction_effect" in posterior:
        # Leave-one-cell-out needs the cell's likelihood with its own interaction
        # effect integrated out: that effect is informed by the cell alone.
        log_lik = integrated_cell_log_lik(eta_part[:, part] + b[:, app], sigma_c, n, k)
    else:
        eta_cell = eta[:, part, app]
        log_lik = log_binom_coef(n, k) + k * log_expit(eta_cell) + (n - k) * log_expit(-eta_cell)
    return LatentDraws(p, population, log_lik, q_study=q)


def cell_probabilities(posterior: xr.Dataset, spec, study: StudyData, rng) -> np.ndarray:
    """The same parts and appraisers, effects from the draw."""
    return expit(cell_linear_predictor(posterior, study))


def hyper_parameters(spec: ModelSpec):
    return (single_intercept(spec), *term_hyper_parameters(spec))


FAMILY = Family(
    info=INFO,
    build=build,
    prior_draws=prior_draws,
    latent=latent,
    cell_probabilities=cell_probabilities,
    hyper_parameters=hyper_parameters,
    memory_per_draw=cell_memory,
    appraiser_rows=True,
    statements=("call_rate", "appraiser_difference", "repeat_disagreement"),
    simulated=True,
)
