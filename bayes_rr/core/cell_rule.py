"""The fixed rule that integrates the crossed-logit's interaction out of a cell, and its check.

numpy only; the PyTensor operation that samples with it is
:mod:`bayes_rr.families.cell_integral`.
"""

from __future__ import annotations

from functools import cache

import numpy as np

MAX_CALLS_FOR_RULE = {3: 24, 6: 32}
"""Largest calls a cell -> Gauss-Hermite nodes. Against scipy.integrate.quad on every
k and logits -8..8 (tests/test_sampler_model.py; DEVELOPERS.md, "Large studies"): 24
nodes hold 6e-9 at sigma 1 and 5e-5 at sigma 1.65 (the default scale prior's 99.9%
point) for 3 calls, 32 nodes 6e-8 and 2e-4 for 6 calls. 16 nodes (1e-6 and 1e-3 for 3
calls) failed the check after sampling on the demo study (sigma drawn up to 1.73) and
the fit ran twice. Cells with more calls keep the interaction sampled."""

RULE_TOLERANCE = 0.01
"""Largest error of a study's log likelihood, summed over its cells, that the rule may
make at the largest interaction scales the posterior drew: the posterior density is
then off by at most a factor exp(0.01) there, far inside Monte Carlo error (our
choice). Above it the fit is redone with the interaction sampled."""

CHECKED_DRAWS = 8
"""How many of the largest interaction-scale draws the check recomputes densely."""


@cache
def gauss_hermite(nodes: int) -> tuple[np.ndarray, np.ndarray]:
    """Nodes and log weights for E[f(Z)], Z ~ N(0, 1) (probabilists' Hermite)."""
    x, w = np.polynomial.hermite_e.hermegauss(nodes)
    x.setflags(write=False)
    log_w = np.log(w / np.sqrt(2 * np.pi))
    log_w.setflags(write=False)
    return x, log_w


def rule_nodes(calls_per_cell: np.ndarray) -> int | None:
    """Nodes of the rule for a design, or None when its cells have too many calls."""
    most = int(np.max(calls_per_cell))
    for limit, nodes in sorted(MAX_CALLS_FOR_RULE.items()):
        if most <= limit:
            return nodes
    return None


def rule_log_lik(eta: np.ndarray, sigma: np.ndarray, n: np.ndarray, k: np.ndarray,
                 nodes: int) -> np.ndarray:  # fmt: skip
    """(S, cell) log E_z[p^k (1 - p)^(n - k)] by the fixed rule (no binomial coefficient)."""
    from bayes_rr.core.kernels import log_integrated_binomial

    x, log_w = gauss_hermite(nodes)
    return log_integrated_binomial(eta, sigma, n, k, x, log_w)


def rule_error(eta: np.ndarray, sigma: np.ndarray, n: np.ndarray, k: np.ndarray,
               nodes: int) -> dict:  # fmt: skip
    """The rule against the dense trapezoid rule of the log likelihood (itself checked
    against scipy.integrate.quad) at the CHECKED_DRAWS draws with the largest scale.

    ``eta`` (S, cell), ``sigma`` (S,). Returns the largest scale, the largest error of
    the study's log likelihood (summed over cells) and of one cell, and whether it is
    within RULE_TOLERANCE.
    """
    from bayes_rr.core.moments import integrated_cell_log_lik, log_binom_coef

    order = np.argsort(sigma)[::-1][:CHECKED_DRAWS]
    eta, sigma = eta[order], sigma[order]
    ours = rule_log_lik(eta, sigma, n, k, nodes) + log_binom_coef(n, k)
    dense = integrated_cell_log_lik(eta, sigma, n, k)
    error = np.abs(ours - dense)
    study_error = float(error.sum(axis=1).max())
    return {
        "nodes": nodes,
        "largest_scale": float(sigma[0]),
        "largest_study_log_lik_error": study_error,
        "largest_cell_log_lik_error": float(error.max()),
        "tolerance": RULE_TOLERANCE,
        "ok": bool(study_error <= RULE_TOLERANCE),
    }
