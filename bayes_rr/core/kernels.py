"""Compiled inner loops of the estimands layer (numba, cached on disk).

The nested quadrature of the reproducibility split and the integrated cell
likelihood evaluate the logistic function some 10^8 times per fit. In numpy
that means large temporaries and repeated passes over them; these loops fuse
the work per (draw, part) or (draw, cell) and spread draws over the cores.
numba comes with PyTensor (PyMC's backend), so it is no extra dependency; it
is imported only when a kernel is first called, and the compiled code is
cached (``cache=True``), so only the first fit on a machine pays the compile.

Each kernel is a plain function of arrays; :mod:`bayes_rr.results.estimands` chooses the
quadrature rules and checks the results against ``scipy.integrate.quad`` in the
tests.
"""

from __future__ import annotations

from functools import cache

import numpy as np

SUMS_IN_ANY_ORDER = frozenset({"reassoc", "contract", "arcp"})
"""numba fast-math flags for the quadrature sums: reorder and fuse additions and
multiplications (vectorised node loops, about twice as fast; results move in the last
digit). Not the flags that assume no inf or NaN: the loops rely on exp overflowing to
inf at extreme logits."""


def _jit(function, *, cache_on_disk: bool = True, fastmath=frozenset()):
    import numba

    fastmath = set(fastmath) or False  # numba takes a set or a bool

    try:
        return numba.njit(cache=cache_on_disk, parallel=True, fastmath=fastmath)(function)
    except RuntimeError:
        # numba found no writable place for its cache (a read-only install and
        # home folder): compile in memory on every run instead of failing.
        return numba.njit(cache=False, parallel=True, fastmath=fastmath)(function)


@cache
def _compiled():
    # numba and the compiled loops load on first use only
    from bayes_rr.core import numba_loops as _numba_loops

    return (
        _jit(_numba_loops.nested_moments, fastmath=SUMS_IN_ANY_ORDER),
        _jit(_numba_loops.log_integrated_binomial, fastmath=SUMS_IN_ANY_ORDER),
        _jit(_numba_loops.rank_scores),
        _jit(_numba_loops.geyer_ess, fastmath=SUMS_IN_ANY_ORDER),
        _jit(_numba_loops.logistic_moments, fastmath=SUMS_IN_ANY_ORDER),
        _jit(_numba_loops.logistic_plus_normal_cdf, fastmath=SUMS_IN_ANY_ORDER),
        _jit(_numba_loops.draw_cell_effects),
    )


def _f64(x) -> np.ndarray:
    return np.ascontiguousarray(x, dtype=np.float64)


def nested_moments(
    eta: np.ndarray,
    outer_scale: np.ndarray,
    inner_scale: np.ndarray,
    outer_rule: tuple[np.ndarray, np.ndarray],
    inner_rule: tuple[np.ndarray, np.ndarray],
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """E_b[m1], E_b[m1^2] and E_b[m2 - m1^2] per (draw, part), with m1(b) = E_c[p] and
    m2(b) = E_c[p^2] for p = expit(eta + b + c), by the given standard-normal rules
    (outer over b, inner over c).

    ``eta`` (S, P); ``outer_scale``, ``inner_scale`` (S,); each rule is (nodes, weights)
    for E[f(Z)], Z ~ N(0, 1).
    """
    kernel = _compiled()[0]
    return kernel(
        _f64(eta),
        _f64(outer_scale),
        _f64(inner_scale),
        _f64(outer_rule[0]),
        _f64(outer_rule[1]),
        _f64(inner_rule[0]),
        _f64(inner_rule[1]),
    )


def log_integrated_binomial(
    eta: np.ndarray,
    scale: np.ndarray,
    n: np.ndarray,
    k: np.ndarray,
    nodes: np.ndarray,
    log_weights: np.ndarray,
) -> np.ndarray:
    """log of sum_l w_l expit(x_l)^k (1 - expit(x_l))^(n - k), x_l = eta + scale * u_l.

    ``eta`` (S, cell), ``scale`` (S,), ``n`` and ``k`` (cell,).
    """
    kernel = _compiled()[1]
    return kernel(_f64(eta), _f64(scale), _f64(n), _f64(k), _f64(nodes), _f64(log_weights))


def draw_cell_effects(
    eta: np.ndarray,
    scale: np.ndarray,
    n: np.ndarray,
    k: np.ndarray,
    seed: int,
    attempts: int = 32,
    step: float = 0.05,
    half_width: float = 8.5,
) -> np.ndarray:
    """Draws of c from p(c | eta, scale, k) proportional to N(c; 0, scale^2)
    Binomial(k | n, expit(eta + c)), one per (draw, cell).

    Rejection sampling from N(0, scale^2) (exact); a cell that rejects ``attempts``
    proposals (its calls disagree with its logit) inverts the distribution function of
    its density on a grid ``step`` apart on [-half_width, half_width] standard units,
    taken as linear between grid points. Each (draw, cell) has a random stream of its
    own from ``seed`` (counter-based), so the draws do not depend on the threads.

    ``eta`` (S, cell), ``scale`` (S,), ``n`` and ``k`` (cell,).
    """
    count = round(2 * half_width / step) + 1
    u = np.linspace(-half_width, half_width, count)
    kernel = _compiled()[6]
    z = kernel(_f64(eta), _f64(scale), _f64(n), _f64(k), u, int(seed) % 2**63, int(attempts))
    return z * np.asarray(scale, dtype=float)[:, None]


def _argsort_rows(rows: np.ndarray) -> np.ndarray:
    """``np.argsort(rows, axis=1)``, blocks of rows sorted in as many threads as the
    compiled loops use (numba's thread count; numpy's sort releases the GIL)."""
    from concurrent.futures import ThreadPoolExecutor

    import numba

    workers = min(numba.get_num_threads(), 8)
    if workers < 2 or rows.shape[0] < 64:
        return np.argsort(rows, axis=1)
    order = np.empty(rows.shape, dtype=np.intp)
    bounds = np.linspace(0, rows.shape[0], workers + 1).astype(int)

    def sort_block(block: int) -> None:
        start, stop = bounds[block], bounds[block + 1]
        order[start:stop] = np.argsort(rows[start:stop], axis=1)

    with ThreadPoolExecutor(workers) as pool:
        list(pool.map(sort_block, range(workers)))
    return order


def rank_scores(
    rows: np.ndarray, probs: np.ndarray
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Normal scores of the average ranks of each row and of its distances from its
    median, the median and the quantiles at ``probs``, from one sort of each row.

    ``rows`` (K, N). The scores are ``ndtri((r - 3/8) / (N + 1/4))`` for average rank r
    (Blom's rule, as in the rank-normalised r_hat); average ranks are multiples of 1/2,
    so the 2N + 1 possible scores are computed once. Quantiles follow numpy's default
    linear rule; the median is numpy's.
    """
    from scipy.special import ndtri

    rows = _f64(rows)
    size = rows.shape[1]
    doubled = np.arange(2 * size + 1) / 2.0
    table = ndtri((doubled - 3 / 8) / (size - 2 * 3 / 8 + 1))
    order = _argsort_rows(rows)
    kernel = _compiled()[2]
    return kernel(rows, order, table, _f64(np.atleast_1d(probs)))


def geyer_ess(x: np.ndarray, max_lag: int) -> tuple[np.ndarray, np.ndarray]:
    """ESS of each of the K quantities of ``x`` (chain, draw, K) by ArviZ's algorithm, with
    autocovariances summed lag by lag as needed; the second array flags the quantities
    that needed more than ``max_lag`` lags (left NaN, for the FFT path)."""
    return geyer_ess_rows(np.moveaxis(np.asarray(x, dtype=np.float64), 2, 0), max_lag)


def geyer_ess_rows(rows: np.ndarray, max_lag: int) -> tuple[np.ndarray, np.ndarray]:
    """:func:`geyer_ess` of a (K, chain, draw) array."""
    return _compiled()[3](_f64(rows), int(max_lag))


def logistic_moments(
    eta: np.ndarray, scale: np.ndarray, rule: tuple[np.ndarray, np.ndarray]
) -> tuple[np.ndarray, np.ndarray]:
    """E[p] and E[p^2] per (draw, element) for p = expit(eta + scale z), z ~ N(0, 1), by the
    standard-normal ``rule`` (nodes, weights). ``eta`` (S, E), ``scale`` (S,)."""
    kernel = _compiled()[4]
    return kernel(_f64(eta), _f64(scale), _f64(rule[0]), _f64(rule[1]))


def _trapezoid(density, half_width: float, step: float) -> tuple[np.ndarray, np.ndarray]:
    nodes = np.arange(-half_width, half_width + step / 2, step)
    weights = density(nodes)
    return nodes, weights / weights.sum()


CONVOLUTION_STEP = 0.5
"""Step of the trapezoid rules of :func:`logistic_plus_normal_cdf`. Both integrands are
analytic in a strip of half-width pi about the real axis (the logistic's poles at
i pi), where the normal factor grows up to exp(pi^2 / 2): the error falls like
exp(-2 pi^2 / step + pi^2 / 2), about 1e-15 at 0.5 (2e-9 measured at 0.75); the rules
end where the tails hold less than 3e-11 (logistic, |L| = 25; normal, |U| = 9)."""


def logistic_plus_normal_cdf(x: np.ndarray, a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """P(a L + b U <= x) per (draw, element), L standard logistic and U standard normal
    independent: a logistic curve of scale ``a`` averaged over a normal threshold of sd
    ``b`` (``x`` (S, E); ``a``, ``b`` (S,), a > 0, b >= 0)."""
    from scipy.special import expit
    from scipy.stats import norm

    u, w_u = _trapezoid(norm.pdf, 9.0, CONVOLUTION_STEP)
    v, w_v = _trapezoid(lambda t: expit(t) * expit(-t), 25.0, CONVOLUTION_STEP)
    kernel = _compiled()[5]
    return kernel(_f64(x), _f64(a), _f64(b), _f64(u), _f64(w_u), _f64(v), _f64(w_v))
