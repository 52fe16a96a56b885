"""Moments of call probabilities on the logit scale, beta draws and quadrature rules.

Numpy functions of arrays with draws on the leading axis; they know nothing of
studies or models. The families use them to turn posterior draws into the
population decomposition of the statistical contract (``docs/statistics.md``).
"""

from __future__ import annotations

import math
from functools import cache

import numpy as np
from scipy.special import gammaln

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
    from bayes_rr.core.kernels import logistic_moments

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
    from bayes_rr.core.kernels import nested_moments

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


def integrated_cell_log_lik(
    eta: np.ndarray, sigma: np.ndarray, n: np.ndarray, k: np.ndarray
) -> np.ndarray:
    """log of the integral of Binomial(k | n, expit(eta + c)) N(c; 0, sigma^2) dc per cell.

    ``eta`` (S, cell), ``sigma`` (S,). Trapezoid rule on the standard normal scale
    with a step that resolves the likelihood's peak (width about 2/(sigma sqrt(n)) in
    standard units): geometric convergence for this smooth integrand; checked
    against scipy.integrate.quad in the tests.
    """
    from bayes_rr.core.kernels import log_integrated_binomial

    sigma = np.asarray(sigma, dtype=float)
    peak = 0.7 / (max(float(sigma.max()), 1e-9) * math.sqrt(max(int(n.max()), 1)))
    count = min(401, math.ceil(17 / min(0.5, peak)) + 1)
    u = np.linspace(-8.5, 8.5, count)
    log_w = -0.5 * u * u - 0.5 * math.log(2 * math.pi) + math.log(u[1] - u[0])
    out = log_integrated_binomial(eta, sigma, n, k, u, log_w)
    return out + log_binom_coef(n, k)


def log_binom_coef(n: np.ndarray, k: np.ndarray) -> np.ndarray:
    return gammaln(n + 1) - gammaln(k + 1) - gammaln(n - k + 1)
