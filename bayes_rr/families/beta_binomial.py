"""The beta-binomial (family 1 of the statistical contract): appraisers exchangeable
within a part.

logit pi_i = mu + a_i (+ beta r_i); p_ij ~ Beta(pi_i phi, (1 - pi_i) phi), integrated
out of the likelihood, with rho = 1/(phi + 1) shared or per part.
"""

from __future__ import annotations

from functools import partial
from typing import TYPE_CHECKING

import numpy as np
import xarray as xr
from scipy import stats
from scipy.special import expit

from bayes_rr.core.moments import beta_draws, decompose_population_beta
from bayes_rr.families import forward
from bayes_rr.families.base import (
    Family,
    HyperParameter,
    LatentDraws,
    cell_index,
    cell_memory,
    draws_of,
    part_linear_predictor,
    single_intercept,
    term_hyper_parameters,
)
from bayes_rr.families.terms import PART_TERM, REFERENCE_TERM, FamilyInfo, prior

if TYPE_CHECKING:
    import pymc as pm

    from bayes_rr.priors.spec import ModelSpec
    from bayes_rr.study.data import StudyData

CONCENTRATION_PRIOR = prior("beta", alpha=1.0, beta=3.0)
CONCENTRATION_WHY = (
    "beta(1, 3) on rho = 1/(phi + 1), the share of a part's call variance due to "
    "appraisers differing: mean 0.25, most mass below 0.5, any value in (0, 1) possible."
)

INFO = FamilyInfo(
    "beta_binomial",
    "beta-binomial, appraisers exchangeable within a part: "
    "p_ij ~ Beta(pi_i phi, (1 - pi_i) phi) (docs/statistics.md family 1)",
    {t.name: t for t in (PART_TERM, REFERENCE_TERM)},
    required_terms=("part",),
    concentration_prior=CONCENTRATION_PRIOR,
)


def build(spec: ModelSpec, study: StudyData) -> pm.Model:
    """logit pi_i = mu + a_i (+ beta r_i); s_ij ~ BetaBinomial(n_ij, pi_i phi, (1-pi_i) phi),
    with rho = 1/(phi + 1) shared or per part."""
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
    part = cells["part_index"].to_numpy()
    term = spec.term("part")
    assert spec.concentration is not None  # the spec layer requires it for this family
    with pm.Model(coords=coords(study)) as model:
        eta = pymc_prior("intercept", spec.intercept)
        scale = pymc_prior("sigma_part", term.prior)
        effect = group_effect("part_effect", scale, "part", resolve_parameterization(term, study))
        eta = eta + effect[part] + reference_term(spec, study, part)
        pi = pm.math.invlogit(eta)
        if spec.concentration.sharing == "per_part":
            rho = pymc_prior("rho", spec.concentration.prior, dims="part")[part]
        else:
            rho = pymc_prior("rho", spec.concentration.prior)
        phi = 1.0 / rho - 1.0
        n = cells["n"].to_numpy()
        pm.CustomDist(
            "s",
            pi * phi,
            (1.0 - pi) * phi,
            n,
            logp=partial(beta_binomial_logp, longest=int(n.max())),
            random=beta_binomial_random,
            observed=observed_calls(study),
            dims="cell",
        )
    return model


def beta_binomial_logp(value, alpha, beta, n, *, longest: int):
    """log BetaBinomial(value | n, alpha, beta) as sums of logarithms.

    With rising factorials, P(s) = C(n, s) (alpha)_s (beta)_(n-s) / (alpha + beta)_n, so
    log P is log C(n, s) + sum_{k<s} log(alpha + k) + sum_{k<n-s} log(beta + k)
    - sum_{k<n} log(alpha + beta + k). A study has a few trials per cell, so these are
    a few logarithms per cell: the sampler's gradient then needs no log-gamma or
    digamma function of the parameters, which made this likelihood the costliest
    part of a fit. The same density as ``pm.BetaBinomial`` (tested against
    ``scipy.stats.betabinom``).
    """
    import pytensor.tensor as pt

    k = pt.arange(longest)[None, :]
    value = pt.as_tensor(value)
    n = pt.as_tensor(n)
    below = lambda m: pt.lt(k, m[:, None])  # noqa: E731
    alpha, beta = pt.as_tensor(alpha), pt.as_tensor(beta)
    alpha = pt.broadcast_to(alpha, value.shape)
    beta = pt.broadcast_to(beta, value.shape)
    log_choose = pt.gammaln(n + 1) - pt.gammaln(value + 1) - pt.gammaln(n - value + 1)
    rising = (
        pt.switch(below(value), pt.log(alpha[:, None] + k), 0.0).sum(axis=1)
        + pt.switch(below(n - value), pt.log(beta[:, None] + k), 0.0).sum(axis=1)
        - pt.switch(below(n), pt.log(alpha[:, None] + beta[:, None] + k), 0.0).sum(axis=1)
    )
    inside = pt.and_(pt.ge(value, 0), pt.le(value, n))
    return pt.switch(inside, log_choose + rising, -np.inf)


def beta_binomial_random(alpha, beta, n, rng=None, size=None):
    """Draws of the beta-binomial: a call probability from the beta, then the calls."""
    p = rng.beta(alpha, beta, size=size)
    return rng.binomial(n, p, size=size)


def prior_draws(spec: ModelSpec, study: StudyData, rng: np.random.Generator, draws: int):
    out = {"intercept": ((), forward.draw(spec.intercept, rng, (draws,)))}
    out.update(forward.group_effects(spec, study, rng, draws, ("part",)))
    out.update(forward.reference_effect(spec, study, rng, draws))
    concentration = spec.concentration.prior
    if spec.concentration.sharing == "per_part":
        out["rho"] = (("part",), forward.draw(concentration, rng, (draws, len(study.parts))))
    else:
        out["rho"] = ((), forward.draw(concentration, rng, (draws,)))
    return out


def parameters(posterior: xr.Dataset, study: StudyData) -> tuple[np.ndarray, np.ndarray]:
    """(S, part) pi_i and phi (per part, broadcast when shared)."""
    pi = expit(part_linear_predictor(posterior, study))
    rho = draws_of(posterior, "rho")
    rho = rho[:, None] if rho.ndim == 1 else rho
    return pi, np.broadcast_to(1.0 / rho - 1.0, pi.shape)


def latent(posterior: xr.Dataset, spec, study: StudyData, rng) -> LatentDraws:
    n_parts, n_app = len(study.parts), len(study.appraisers)
    pi, phi = parameters(posterior, study)
    n = np.zeros((n_parts, n_app))
    k = np.zeros((n_parts, n_app))
    cells = study.cells
    n[cells["part_index"], cells["appraiser_index"]] = cells["n"]
    k[cells["part_index"], cells["appraiser_index"]] = cells["s"]
    # Conjugate draws of p_ij given pi_i, phi and the cell's counts (the contract).
    alpha = (pi * phi)[:, :, None] + k[None]
    beta = ((1 - pi) * phi)[:, :, None] + (n - k)[None]
    p, q = beta_draws(rng, alpha, beta)
    part, _ = cell_index(study)
    log_lik = stats.betabinom.logpmf(
        cells["s"].to_numpy(),
        cells["n"].to_numpy(),
        (pi * phi)[:, part],
        ((1 - pi) * phi)[:, part],
    )
    return LatentDraws(p, decompose_population_beta(pi, phi), log_lik, q_study=q)


def cell_probabilities(posterior: xr.Dataset, spec, study: StudyData, rng) -> np.ndarray:
    """New p_ij ~ Beta(pi_i phi, (1 - pi_i) phi): the family integrates p_ij out of its
    likelihood, so a replicate draws them afresh."""
    pi, phi = parameters(posterior, study)
    part, _ = cell_index(study)
    a = (pi * phi)[:, part]
    b = ((1 - pi) * phi)[:, part]
    return rng.beta(np.maximum(a, 1e-300), np.maximum(b, 1e-300))


def hyper_parameters(spec: ModelSpec):
    return (
        single_intercept(spec),
        *term_hyper_parameters(spec),
        HyperParameter("rho", ("concentration", "prior"), spec.concentration.prior),
    )


FAMILY = Family(
    info=INFO,
    build=build,
    prior_draws=prior_draws,
    latent=latent,
    cell_probabilities=cell_probabilities,
    hyper_parameters=hyper_parameters,
    memory_per_draw=cell_memory,
    statements=("call_rate", "repeat_disagreement"),
    simulated=True,
    model_notes=(
        "This model treats the appraisers as exchangeable within each part: it ignores "
        "appraiser identity across parts, so an appraiser who leans towards reject on every "
        "part is not recognised as such. Per-appraiser results need the crossed-logit model.",
    ),
    cautions=(
        "The beta-binomial model ignores appraiser identity across parts (see the model section).",
    ),
)
