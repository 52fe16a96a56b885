"""The logit model with each part's known reference status (family 3 of the
statistical contract).

logit p_ij = mu_r(i) + a_i + b_j,r(i) + c_ij: a typical appraiser's call rate on good
parts (mu_accept) and on bad parts (mu_reject), parts differing within their status
(a_i), each appraiser leaning differently on good and on bad parts (b_j,accept and
b_j,reject, correlated), and appraiser-by-part disagreement (c_ij).
"""

from __future__ import annotations

from typing import TYPE_CHECKING

import numpy as np
import xarray as xr
from scipy.special import expit, log_expit

from bayes_rr.core.errors import DataError
from bayes_rr.core.moments import (
    decompose_population_logit,
    integrated_cell_log_lik,
    log_binom_coef,
    split_reproducibility_logit,
)
from bayes_rr.families import forward
from bayes_rr.families.base import (
    CallNodes,
    Family,
    LatentDraws,
    cell_index,
    cell_memory,
    draws_of,
)
from bayes_rr.families.status import (
    PER_STATUS_SCALES,
    STATEMENTS,
    StatusDraws,
    called_mask,
    population_rates,
    production_calls,
    rate_variables,
    status_draws,
    study_rates,
)
from bayes_rr.families.status import hyper_parameters as status_hyper_parameters
from bayes_rr.families.terms import (
    INTERACTION_TERM,
    PART_TERM,
    STATUS_APPRAISER_TERM,
    STATUS_INTERCEPTS,
    FamilyInfo,
)

if TYPE_CHECKING:
    import pymc as pm

    from bayes_rr.priors.spec import ModelSpec
    from bayes_rr.study.data import StudyData

INFO = FamilyInfo(
    "reference_logit",
    "reference-aware logit: logit p_ij = mu_r(i) + a_i + b_j,r(i) + c_ij with the part's "
    "known reference status r(i) (docs/statistics.md family 3)",
    {t.name: t for t in (PART_TERM, STATUS_APPRAISER_TERM, INTERACTION_TERM)},
    intercepts=STATUS_INTERCEPTS,
    needs=("reference",),
)


def reference_status(study: StudyData, spec: ModelSpec):
    """The parts' reference status (0 accept, 1 reject); both must occur."""
    partial = getattr(study, "partial_status", None)
    if study.reference is None and partial is not None:
        raise DataError(
            f"{study.source}: the model {spec.name!r} needs each part's reference status; "
            f"{int(partial.notna().sum())} of {len(study.parts)} parts have one: use "
            "latent-class, which takes those and infers the rest (the default for such data)"
        )
    if study.reference is None:
        raise DataError(
            f"{study.source}: the model {spec.name!r} needs each part's reference status "
            "(a 'reference' column, or --reference-col); without one use latent-class"
        )
    status = study.reference.to_numpy().astype(int)
    if status.min() == status.max():
        which = "reject" if status[0] else "accept"
        raise DataError(
            f"{study.source}: every part has reference status {which!r}; the model "
            f"{spec.name!r} needs parts of both statuses to estimate both error rates"
        )
    return status


def build(spec: ModelSpec, study: StudyData) -> pm.Model:
    """s_ij ~ Binomial(n_ij, expit(mu_r(i) + a_i + b_j,r(i) + c_ij))."""
    import pymc as pm

    from bayes_rr.families.pymc_parts import (
        appraiser_by_status,
        by_status,
        coords,
        group_effect,
        observed_calls,
        pymc_prior,
        resolve_parameterization,
        status_intercepts,
    )

    status = reference_status(study, spec)
    cells = study.cells
    part = cells["part_index"].to_numpy()
    app = cells["appraiser_index"].to_numpy()
    with pm.Model(coords=coords(study)) as model:
        mu = status_intercepts(spec)
        eta = by_status(mu[0], mu[1], status[part])
        if spec.has("part"):
            term = spec.term("part")
            scale = pymc_prior("sigma_part", term.prior)
            effect = group_effect("part_effect", scale, "part",
                                  resolve_parameterization(term, study))  # fmt: skip
            eta = eta + effect[part]
        if spec.has("appraiser"):
            accept, reject = appraiser_by_status(spec.term("appraiser"))
            eta = eta + by_status(accept[app], reject[app], status[part])
        if spec.has("interaction"):
            term = spec.term("interaction")
            scale = pymc_prior("sigma_interaction", term.prior)
            eta = eta + group_effect("interaction_effect", scale, "cell",
                                     resolve_parameterization(term, study))  # fmt: skip
        pm.Binomial("s", n=cells["n"].to_numpy(), logit_p=eta, observed=observed_calls(study),
                    dims="cell")  # fmt: skip
    return model


def probabilities(
    posterior: xr.Dataset, study: StudyData, rng: np.random.Generator
) -> tuple[np.ndarray, np.ndarray, StatusDraws]:
    """(S, part, appraiser) call probabilities of the reference-aware logit, the linear
    predictor without the interaction (for the integrated cell likelihood), and the
    parameters. Empty cells get their interaction effect from its prior given the draw's
    scale (its posterior, since no call informs it)."""
    d = status_draws(posterior, study)
    status = study.reference.to_numpy().astype(int)
    s = d.intercept.shape[0]
    n_parts, n_app = len(study.parts), len(study.appraisers)
    base = d.intercept[:, status][:, :, None] + d.part_effect[:, :, None]
    base = base + np.transpose(d.appraiser_effect[:, :, status], (0, 2, 1))
    c = rng.standard_normal((s, n_parts, n_app)) * d.sigma_interaction[:, None, None]
    if "interaction_effect" in posterior:
        cells = study.cells
        c[:, cells["part_index"].to_numpy(), cells["appraiser_index"].to_numpy()] = draws_of(
            posterior, "interaction_effect"
        )
    return expit(base + c), base, d, expit(-(base + c))


def rates(p: np.ndarray, d: StatusDraws, study: StudyData) -> dict:
    """Rates of both scopes: {scope: {level: {key: draws}}}."""
    status = study.reference.to_numpy().astype(float)
    weight = np.broadcast_to(status, p.shape[:2])
    return {
        "study": study_rates(p, p, weight, called_mask(study)),
        "population": population_rates(
            d.intercept,
            d.appraiser_effect,
            d.sigma_part,
            d.sigma_appraiser,
            d.sigma_interaction,
            float(status.mean()),
        ),
    }


def _population_by_status(
    eta_part: np.ndarray, status: np.ndarray, sigma_b: np.ndarray, sigma_c: np.ndarray,
    split: bool,
) -> dict[str, np.ndarray]:  # fmt: skip
    """Population decomposition per part when the appraiser scale depends on the part's
    status (``sigma_b`` (S, 2)): parts of each status are integrated with their scale."""
    out: dict[str, np.ndarray] = {}
    for r in (0, 1):
        sel = np.flatnonzero(status == r)
        if sel.size == 0:
            continue
        pieces = decompose_population_logit(
            eta_part[:, sel], np.sqrt(sigma_b[:, r] ** 2 + sigma_c**2)
        )
        if split:
            pieces.update(split_reproducibility_logit(eta_part[:, sel], sigma_b[:, r], sigma_c))
        for key, values in pieces.items():
            out.setdefault(key, np.empty(eta_part.shape))[:, sel] = values
    return out


def latent(posterior: xr.Dataset, spec, study: StudyData, rng) -> LatentDraws:
    p, base, d, q = probabilities(posterior, study, rng)
    status = study.reference.to_numpy().astype(int)
    eta_part = d.intercept[:, status] + d.part_effect
    split = "sigma_appraiser" in posterior and "sigma_interaction" in posterior
    population = _population_by_status(
        eta_part, status, d.sigma_appraiser, d.sigma_interaction, split
    )
    cells = study.cells
    part, app = cells["part_index"].to_numpy(), cells["appraiser_index"].to_numpy()
    n, k = cells["n"].to_numpy(), cells["s"].to_numpy()
    if "interaction_effect" in posterior:
        log_lik = integrated_cell_log_lik(base[:, part, app], d.sigma_interaction, n, k)
    else:
        eta_cell = base[:, part, app]
        log_lik = log_binom_coef(n, k) + k * log_expit(eta_cell) + (n - k) * log_expit(-eta_cell)
    extra = rate_variables(rates(p, d, study))
    return LatentDraws(p, population, log_lik, extra, q_study=q)


def prior_draws(spec: ModelSpec, study: StudyData, rng: np.random.Generator, draws: int):
    intercepts = forward.status_intercepts(spec, rng, draws, ordered=False)
    out = {"intercept": (("status",), intercepts)}
    out.update(forward.group_effects(spec, study, rng, draws, ("part",)))
    out.update(forward.appraiser_by_status(spec, study, rng, draws))
    out.update(forward.group_effects(spec, study, rng, draws, ("interaction",)))
    return out


def cell_probabilities(posterior: xr.Dataset, spec, study: StudyData, rng) -> np.ndarray:
    """The same parts with their reference status, effects from the draw."""
    part, app = cell_index(study)
    return probabilities(posterior, study, rng)[0][:, part, app]


def stratified_calls(posterior: xr.Dataset, spec, study: StudyData, mix, rng) -> CallNodes:
    """Production as the study's own parts, reweighted to production's strata
    (docs/statistics.md, "Strata"): part i weighs share(s(i)) / (parts of s(i)); its
    calls are the model's p_ij in each draw (an uncalled cell's interaction effect
    from its prior given the draw's scale)."""
    p = probabilities(posterior, study, rng)[0]  # (S, part, appraiser)
    status = study.reference.to_numpy().astype(int)
    stratum = study.stratum.to_numpy()
    shares = mix.stratum_shares()
    counts = {name: int((stratum == name).sum()) for name in shares}
    weight = np.array([shares[s] / counts[s] for s in stratum])
    parts = [np.flatnonzero((status == r) & (weight > 0)) for r in (0, 1)]
    for r, which in enumerate(parts):
        if which.size == 0:
            kind = "bad" if r else "good"
            raise DataError(
                f"{mix.source}: no {kind} part in the strata with a share of production; "
                f"a stratum with {kind} parts needs a share above 0"
            )
    part_weight = tuple(weight[which] / weight[which].sum() for which in parts)

    def calls(block: slice, r: int) -> np.ndarray:
        return p[block][:, parts[r], :, None]

    bad_share = float(weight[parts[1]].sum() / weight.sum())
    return CallNodes(p.shape[0], part_weight, np.ones(1), calls, bad_share=bad_share)


FAMILY = Family(
    info=INFO,
    build=build,
    prior_draws=prior_draws,
    latent=latent,
    cell_probabilities=cell_probabilities,
    hyper_parameters=status_hyper_parameters,
    memory_per_draw=cell_memory,
    per_status_scales=PER_STATUS_SCALES,
    appraiser_rows=True,
    statements=STATEMENTS,
    simulated=True,
    simulated_parts="reference",
    default_plan_target="study__system__false_accept_rate",
    production_calls=production_calls,
    stratified_calls=stratified_calls,
)
