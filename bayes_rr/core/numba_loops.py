"""The loops behind :mod:`bayes_rr.core.kernels`, as plain functions that it compiles with numba.

``numba.prange`` runs as ``range`` in plain Python, so the functions also run (slowly)
without compilation.
"""

import math

import numba
import numpy as np

LINEAR_SUM_LOGIT_LIMIT = 300.0
"""Cells whose logit is within this of 0 have their likelihood terms summed directly
(exp(-eta) and the nodes' products stay finite); beyond it, on the log scale."""


def nested_moments(eta, outer_scale, inner_scale, u_out, w_out, u_in, w_in):
    # With m1(b) = E_c[p], m2(b) = E_c[p^2], p = expit(eta + b + c), b ~ N(0, outer^2),
    # c ~ N(0, inner^2): E_b[m1], E_b[m1^2] and E_b[m2 - m1^2].
    # expit(x) = 1 / (1 + exp(-eta) exp(-b) exp(-c)): the exponentials of the nodes are
    # taken once per draw, so the innermost loop has no exp at all.
    draws, parts = eta.shape
    n_out = u_out.size
    n_in = u_in.size
    mean = np.empty((draws, parts))
    square = np.empty((draws, parts))
    spread = np.empty((draws, parts))
    for s in numba.prange(draws):
        e_out = np.exp(-outer_scale[s] * u_out)
        e_in = np.exp(-inner_scale[s] * u_in)
        for i in range(parts):
            # exp(-eta) may be 0 or inf at extreme logits: p is then 1 or 0, the
            # limits in double precision (no node factor is 0 or inf)
            e_eta = np.exp(-eta[s, i])
            first = 0.0
            second = 0.0
            inner_var = 0.0
            for k in range(n_out):
                a = e_eta * e_out[k]
                m1 = 0.0
                m2 = 0.0
                for j in range(n_in):
                    p = 1.0 / (1.0 + a * e_in[j])
                    wp = w_in[j] * p
                    m1 += wp
                    m2 += wp * p
                first += w_out[k] * m1
                second += w_out[k] * m1 * m1
                inner_var += w_out[k] * (m2 - m1 * m1)
            mean[s, i] = first
            square[s, i] = second
            spread[s, i] = inner_var
    return mean, square, spread


SMALLEST_LINEAR_SUM = 1e-280
"""Below this the direct sum of a cell's terms may have lost digits to underflow; such a
cell is summed again on the log scale."""


def logistic_moments(eta, scale, u, w):
    # E[p] and E[p^2] for p = expit(eta + scale z), z ~ N(0, 1), by the rule (u, w), per
    # (draw, element); as in nested_moments, no exp in the node loop.
    draws, size = eta.shape
    first = np.empty((draws, size))
    second = np.empty((draws, size))
    for s in numba.prange(draws):
        e_node = np.exp(-scale[s] * u)
        for i in range(size):
            e_eta = np.exp(-eta[s, i])
            m1 = 0.0
            m2 = 0.0
            for j in range(u.size):
                p = 1.0 / (1.0 + e_eta * e_node[j])
                wp = w[j] * p
                m1 += wp
                m2 += wp * p
            first[s, i] = m1
            second[s, i] = m2
    return first, second


def logistic_plus_normal_cdf(x, a, b, u, w_u, v, w_v):
    # P(a L + b U <= x) for L standard logistic and U standard normal, per (draw,
    # element), a and b per draw. The smoother of the two integrands is summed: over U
    # (rule u, w_u) when b <= a, where expit((x - b U) / a) varies on a scale of a / b
    # >= 1 in U; over L (rule v, w_v) otherwise, where Phi((x - a L) / b) does in L.
    draws, size = x.shape
    out = np.empty((draws, size))
    root_half = 0.7071067811865476
    for s in numba.prange(draws):
        over_normal = b[s] <= a[s]
        for i in range(size):
            total = 0.0
            if over_normal:
                for j in range(u.size):
                    total += w_u[j] / (1.0 + np.exp(-(x[s, i] - b[s] * u[j]) / a[s]))
            else:
                for j in range(v.size):
                    total += w_v[j] * 0.5 * math.erfc(-(x[s, i] - a[s] * v[j]) / b[s] * root_half)
            out[s, i] = total
    return out


def log_integrated_binomial(eta, scale, n, k, u, log_w):
    # log sum_l w_l p_l^k (1 - p_l)^(n - k), p_l = expit(x_l), x_l = eta + scale * u_l,
    # without the binomial coefficient. With t_l = exp(-x_l) = exp(-eta) exp(-scale u_l),
    # p = 1 / (1 + t) and 1 - p = t p: the exponentials are taken once per draw and per
    # cell, and the node loop only multiplies and divides (the counts are whole numbers).
    draws, cells = eta.shape
    out = np.empty((draws, cells))
    w = np.exp(log_w)
    for s in numba.prange(draws):
        scaled = scale[s] * u
        f = np.exp(-scaled)
        for c in range(cells):
            e = eta[s, c]
            rejects = int(k[c])
            accepts = int(n[c]) - rejects
            if abs(e) <= LINEAR_SUM_LOGIT_LIMIT:
                big_e = np.exp(-e)
                total = 0.0
                for j in range(u.size):
                    t = big_e * f[j]
                    if t > 1e300:
                        p = 1.0 / t
                        q = 1.0
                    else:
                        p = 1.0 / (1.0 + t)
                        q = t * p
                    term = w[j]
                    for _ in range(rejects):
                        term *= p
                    for _ in range(accepts):
                        term *= q
                    total += term
                if total > SMALLEST_LINEAR_SUM and total < np.inf:
                    out[s, c] = np.log(total)
                    continue
            # streaming log-sum-exp of log w_l + accepts (-x_l) - n log(1 + exp(-x_l)):
            # slower, safe for any counts
            top = -np.inf
            acc = 0.0
            for j in range(u.size):
                minus_x = -scaled[j] - e
                if minus_x > 0.0:
                    log_one_plus_t = minus_x + np.log1p(np.exp(-minus_x))
                else:
                    log_one_plus_t = np.log1p(np.exp(minus_x))
                term_log = log_w[j] + accepts * minus_x - n[c] * log_one_plus_t
                if term_log > top:
                    acc = acc * np.exp(top - term_log) + 1.0
                    top = term_log
                else:
                    acc += np.exp(term_log - top)
            out[s, c] = top + np.log(acc)
    return out


def rank_scores(rows, order, score_of_doubled_rank, probs):
    # Per row (one quantity's pooled draws) and its ascending ``order`` (numpy's argsort,
    # faster than numba's): normal scores of the average ranks of the draws and of their
    # distances from the median, the median, and quantiles at ``probs`` (numpy's default
    # linear rule). The distances are sorted by merging the two halves of the sorted
    # row, no second sort. ``score_of_doubled_rank[d]`` is the score of average rank d / 2.
    count, size = rows.shape
    scores = np.empty((count, size))
    folded_scores = np.empty((count, size))
    medians = np.empty(count)
    quantiles = np.empty((count, probs.size))
    for c in numba.prange(count):
        row = rows[c]
        ordered = row[order[c]]
        half = size // 2
        # numpy's median: the middle draw, or the mean of the middle two
        median = ordered[half] if size % 2 == 1 else (ordered[half - 1] + ordered[half]) / 2.0
        medians[c] = median
        for q in range(probs.size):
            index = probs[q] * (size - 1)
            below = min(max(int(np.floor(index)), 0), size - 1)
            above = min(below + 1, size - 1)
            gamma = index - below
            low = ordered[below]
            step = ordered[above] - low
            if gamma >= 0.5:
                quantiles[c, q] = ordered[above] - step * (1.0 - gamma)
            else:
                quantiles[c, q] = low + step * gamma
        # distances from the median in ascending order: merge the part below the
        # median (read downwards) with the part at or above it (read upwards)
        folded_order = np.empty(size, dtype=np.int64)
        folded = np.empty(size)
        split = 0
        while split < size and ordered[split] < median:
            split += 1
        left = split - 1
        right = split
        for j in range(size):
            take_left = False
            if left >= 0:
                if right >= size:
                    take_left = True
                else:
                    take_left = (median - ordered[left]) < (ordered[right] - median)
            if take_left:
                folded[j] = median - ordered[left]
                folded_order[j] = order[c, left]
                left -= 1
            else:
                folded[j] = ordered[right] - median
                folded_order[j] = order[c, right]
                right += 1
        for which in range(2):
            if which == 0:
                values = ordered
                positions = order[c]
                out = scores[c]
            else:
                values = folded
                positions = folded_order
                out = folded_scores[c]
            # tied runs share the average of their ranks
            start = 0
            while start < size:
                end = start + 1
                while end < size and values[end] == values[start]:
                    end += 1
                score = score_of_doubled_rank[start + 1 + end]
                for j in range(start, end):
                    out[positions[j]] = score
                start = end
    return scores, folded_scores, medians, quantiles


@numba.njit(inline="always")
def _mean_autocovariance(centred, lag):
    # mean over chains of the biased (divided by the draws) autocovariance at ``lag``
    chains, draws = centred.shape
    total = 0.0
    for c in range(chains):
        acc = 0.0
        for i in range(draws - lag):
            acc += centred[c, i] * centred[c, i + lag]
        total += acc / draws
    return total / chains


def geyer_ess(columns, max_lag):
    # Effective sample size of each column (K, chains, draws) by Geyer's initial positive
    # and monotone sequences, as ArviZ's ``_ess``, with each lag's autocovariance summed
    # directly when it is first needed: mixing chains stop after a few lags, far cheaper
    # than a whole FFT. A column still going past ``max_lag`` is flagged for the FFT path.
    count, chains, draws = columns.shape
    ess = np.full(count, np.nan)
    unfinished = np.zeros(count, dtype=np.bool_)
    for q in numba.prange(count):
        x = columns[q]
        centred = np.empty((chains, draws))
        chain_means = np.empty(chains)
        for c in range(chains):
            total = 0.0
            for i in range(draws):
                total += x[c, i]
            chain_means[c] = total / draws
            for i in range(draws):
                centred[c, i] = x[c, i] - chain_means[c]
        # mean over chains of the biased autocovariance at each lag, filled on demand
        acov = np.empty(min(draws, max_lag + 3))
        acov[0] = _mean_autocovariance(centred, 0)
        acov[1] = _mean_autocovariance(centred, 1)
        known = 2
        mean_var = acov[0] * draws / (draws - 1.0)
        var_plus = mean_var * (draws - 1.0) / draws
        if chains > 1:
            grand = 0.0
            for c in range(chains):
                grand += chain_means[c]
            grand /= chains
            spread = 0.0
            for c in range(chains):
                spread += (chain_means[c] - grand) ** 2
            var_plus += spread / (chains - 1)
        rho = np.zeros(draws)
        rho_even = 1.0
        rho[0] = rho_even
        rho_odd = 1.0 - (mean_var - acov[1]) / var_plus
        rho[1] = rho_odd
        t = 1
        stopped = False
        while t < draws - 3 and (rho_even + rho_odd) > 0.0:
            if t + 2 > max_lag:
                stopped = True
                break
            while known <= t + 2:
                acov[known] = _mean_autocovariance(centred, known)
                known += 1
            rho_even = 1.0 - (mean_var - acov[t + 1]) / var_plus
            rho_odd = 1.0 - (mean_var - acov[t + 2]) / var_plus
            if (rho_even + rho_odd) >= 0:
                rho[t + 1] = rho_even
                rho[t + 2] = rho_odd
            t += 2
        if stopped:
            unfinished[q] = True
            continue
        max_t = t - 2
        if rho_even > 0:
            rho[max_t + 1] = rho_even
        t = 1
        while t <= max_t - 2:
            if (rho[t + 1] + rho[t + 2]) > (rho[t - 1] + rho[t]):
                rho[t + 1] = (rho[t - 1] + rho[t]) / 2.0
                rho[t + 2] = rho[t + 1]
            t += 2
        total_draws = chains * draws
        head = 0.0
        for i in range(max_t + 1):
            head += rho[i]
        tail = rho[max_t + 1] if max_t + 1 < draws else 0.0
        tau = max(-1.0 + 2.0 * head + tail, 1.0 / np.log10(total_draws))
        has_nan = False
        for i in range(draws):
            if np.isnan(rho[i]):
                has_nan = True
        ess[q] = np.nan if has_nan else total_draws / tau
    return ess, unfinished
