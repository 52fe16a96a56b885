"""Rank-normalised split r_hat and bulk/tail effective sample sizes, vectorised.

The algorithms of Vehtari, Gelman, Simpson, Carpenter & Buerkner (2021),
"Rank-normalization, folding, and localization: an improved R-hat", Bayesian
Analysis 16:667-718, as implemented in ArviZ (``az.rhat``, ``az.ess`` with
``method="bulk"`` / ``"tail"``), but for many quantities at once: ArviZ loops over
elements in Python, which made the summaries of a fit with ~1000 estimands the
slowest step. The tests hold these functions to ArviZ's values.

Arrays have shape (chain, draw, K): K quantities are diagnosed together.
"""

from __future__ import annotations

import math

import numpy as np
from scipy import fft as sp_fft
from scipy.fft import next_fast_len
from scipy.special import ndtri


def _split(x: np.ndarray) -> np.ndarray:
    half = x.shape[1] // 2
    return np.concatenate([x[:, :half], x[:, -half:]], axis=0)


MAX_TIE_RUNS = 64
"""Columns with more tied runs than this are ranked by ``scipy.stats.rankdata``."""


def average_ranks(flat: np.ndarray) -> np.ndarray:
    """Ranks (1-based, ties averaged) of each column: ``scipy.stats.rankdata(method="average",
    axis=0)`` with one argsort for all columns (rankdata along an axis is much slower).

    Ranks come from the inverse permutation; tied runs are then averaged one by
    one. Draws of continuous quantities rarely tie, but folding about the median
    ties the two middle draws of every column, so the few-runs case must be cheap.
    """
    from scipy.stats import rankdata

    rows = np.ascontiguousarray(np.asarray(flat, dtype=float).T)  # sort along contiguous rows
    size = rows.shape[1]
    order = np.argsort(rows, axis=1)
    ranks = np.empty_like(rows)
    np.put_along_axis(ranks, order, np.broadcast_to(np.arange(1.0, size + 1), rows.shape), axis=1)
    ordered = np.take_along_axis(rows, order, axis=1)
    equal_next = ordered[:, 1:] == ordered[:, :-1]
    for row in np.flatnonzero(equal_next.any(axis=1)):
        positions = np.flatnonzero(equal_next[row])
        # a run of ties spans positions start..end+1 in sorted order
        breaks = np.flatnonzero(np.diff(positions) > 1)
        starts = positions[np.r_[0, breaks + 1]]
        ends = positions[np.r_[breaks, positions.size - 1]]
        if starts.size > MAX_TIE_RUNS:
            ranks[row] = rankdata(rows[row], method="average")
            continue
        for start, end in zip(starts, ends, strict=True):
            ranks[row, order[row, start : end + 2]] = (start + end + 1) / 2 + 1
    return ranks.T


def _z_scale(x: np.ndarray) -> np.ndarray:
    m, n, k = x.shape
    ranks = average_ranks(x.reshape(m * n, k))
    size = m * n
    return ndtri((ranks - 3 / 8) / (size - 2 * 3 / 8 + 1)).reshape(x.shape)


def _basic_rhat(x: np.ndarray) -> np.ndarray:
    return _basic_rhat_rows(np.moveaxis(x, 2, 0))


def rhat(x: np.ndarray) -> np.ndarray:
    """max(bulk, tail) rank-normalised split r_hat of each of the K quantities."""
    x = np.asarray(x, dtype=float)
    split = _split(x)
    bulk = _basic_rhat(_z_scale(split))
    folded = np.abs(split - np.median(split.reshape(-1, split.shape[2]), axis=0))
    tail = _basic_rhat(_z_scale(folded))
    return np.maximum(bulk, tail)


def _autocov(x: np.ndarray) -> np.ndarray:
    n = x.shape[1]
    size = next_fast_len(2 * n)
    # transforms along the last, contiguous axis, on every core
    centred = np.ascontiguousarray(np.moveaxis(x - x.mean(axis=1, keepdims=True), 1, -1))
    spectrum = sp_fft.rfft(centred, n=size, axis=-1, workers=-1)
    power = spectrum.real**2 + spectrum.imag**2
    acov = sp_fft.irfft(power, n=size, axis=-1, workers=-1)[..., :n] / n
    return np.moveaxis(acov, -1, 1)


DIRECT_LAGS = 64
"""Lags summed directly before a quantity's ESS goes to the FFT path: a chain that mixes
stops Geyer's sequence within a few lags; one that needs more is rare and slow anyway."""


def _ess(x: np.ndarray) -> np.ndarray:
    """ESS of (chain, draw, K) with Geyer's initial positive and monotone sequences.

    Autocovariances are summed directly, lag by lag, while the sequence runs (compiled,
    over all cores); quantities whose sequence runs past DIRECT_LAGS lags take the FFT
    path (:func:`_ess_by_fft`). Both give ArviZ's ESS.
    """
    from bayes_rr.core.kernels import geyer_ess

    x = np.asarray(x, dtype=float)
    m, n = x.shape[:2]
    ess, unfinished = geyer_ess(x, DIRECT_LAGS)
    if unfinished.any():
        ess[unfinished] = _ess_by_fft(x[:, :, unfinished])
    constant = (x.max(axis=(0, 1)) - x.min(axis=(0, 1))) < np.finfo(float).resolution
    return np.where(constant, float(m * n), ess)


def _ess_by_fft(x: np.ndarray) -> np.ndarray:
    """ESS of (chain, draw, K), all lags' autocovariances at once by FFT."""
    m, n, k = x.shape
    acov = _autocov(x)
    mean_acov = acov.mean(axis=0)  # (n, K)
    mean_var = mean_acov[0] * n / (n - 1.0)
    var_plus = mean_var * (n - 1.0) / n
    if m > 1:
        var_plus = var_plus + x.mean(axis=1).var(axis=0, ddof=1)
    with np.errstate(divide="ignore", invalid="ignore"):
        rho = np.zeros((n, k))
        rho[0] = 1.0
        rho_even = np.ones(k)
        rho_odd = 1.0 - (mean_var - mean_acov[1]) / var_plus
        rho[1] = rho_odd
        t_end = np.ones(k, dtype=int)
        active = np.ones(k, dtype=bool)
        t = 1
        while t < n - 3:
            active &= (rho_even + rho_odd) > 0.0
            if not active.any():
                break
            new_even = 1.0 - (mean_var - mean_acov[t + 1]) / var_plus
            new_odd = 1.0 - (mean_var - mean_acov[t + 2]) / var_plus
            rho_even = np.where(active, new_even, rho_even)
            rho_odd = np.where(active, new_odd, rho_odd)
            keep = active & ((new_even + new_odd) >= 0)
            rho[t + 1] = np.where(keep, new_even, rho[t + 1])
            rho[t + 2] = np.where(keep, new_odd, rho[t + 2])
            t_end = np.where(active, t + 2, t_end)
            t += 2
        max_t = t_end - 2
        columns = np.arange(k)
        improve = rho_even > 0
        rho[max_t[improve] + 1, columns[improve]] = rho_even[improve]
        t = 1
        while t <= max_t.max() - 2:
            live = t <= max_t - 2
            raise_ = live & ((rho[t + 1] + rho[t + 2]) > (rho[t - 1] + rho[t]))
            mean_pair = (rho[t - 1] + rho[t]) / 2.0
            rho[t + 1] = np.where(raise_, mean_pair, rho[t + 1])
            rho[t + 2] = np.where(raise_, mean_pair, rho[t + 2])
            t += 2
        lags = np.arange(n)[:, None]
        head = (rho * (lags <= max_t[None, :])).sum(axis=0)
        last = rho[np.minimum(max_t + 1, n - 1), columns] * (max_t + 1 < n)
        tau = -1.0 + 2.0 * head + last
        total = m * n
        tau = np.maximum(tau, 1 / math.log10(total))
        ess = total / tau
    ess = np.where(np.isnan(rho).any(axis=0), np.nan, ess)
    constant = (x.max(axis=(0, 1)) - x.min(axis=(0, 1))) < np.finfo(float).resolution
    return np.where(constant, float(m * n), ess)


def ess_bulk(x: np.ndarray) -> np.ndarray:
    """Bulk ESS: ESS of the rank-normalised split chains."""
    return _ess(_z_scale(_split(np.asarray(x, dtype=float))))


TAIL_PROBS = (0.05, 0.95)


def ess_tail(x: np.ndarray) -> np.ndarray:
    """Tail ESS: the smaller ESS of the 5% and 95% quantile indicators (split chains)."""
    x = np.asarray(x, dtype=float)
    flat = x.reshape(-1, x.shape[2])
    out = None
    for prob in TAIL_PROBS:
        q = np.quantile(flat, prob, axis=0)
        ess = _ess(_split((x <= q).astype(float)))
        out = ess if out is None else np.minimum(out, ess)
    return out


def hdi(x: np.ndarray, prob: float) -> tuple[np.ndarray, np.ndarray]:
    """Narrowest interval holding ``prob`` of the draws of each of the K quantities
    (the same rule as ``az.hdi`` for unimodal posteriors)."""
    flat = np.sort(np.asarray(x, dtype=float).reshape(-1, x.shape[2]), axis=0)
    size = flat.shape[0]
    inside = int(np.floor(prob * size))
    widths = flat[inside:] - flat[: size - inside]
    start = np.argmin(widths, axis=0)
    columns = np.arange(flat.shape[1])
    return flat[start, columns], flat[start + inside, columns]


def _diagnose_by_sorting_twice(x: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    split = _split(x)
    z = _z_scale(split)
    folded = np.abs(split - np.median(split.reshape(-1, split.shape[2]), axis=0))
    r_hat = np.maximum(_basic_rhat(z), _basic_rhat(_z_scale(folded)))
    return r_hat, _ess(z), ess_tail(x)


def describe_draws(x: np.ndarray, probs=()) -> dict[str, np.ndarray]:
    """r_hat, bulk and tail ESS, median and quantiles at ``probs`` of each of K quantities.

    One sort of each quantity's draws (and one of their distances from the median)
    gives the ranks of both r_hat terms, the median, the tail-ESS quantiles and the
    asked quantiles (numpy's default rule), in compiled loops over all cores; the
    result equals :func:`rhat`, :func:`ess_bulk`, :func:`ess_tail`, ``np.median`` and
    ``np.quantile`` (tests). With an odd number of draws the split chains leave out
    each chain's middle draw, so their ranks are not those of all draws: that case
    sorts twice.
    """
    from bayes_rr.core.kernels import rank_scores

    x = np.asarray(x, dtype=float)
    m, n, k = x.shape
    probs = np.asarray(probs, dtype=float).reshape(-1)
    if n % 2 == 1 or n < 4:
        flat = x.reshape(-1, k)
        r_hat, bulk, tail = _diagnose_by_sorting_twice(x)
        return {
            "r_hat": r_hat,
            "ess_bulk": bulk,
            "ess_tail": tail,
            "median": np.median(flat, axis=0),
            "quantiles": np.quantile(flat, probs, axis=0).reshape(probs.size, k),
        }
    # One row a quantity, its chains one after another: a chain's two halves are then
    # two consecutive blocks, so the split chains are a free reshape (their order does
    # not matter to r_hat or ESS).
    rows = np.ascontiguousarray(np.moveaxis(x, 2, 0).reshape(k, m * n))
    scores, folded, median, quantiles = rank_scores(rows, np.r_[TAIL_PROBS, probs])
    split_shape = (k, 2 * m, n // 2)
    below = [rows <= quantiles[:, [j]] for j in range(len(TAIL_PROBS))]
    tail = _ess_rows(np.concatenate(below).astype(float).reshape(2 * k, 2 * m, n // 2))
    z = scores.reshape(split_shape)
    return {
        "r_hat": np.maximum(_basic_rhat_rows(z), _basic_rhat_rows(folded.reshape(split_shape))),
        "ess_bulk": _ess_rows(z),
        "ess_tail": np.minimum(tail[:k], tail[k:]),
        "median": median,
        "quantiles": quantiles[:, len(TAIL_PROBS) :].T,
    }


def _basic_rhat_rows(z: np.ndarray) -> np.ndarray:
    """:func:`_basic_rhat` of (K, chain, draw) arrays."""
    n = z.shape[2]
    between = n * z.mean(axis=2).var(axis=1, ddof=1)
    within = z.var(axis=2, ddof=1).mean(axis=1)
    with np.errstate(divide="ignore", invalid="ignore"):  # constant quantities: NaN
        return np.sqrt((between / within + n - 1) / n)


def _ess_rows(rows: np.ndarray) -> np.ndarray:
    """:func:`_ess` of (K, chain, draw) arrays, without moving axes."""
    from bayes_rr.core.kernels import geyer_ess_rows

    m, n = rows.shape[1:]
    ess, unfinished = geyer_ess_rows(rows, DIRECT_LAGS)
    if unfinished.any():
        ess[unfinished] = _ess_by_fft(np.moveaxis(rows[unfinished], 0, 2))
    constant = (rows.max(axis=(1, 2)) - rows.min(axis=(1, 2))) < np.finfo(float).resolution
    return np.where(constant, float(m * n), ess)


def diagnose(x: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(r_hat, ess_bulk, ess_tail) of each quantity (see :func:`describe_draws`)."""
    described = describe_draws(x)
    return described["r_hat"], described["ess_bulk"], described["ess_tail"]
