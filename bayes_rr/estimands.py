"""The quantities of estimands.md, computed from posterior draws.

A numpy core (functions of arrays with draws on the leading axes) under a thin
xarray layer that labels draws with ``chain``, ``draw``, ``part`` and
``appraiser``. Nothing here samples a model: the only randomness is the
conjugate or prior draw of latent call probabilities of cells, from a seeded
generator.

Keys and scopes (see estimands.md):

* per part (level ``part``), scopes ``study`` (the study's appraisers) and
  ``population`` (a new appraiser from the same population);
* study level (level ``study``): averages over the study's parts, their
  square roots, shares as ratios of averages;
* per appraiser (level ``appraiser``, scope ``study``): the appraiser's mean
  call rate over the study's parts (crossed logit only).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from functools import cache

import numpy as np
import xarray as xr
from scipy import stats
from scipy.special import expit, gammaln, log_expit

from bayes_rr import DEFAULT_PROB
from bayes_rr.data import StudyData
from bayes_rr.spec import ModelSpec

SEP = "__"
SCOPES = ("study", "population")
PER_PART_KEYS = (
    "call_rate",
    "rr_variance",
    "repeatability_variance",
    "reproducibility_variance",
    "reproducibility_share",
    "repeatability_share",
    "repeat_disagreement",
)
POPULATION_ONLY_KEYS = ("cross_disagreement", "appraiser_bias_variance", "interaction_variance")
STUDY_KEYS = (
    "call_rate",
    "rr_variance",
    "repeatability_variance",
    "reproducibility_variance",
    "rr_sd",
    "repeatability_sd",
    "reproducibility_sd",
    "reproducibility_share",
    "repeatability_share",
    "repeat_disagreement",
)

# Gauss-Hermite nodes needed for an absolute error below 1e-6 in E[p] and E[p^2]
# of p = expit(eta + z), z ~ N(0, s^2), for every eta in [-8, 8]: measured against
# scipy.integrate.quad (tests/test_estimands.py repeats the check). The
# integrand's poles at distance pi from the real axis make the node count grow
# with s.
GH_NODES_BY_SCALE = (
    (0.25, 8),
    (0.5, 12),
    (1.0, 20),
    (1.5, 32),
    (2.5, 64),
    (3.5, 96),
    (4.0, 128),
    (5.0, 200),
    (6.0, 256),
)


def variable_name(scope: str, level: str, key: str) -> str:
    return SEP.join((scope, level, key))


def parse_variable_name(name: str) -> tuple[str, str, str]:
    scope, level, key = name.split(SEP)
    return scope, level, key


# ---------------------------------------------------------------------------
# numpy core


def decompose_study(p: np.ndarray, q: np.ndarray | None = None) -> dict[str, np.ndarray]:
    """Study-scope per-part decomposition from call probabilities ``p`` (..., part, appraiser).

    pi = mean_j p, T = pi(1 - pi), V = mean_j (p - pi)^2, R = mean_j p(1 - p);
    T = R + V exactly. ``q`` is 1 - p computed without cancellation (see
    :class:`LatentDraws`): with it, T and R stay positive for p within 1e-16 of 1,
    and V is computed from whichever of p and q is small.
    """
    q = 1 - p if q is None else q
    pi = p.mean(axis=-1)
    qbar = q.mean(axis=-1)
    spread_p = ((p - pi[..., None]) ** 2).mean(axis=-1)
    spread_q = ((q - qbar[..., None]) ** 2).mean(axis=-1)
    return {
        "call_rate": pi,
        "rr_variance": pi * qbar,
        "repeatability_variance": (p * q).mean(axis=-1),
        "reproducibility_variance": np.where(pi <= 0.5, spread_p, spread_q),
    }


def beta_draws(
    rng: np.random.Generator, alpha: np.ndarray, beta: np.ndarray
) -> tuple[np.ndarray, np.ndarray]:
    """(p, 1 - p) of Beta(alpha, beta) draws, from gamma variates on the log scale.

    log G(a) = log G(a + 1) + log(U) / a (a gamma variate of shape a from one of shape
    a + 1; Marsaglia and Tsang 2000, section 5), so a small shape gives a very small
    but positive variate instead of an exact 0, and p and 1 - p are each computed
    from the logs: neither rounds to exactly 0 or 1 unless it is below 1e-308.
    """
    alpha, beta = np.broadcast_arrays(alpha, beta)
    log_g1 = np.log(rng.gamma(alpha + 1.0)) + np.log(rng.random(alpha.shape)) / alpha
    log_g2 = np.log(rng.gamma(beta + 1.0)) + np.log(rng.random(beta.shape)) / beta
    total = np.logaddexp(log_g1, log_g2)
    return np.exp(log_g1 - total), np.exp(log_g2 - total)


@cache
def gauss_hermite(nodes: int) -> tuple[np.ndarray, np.ndarray]:
    """Gauss-Hermite rule for the standard normal: E[f(Z)] ~ sum_k w_k f(u_k).

    Kept per node count (an eigenvalue problem each time otherwise); read-only.
    """
    x, w = np.polynomial.hermite.hermgauss(nodes)
    u, weights = math.sqrt(2.0) * x, w / math.sqrt(math.pi)
    u.flags.writeable = False
    weights.flags.writeable = False
    return u, weights


def _gh_rule(scale_max: float) -> tuple[np.ndarray, np.ndarray] | None:
    for limit, nodes in GH_NODES_BY_SCALE:
        if scale_max <= limit:
            return gauss_hermite(nodes)
    return None


def _trapezoid_rule(scale_max: float) -> tuple[np.ndarray, np.ndarray]:
    # Beyond s = 6 Gauss-Hermite needs too many nodes; the trapezoid rule on the
    # standard normal scale converges geometrically for this analytic integrand
    # (error below 1e-8 for s up to 8 with steps of 0.9/s; measured).
    step = 0.9 / scale_max
    u = np.arange(-8.5, 8.5 + step / 2, step)
    w = np.exp(-u * u / 2) / math.sqrt(2 * math.pi) * step
    return u, w


def quadrature_rule(scale_max: float) -> tuple[np.ndarray, np.ndarray]:
    """Nodes u and weights w with E[f(Z)] ~ sum w f(s u) for Z ~ N(0, s^2), s <= scale_max."""
    return _gh_rule(scale_max) or _trapezoid_rule(scale_max)


def _rule_index(scale: np.ndarray) -> np.ndarray:
    """Which quadrature rule each draw's scale needs (len(GH_NODES_BY_SCALE) = trapezoid)."""
    limits = np.array([limit for limit, _ in GH_NODES_BY_SCALE])
    return np.searchsorted(limits, scale, side="left")


def _rule_for_index(index: int, scale_max: float) -> tuple[np.ndarray, np.ndarray]:
    if index < len(GH_NODES_BY_SCALE):
        return _gh_rule(GH_NODES_BY_SCALE[index][0])  # type: ignore[return-value]
    return _trapezoid_rule(scale_max)


def logistic_normal_moments(eta: np.ndarray, scale: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """E[p] and E[p^2] for p = expit(eta + z), z ~ N(0, scale^2).

    ``eta`` has shape (S, ...) and ``scale`` shape (S,) (one scale per draw).
    Draws are grouped by the quadrature rule their scale needs, so a few draws
    in the tail of a scale's posterior do not make every draw expensive.
    """
    from bayes_rr.kernels import logistic_moments

    eta = np.asarray(eta, dtype=float)
    scale = np.broadcast_to(np.asarray(scale, dtype=float), eta.shape[:1])
    m1 = np.empty_like(eta)
    m2 = np.empty_like(eta)
    rule_of_draw = _rule_index(scale)
    for index in np.unique(rule_of_draw):
        draws = np.flatnonzero(rule_of_draw == index)
        rule = _rule_for_index(int(index), float(scale[draws].max()))
        first, second = logistic_moments(eta[draws].reshape(draws.size, -1), scale[draws], rule)
        m1[draws] = first.reshape(eta[draws].shape)
        m2[draws] = second.reshape(eta[draws].shape)
    return m1, m2


def decompose_population_logit(eta: np.ndarray, scale: np.ndarray) -> dict[str, np.ndarray]:
    """Population-scope decomposition for logit p = eta_i + z, z ~ N(0, scale^2)."""
    m1, m2 = logistic_normal_moments(eta, scale)
    return {
        "call_rate": m1,
        "rr_variance": m1 * (1 - m1),
        "repeatability_variance": m1 - m2,
        "reproducibility_variance": m2 - m1 * m1,
    }


def split_reproducibility_logit(
    eta: np.ndarray,
    sigma_appraiser: np.ndarray,
    sigma_interaction: np.ndarray,
) -> dict[str, np.ndarray]:
    """V = Var_b(E[p | b]) + E_b[Var(p | b)] for logit p = eta + b + c, b ~ N(0, sigma_a^2),
    c ~ N(0, sigma_c^2).

    With m1(b) = E_c[p | b] and m2(b) = E_c[p^2 | b], bias = E_b[m1^2] - E_b[m1]^2 and
    interaction = E_b[m2(b) - m1(b)^2], by nested quadrature (outer over b, inner
    over c). Both are weighted variances, so neither is negative beyond rounding;
    they add up to the population V within the quadrature error (1e-6).
    """
    from bayes_rr.kernels import nested_moments

    eta = np.asarray(eta, dtype=float)
    sigma_a = np.broadcast_to(np.asarray(sigma_appraiser, dtype=float), eta.shape[:1])
    sigma_c = np.broadcast_to(np.asarray(sigma_interaction, dtype=float), eta.shape[:1])
    bias = np.empty(eta.shape)
    interaction = np.empty(eta.shape)
    # Group draws by the pair of rules their two scales need (a handful of groups).
    outer_index, inner_index = _rule_index(sigma_a), _rule_index(sigma_c)
    for pair in np.unique(np.stack([outer_index, inner_index], axis=1), axis=0):
        draws = np.flatnonzero((outer_index == pair[0]) & (inner_index == pair[1]))
        outer = _rule_for_index(int(pair[0]), float(sigma_a[draws].max()))
        inner = _rule_for_index(int(pair[1]), float(sigma_c[draws].max()))
        mean, square, spread = nested_moments(
            eta[draws].reshape(draws.size, -1), sigma_a[draws], sigma_c[draws], outer, inner
        )
        bias[draws] = (square - mean * mean).reshape(eta[draws].shape)
        interaction[draws] = spread.reshape(eta[draws].shape)
    return {"appraiser_bias_variance": bias, "interaction_variance": interaction}


def decompose_population_beta(pi: np.ndarray, phi: np.ndarray) -> dict[str, np.ndarray]:
    """Beta-binomial: V = pi(1 - pi)/(phi + 1), R = T - V."""
    t = pi * (1 - pi)
    v = t / (phi + 1)
    return {
        "call_rate": pi,
        "rr_variance": t,
        "repeatability_variance": t - v,
        "reproducibility_variance": v,
    }


def add_shares(per_part: dict[str, np.ndarray], scope: str) -> dict[str, np.ndarray]:
    """Shares and disagreement probabilities of a per-part decomposition.

    Shares are missing (NaN) where T = 0, never 0/0 silently.
    """
    out = dict(per_part)
    t = per_part["rr_variance"]
    with np.errstate(divide="ignore", invalid="ignore"):
        out["reproducibility_share"] = np.where(
            t > 0, per_part["reproducibility_variance"] / t, np.nan
        )
        out["repeatability_share"] = np.where(t > 0, per_part["repeatability_variance"] / t, np.nan)
    out["repeat_disagreement"] = 2 * per_part["repeatability_variance"]
    if scope == "population":
        out["cross_disagreement"] = 2 * t
    return out


def study_level(per_part: dict[str, np.ndarray], scope: str) -> dict[str, np.ndarray]:
    """Averages over the study's parts (last axis); shares as ratios of averages."""
    mean = {k: v.mean(axis=-1) for k, v in per_part.items() if not k.endswith("_share")}
    t, r, v = mean["rr_variance"], mean["repeatability_variance"], mean["reproducibility_variance"]
    out = {
        "call_rate": mean["call_rate"],
        "rr_variance": t,
        "repeatability_variance": r,
        "reproducibility_variance": v,
        "rr_sd": np.sqrt(t),
        "repeatability_sd": np.sqrt(r),
        "reproducibility_sd": np.sqrt(np.clip(v, 0, None)),
        "reproducibility_share": v / t,
        "repeatability_share": r / t,
        "repeat_disagreement": 2 * r,
    }
    if scope == "population":
        out["cross_disagreement"] = 2 * t
        for key in ("appraiser_bias_variance", "interaction_variance"):
            if key in mean:
                out[key] = mean[key]
    return out


# ---------------------------------------------------------------------------
# from a posterior to labelled estimands


def _draws(posterior: xr.Dataset, name: str) -> np.ndarray:
    """(S, ...) array of a posterior variable with chain and draw stacked."""
    values = posterior[name].transpose("chain", "draw", ...).to_numpy()
    return values.reshape((-1, *values.shape[2:]))


def _optional(posterior: xr.Dataset, name: str, shape: tuple[int, ...]) -> np.ndarray:
    return _draws(posterior, name) if name in posterior else np.zeros(shape)


def _reference_shift(posterior: xr.Dataset, study: StudyData, n_draws: int) -> np.ndarray:
    if "reference_effect" not in posterior or study.reference is None:
        return np.zeros((n_draws, len(study.parts)))
    beta = _draws(posterior, "reference_effect")
    return beta[:, None] * study.reference.to_numpy(dtype=float)[None, :]


@dataclass(frozen=True)
class LatentDraws:
    """Per-draw latent quantities of a fit, the input of every estimand.

    ``p_study`` is None for a family without call probabilities per cell (latent
    class: the class of a part is summed out); ``extra`` holds family-specific
    estimands, ``(scope, level, key) -> (draws, dim or None)``; ``log_lik_dim`` is the
    unit of the log likelihood (``cell``, or ``part`` when the likelihood does not
    factor over a part's cells).
    """

    p_study: np.ndarray | None  # (S, part, appraiser)
    population: dict[str, np.ndarray]  # per-part population decomposition, (S, part)
    cell_log_lik: np.ndarray  # (S, cell or part): log P(calls | parameters), for LOO
    extra: dict = field(default_factory=dict)
    log_lik_dim: str = "cell"
    q_study: np.ndarray | None = None
    """1 - p_study computed without cancellation (expit(-eta), or from gamma variates),
    so p(1 - p) stays positive where p rounds to 1; None: 1 - p_study is used."""


def part_linear_predictor(posterior: xr.Dataset, study: StudyData) -> np.ndarray:
    """(S, part) logit of the call rate of each part for a typical appraiser:
    intercept + part effect (+ reference effect times the reference status)."""
    intercept = _draws(posterior, "intercept")
    s = intercept.shape[0]
    return (
        intercept[:, None]
        + _optional(posterior, "part_effect", (s, len(study.parts)))
        + _reference_shift(posterior, study, s)
    )


def cell_linear_predictor(posterior: xr.Dataset, study: StudyData) -> np.ndarray:
    """(S, cell) logit p_ij of the observed cells under the crossed logit family."""
    cells = study.cells
    part = cells["part_index"].to_numpy()
    app = cells["appraiser_index"].to_numpy()
    eta = part_linear_predictor(posterior, study)[:, part]
    if "appraiser_effect" in posterior:
        eta = eta + _draws(posterior, "appraiser_effect")[:, app]
    if "interaction_effect" in posterior:
        eta = eta + _draws(posterior, "interaction_effect")
    return eta


def beta_binomial_parameters(
    posterior: xr.Dataset, study: StudyData
) -> tuple[np.ndarray, np.ndarray]:
    """(S, part) pi_i and phi (per part, broadcast when shared) of the beta-binomial family."""
    pi = expit(part_linear_predictor(posterior, study))
    rho = _draws(posterior, "rho")
    rho = rho[:, None] if rho.ndim == 1 else rho
    return pi, np.broadcast_to(1.0 / rho - 1.0, pi.shape)


def latent_logit(posterior: xr.Dataset, study: StudyData, rng: np.random.Generator) -> LatentDraws:
    n_parts, n_app = len(study.parts), len(study.appraisers)
    eta_part = part_linear_predictor(posterior, study)
    s = eta_part.shape[0]
    b = _optional(posterior, "appraiser_effect", (s, n_app))
    sigma_b = _optional(posterior, "sigma_appraiser", (s,))
    sigma_c = _optional(posterior, "sigma_interaction", (s,))
    # Cells without calls get c_ij from its prior given sigma_c: the posterior of
    # an unobserved interaction effect.
    c = rng.standard_normal((s, n_parts, n_app)) * sigma_c[:, None, None]
    if "interaction_effect" in posterior:
        cells = study.cells
        c[:, cells["part_index"].to_numpy(), cells["appraiser_index"].to_numpy()] = _draws(
            posterior, "interaction_effect"
        )
    eta = eta_part[:, :, None] + b[:, None, :] + c
    p, q = expit(eta), expit(-eta)
    population = decompose_population_logit(eta_part, np.sqrt(sigma_b**2 + sigma_c**2))
    if "sigma_appraiser" in posterior and "sigma_interaction" in posterior:
        population.update(split_reproducibility_logit(eta_part, sigma_b, sigma_c))
    cells = study.cells
    part, app = cells["part_index"].to_numpy(), cells["appraiser_index"].to_numpy()
    n, k = cells["n"].to_numpy(), cells["s"].to_numpy()
    if "interaction_effect" in posterior:
        # Leave-one-cell-out needs the cell's likelihood with its own interaction
        # effect integrated out: that effect is informed by the cell alone.
        log_lik = integrated_cell_log_lik(eta_part[:, part] + b[:, app], sigma_c, n, k)
    else:
        eta_cell = eta[:, part, app]
        log_lik = _log_binom_coef(n, k) + k * log_expit(eta_cell) + (n - k) * log_expit(-eta_cell)
    return LatentDraws(p, population, log_lik, q_study=q)


def integrated_cell_log_lik(
    eta: np.ndarray, sigma: np.ndarray, n: np.ndarray, k: np.ndarray
) -> np.ndarray:
    """log of the integral of Binomial(k | n, expit(eta + c)) N(c; 0, sigma^2) dc per cell.

    ``eta`` (S, cell), ``sigma`` (S,). Trapezoid rule on the standard normal scale
    with a step that resolves the likelihood's peak (width about 2/(sigma sqrt(n)) in
    standard units): geometric convergence for this smooth integrand; checked
    against scipy.integrate.quad in the tests.
    """
    from bayes_rr.kernels import log_integrated_binomial

    sigma = np.asarray(sigma, dtype=float)
    peak = 0.7 / (max(float(sigma.max()), 1e-9) * math.sqrt(max(int(n.max()), 1)))
    count = min(401, math.ceil(17 / min(0.5, peak)) + 1)
    u = np.linspace(-8.5, 8.5, count)
    log_w = -0.5 * u * u - 0.5 * math.log(2 * math.pi) + math.log(u[1] - u[0])
    out = log_integrated_binomial(eta, sigma, n, k, u, log_w)
    return out + _log_binom_coef(n, k)


def _log_binom_coef(n: np.ndarray, k: np.ndarray) -> np.ndarray:
    return gammaln(n + 1) - gammaln(k + 1) - gammaln(n - k + 1)


def latent_beta_binomial(
    posterior: xr.Dataset, study: StudyData, rng: np.random.Generator
) -> LatentDraws:
    n_parts, n_app = len(study.parts), len(study.appraisers)
    pi, phi = beta_binomial_parameters(posterior, study)
    n = np.zeros((n_parts, n_app))
    k = np.zeros((n_parts, n_app))
    cells = study.cells
    n[cells["part_index"], cells["appraiser_index"]] = cells["n"]
    k[cells["part_index"], cells["appraiser_index"]] = cells["s"]
    # Conjugate draws of p_ij given pi_i, phi and the cell's counts (estimands.md).
    alpha = (pi * phi)[:, :, None] + k[None]
    beta = ((1 - pi) * phi)[:, :, None] + (n - k)[None]
    p, q = beta_draws(rng, alpha, beta)
    part = cells["part_index"].to_numpy()
    log_lik = stats.betabinom.logpmf(
        cells["s"].to_numpy(),
        cells["n"].to_numpy(),
        (pi * phi)[:, part],
        ((1 - pi) * phi)[:, part],
    )
    return LatentDraws(p, decompose_population_beta(pi, phi), log_lik, q_study=q)


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


def latent_reference_logit(
    posterior: xr.Dataset, study: StudyData, rng: np.random.Generator
) -> LatentDraws:
    from bayes_rr.wrong_calls import (
        rate_variables,
        reference_logit_probabilities,
        reference_logit_rates,
    )

    p, base, d, q = reference_logit_probabilities(posterior, study, rng)
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
        log_lik = _log_binom_coef(n, k) + k * log_expit(eta_cell) + (n - k) * log_expit(-eta_cell)
    extra = rate_variables(reference_logit_rates(p, d, study))
    return LatentDraws(p, population, log_lik, extra, q_study=q)


def latent_latent_class(
    posterior: xr.Dataset, study: StudyData, rng: np.random.Generator, spec: ModelSpec
) -> LatentDraws:
    from bayes_rr.wrong_calls import latent_class_rates

    extra, part_log_lik = latent_class_rates(posterior, study)
    return LatentDraws(None, {}, part_log_lik, extra, log_lik_dim="part")


LATENT = {
    "logit": latent_logit,
    "beta_binomial": latent_beta_binomial,
    "reference_logit": latent_reference_logit,
}


def latent_call_curve(
    posterior: xr.Dataset, study: StudyData, spec: ModelSpec, production=None
) -> LatentDraws:
    """Call curves: call probabilities of the study's parts, the limits and widths per
    appraiser and for the population, and (given a production distribution) the expected
    false reject and false accept rates of each appraiser and of the system."""
    from bayes_rr.curves import curve_probabilities, expected_rates
    from bayes_rr.families.layout import curve_design

    design = curve_design(study, spec.name)
    limits = np.array([value for _, value, _ in design["sides"]])
    signs = np.array([sign for _, _, sign in design["sides"]])
    scale = design["scale"]
    limit = _draws(posterior, "effective_limit")  # (S, appraiser, side)
    width = _draws(posterior, "transition_width")  # (S, appraiser)
    p = curve_probabilities(limit, width, design["x"], signs, spec.link)
    cells = study.cells
    part, app = cells["part_index"].to_numpy(), cells["appraiser_index"].to_numpy()
    n, k = cells["n"].to_numpy(), cells["s"].to_numpy()
    p_cell = np.clip(p[:, part, app], 1e-12, 1 - 1e-12)
    log_lik = _log_binom_coef(n, k) + k * np.log(p_cell) + (n - k) * np.log1p(-p_cell)
    bias_mean = _draws(posterior, "bias_mean")  # (S, side), standardised
    spread = _optional(posterior, "sigma_limit", bias_mean.shape[:1])
    log_width = _draws(posterior, "log_width_mean")
    side = ("appraiser", "side")
    extra = {
        ("study", "appraiser", "effective_limit"): (limit, side),
        ("study", "appraiser", "bias"): (limit - limits, side),
        ("study", "appraiser", "transition_width"): (width, "appraiser"),
        ("study", "system", "bias"): ((limit - limits).mean(axis=1), "side"),
        ("study", "system", "limit_spread"): (limit.std(axis=1), "side"),
        ("study", "system", "transition_width"): (width.mean(axis=1), None),
        ("population", "system", "effective_limit"): (limits + scale * bias_mean, "side"),
        ("population", "system", "bias"): (scale * bias_mean, "side"),
        ("population", "system", "limit_spread"): (scale * spread, None),
        ("population", "system", "transition_width"): (scale * np.exp(log_width), None),
    }
    if production is not None:
        rates = expected_rates(limit, width, limits, signs, spec.link, production)
        for key, values in rates.items():
            extra[("study", "appraiser", key)] = (values, "appraiser")
            extra[("study", "system", key)] = (values.mean(axis=1), None)
    return LatentDraws(p, {}, log_lik, extra)


def latent_draws(
    posterior: xr.Dataset, spec: ModelSpec, study: StudyData, seed: int = 0, production=None
) -> LatentDraws:
    """Latent call probabilities, population decomposition and cell log likelihood.

    ``production`` (a :class:`bayes_rr.curves.Production`) is used by the call curve
    family only: it turns the curves into expected false accept and reject rates.
    """
    rng = np.random.default_rng(seed)
    if spec.family == "latent_class":
        return latent_latent_class(posterior, study, rng, spec)
    if spec.family == "call_curve":
        return latent_call_curve(posterior, study, spec, production)
    return LATENT[spec.family](posterior, study, rng)


def log_likelihood_dataset(
    posterior: xr.Dataset, latent: LatentDraws, study: StudyData
) -> xr.Dataset:
    """The cell log likelihood as an ArviZ ``log_likelihood`` group (variable ``s``)."""
    chains, draws = posterior.sizes["chain"], posterior.sizes["draw"]
    cells = study.cells
    if latent.log_lik_dim == "part":
        labels = list(study.parts)
    else:
        labels = [f"{p} | {a}" for p, a in zip(cells["part"], cells["appraiser"], strict=True)]
    values = latent.cell_log_lik.reshape((chains, draws, -1))
    dim = latent.log_lik_dim
    return xr.Dataset(
        {"s": (("chain", "draw", dim), values)},
        coords={
            "chain": posterior["chain"].to_numpy(),
            "draw": posterior["draw"].to_numpy(),
            dim: labels,
        },
    )


def compute_estimands(
    posterior: xr.Dataset,
    spec: ModelSpec,
    study: StudyData,
    seed: int = 0,
    latent: LatentDraws | None = None,
) -> xr.Dataset:
    """Every estimand of the model as draws, labelled ``chain``, ``draw`` and ``part`` or
    ``appraiser``; variable names are ``scope__level__key``."""
    chains, draws = posterior.sizes["chain"], posterior.sizes["draw"]
    latent = latent or latent_draws(posterior, spec, study, seed)
    per_scope = {}
    if latent.p_study is not None:
        per_scope["study"] = add_shares(decompose_study(latent.p_study, latent.q_study), "study")
    if latent.population:
        per_scope["population"] = add_shares(latent.population, "population")
    coords = {
        "chain": posterior["chain"].to_numpy(),
        "draw": posterior["draw"].to_numpy(),
        "part": list(study.parts),
        "appraiser": list(study.appraisers),
    }
    if "side" in posterior.coords:
        coords["side"] = list(posterior["side"].to_numpy())
    variables: dict[str, xr.DataArray] = {}

    def put(scope: str, level: str, key: str, values: np.ndarray, dim) -> None:
        extra_dims = [] if dim is None else [dim] if isinstance(dim, str) else list(dim)
        dims = ["chain", "draw", *extra_dims]
        shaped = values.reshape((chains, draws, *values.shape[1:]))
        variables[variable_name(scope, level, key)] = xr.DataArray(
            shaped,
            dims=dims,
            coords={d: coords[d] for d in dims},
            attrs={"key": key, "scope": scope, "level": level},
        )

    for scope, per_part in per_scope.items():
        for key, values in per_part.items():
            put(scope, "part", key, values, "part")
        for key, values in study_level(per_part, scope).items():
            put(scope, "study", key, values, None)
    if spec.family in ("logit", "reference_logit", "call_curve"):
        p = latent.p_study
        q = 1 - p if latent.q_study is None else latent.q_study
        put("study", "appraiser", "call_rate", p.mean(axis=1), "appraiser")
        # each appraiser's own inconsistency: mean over the parts of p(1 - p)
        put("study", "appraiser", "repeatability_variance", (p * q).mean(axis=1),
            "appraiser")  # fmt: skip
    for (scope, level, key), (values, dim) in latent.extra.items():
        put(scope, level, key, values, dim)
    return xr.Dataset(variables, attrs={"seed": seed, "family": spec.family})


# ---------------------------------------------------------------------------
# summaries


@dataclass(frozen=True)
class SummaryRow:
    """Posterior summary of one estimand (a row of summary.json / summary.csv)."""

    key: str
    scope: str | None
    level: str
    part: str | None
    appraiser: str | None
    mean: float
    median: float
    sd: float
    lower: float
    upper: float
    r_hat: float
    ess_bulk: float
    ess_tail: float
    note: str | None = None


def _defined_summary(draws: np.ndarray, prob: float, interval: str) -> dict[str, float]:
    """Mean, median, sd and interval of the defined (non-NaN) draws of one quantity."""
    from bayes_rr import diagnostics

    defined = draws[np.isfinite(draws)]
    if interval == "hdi":
        lower, upper = diagnostics.hdi(defined.reshape(1, -1, 1), prob)
        lower, upper = float(lower[0]), float(upper[0])
    else:
        lower, upper = (float(v) for v in np.quantile(defined, [(1 - prob) / 2, (1 + prob) / 2]))
    return {
        "mean": float(defined.mean()),
        "median": float(np.median(defined)),
        "sd": float(defined.std(ddof=1)) if defined.size > 1 else math.nan,
        "lower": lower,
        "upper": upper,
    }


def summarize(
    ds: xr.Dataset, prob: float = DEFAULT_PROB, interval: str = "eti", *, level: str | None = None
) -> list[SummaryRow]:
    """Mean, median, sd, interval (``hdi`` or ``eti``), r_hat, ess_bulk and ess_tail of every
    variable of ``ds`` (estimands, or posterior parameters with ``level="parameter"``).

    All elements are diagnosed at once (``bayes_rr.diagnostics``, checked against ArviZ).
    """
    from bayes_rr import diagnostics

    if interval not in ("hdi", "eti"):
        raise ValueError(f"interval {interval!r}: expected 'hdi' or 'eti'")
    columns, labels = [], []
    for name, da in ds.data_vars.items():
        da = da.transpose("chain", "draw", ...)
        extra = list(da.dims[2:])
        values = da.to_numpy().reshape(da.sizes["chain"], da.sizes["draw"], -1)
        columns.append(values)
        # coordinate labels read once per variable (indexing xarray per row is slow)
        names = [[str(v) for v in da[d].to_numpy()] for d in extra]
        for idx in np.ndindex(*[da.sizes[d] for d in extra]) if extra else [()]:
            labels.append(
                (name, {d: names[j][i] for j, (d, i) in enumerate(zip(extra, idx, strict=True))})
            )
    if not columns:
        return []
    x = np.concatenate(columns, axis=2)
    # A share is undefined in draws where T = 0 (p within 1e-308 of 0 or 1 for every
    # appraiser): it is summarised over the other draws, with a note saying in how many
    # it was undefined, and stays in the convergence gate, its diagnostics computed
    # with the undefined draws set to the median of the others.
    missing = np.isnan(x)
    undefined = missing.mean(axis=(0, 1))
    raw = x
    if missing.any():
        partial = undefined < 1
        fill = np.zeros(x.shape[2])
        fill[partial] = np.nanmedian(x[:, :, partial].reshape(-1, int(partial.sum())), axis=0)
        x = np.where(missing, fill, x)
    flat = x.reshape(-1, x.shape[2])
    eti_probs = [(1 - prob) / 2, (1 + prob) / 2]
    described = diagnostics.describe_draws(x, eti_probs if interval == "eti" else ())
    if interval == "hdi":
        lower, upper = diagnostics.hdi(x, prob)
    else:
        lower, upper = described["quantiles"]
    stats_ = {
        "mean": flat.mean(axis=0),
        "median": described["median"],
        "sd": flat.std(axis=0, ddof=1),
        "lower": lower,
        "upper": upper,
        "r_hat": described["r_hat"],
        "ess_bulk": described["ess_bulk"],
        "ess_tail": described["ess_tail"],
    }
    rows = []
    for k, (name, where) in enumerate(labels):
        if level == "parameter":
            scope, lev, key = None, "parameter", name
        else:
            scope, lev, key = parse_variable_name(name)
        # Dims other than part and appraiser (a parameter's status) name the row's key.
        other = [f"{d}={v}" for d, v in where.items() if d not in ("part", "appraiser")]
        if other:
            key = f"{key}[{','.join(other)}]"
        values = {s: float(v[k]) for s, v in stats_.items()}
        note = None
        if undefined[k] == 1:
            values = dict.fromkeys(stats_, math.nan)
            note = "undefined in every draw (T = 0)"
        elif undefined[k] > 0:
            values.update(_defined_summary(raw[:, :, k], prob, interval))
            note = (
                f"undefined in {undefined[k]:.2%} of draws (T = 0); summarised over the other draws"
            )
        rows.append(
            SummaryRow(
                key, scope, lev, where.get("part"), where.get("appraiser"), **values, note=note
            )
        )
    return rows
