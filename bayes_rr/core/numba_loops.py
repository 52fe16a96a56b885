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


@numba.njit(cache=False, inline="always")
def _weighted_binomial_term(weight, t, rejects, accepts):
    # weight p^k (1 - p)^(n - k) and p for p = 1 / (1 + t), 1 - p = t p (whole-number
    # powers by multiplication); past t = 1e300, p = 1 / t and 1 - p = 1
    if t > 1e300:
        p = 1.0 / t
        q = 1.0
    else:
        p = 1.0 / (1.0 + t)
        q = t * p
    term = weight
    for _ in range(rejects):
        term *= p
    for _ in range(accepts):
        term *= q
    return term, p


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
                    total += _weighted_binomial_term(w[j], big_e * f[j], rejects, accepts)[0]
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


@numba.njit(cache=False)
def _cell_log_space(eta, sigma, n, k, x, log_w):
    # One cell of cell_integral_with_gradients in log space, for counts whose direct
    # sum underflows.
    count = x.size
    lp = np.empty(count)
    slope = np.empty(count)
    top = -np.inf
    for j in range(count):
        t = eta + sigma * x[j]
        e = math.exp(-abs(t))
        log_p = min(t, 0.0) - math.log1p(e)
        p = 1.0 / (1.0 + e) if t >= 0 else e / (1.0 + e)
        lp[j] = k * log_p + (n - k) * (log_p - t) + log_w[j]
        slope[j] = k - n * p
        top = max(top, lp[j])
    total = g_eta = g_sigma = 0.0
    for j in range(count):
        w = math.exp(lp[j] - top)
        total += w
        g_eta += w * slope[j]
        g_sigma += w * slope[j] * x[j]
    return top + math.log(total), g_eta / total, g_sigma / total


DIRECT_MAX_CALLS = 7
"""Cells with at most this many calls have their powers taken by three selected
multiplications (the node loop then has no inner loop and vectorizes); cells with more
go to the log-space sum."""


def cell_integral_with_gradients(eta, sigma, n, k, x, log_w):
    # Per cell: log sum_j w_j p_j^k (1 - p_j)^(n - k), p_j = expit(eta + sigma x_j), and
    # its derivatives in eta and sigma (the sampler needs value and gradient together).
    # With c = exp(-|eta|) <= 1 and t_j = c exp(-sigma x_j), r_j = 1 / (1 + t_j): for
    # eta >= 0, p = r and 1 - p = t r, so the term is w t^(n-k) r^n; for eta < 0 the
    # nodes are mirrored (the rule is symmetric: x -> -x, same weights) and 1 - p = r,
    # p = t r, the term w t^k r^n. Either way t stays below exp(sigma |x|) (no overflow
    # from eta), and nothing is pulled out of the sum. The loop runs over cells inside
    # a loop over nodes with no branch and no inner loop, so that it vectorizes (compile
    # it with error_model="numpy": numba's division check would stop that). Cells whose
    # sum underflows, with more than DIRECT_MAX_CALLS calls or |eta| past the limit are
    # summed again in log space.
    size = eta.size
    c = np.empty(size)
    lead = np.empty(size, dtype=np.int64)
    calls = np.empty(size, dtype=np.int64)
    for i in range(size):
        m = int(n[i])
        direct = m <= DIRECT_MAX_CALLS and abs(eta[i]) <= LINEAR_SUM_LOGIT_LIMIT
        c[i] = math.exp(-abs(eta[i])) if direct else 0.0
        calls[i] = m if direct else 0
        if not direct:
            lead[i] = 0
        elif eta[i] >= 0.0:
            lead[i] = m - int(k[i])
        else:
            lead[i] = int(k[i])
    s0 = np.zeros(size)
    s1 = np.zeros(size)
    s2 = np.zeros(size)
    s3 = np.zeros(size)
    for j in range(x.size):
        h = math.exp(-sigma * x[j])
        w = math.exp(log_w[j])
        xj = x[j]
        for i in range(size):
            t = c[i] * h
            r = 1.0 / (1.0 + t)
            a = lead[i]
            m = calls[i]
            t2 = t * t
            r2 = r * r
            t_power = (t if a & 1 else 1.0) * (t2 if a & 2 else 1.0) * (t2 * t2 if a & 4 else 1.0)
            r_power = (r if m & 1 else 1.0) * (r2 if m & 2 else 1.0) * (r2 * r2 if m & 4 else 1.0)
            like = w * t_power * r_power
            s0[i] += like
            s1[i] += like * r
            s2[i] += like * xj
            s3[i] += like * r * xj
    out = np.empty(size)
    d_eta = np.empty(size)
    d_sigma = np.empty(size)
    for i in range(size):
        total = s0[i]
        m = calls[i]
        if m > 0 and total > SMALLEST_LINEAR_SUM and total < np.inf:
            rejects = int(k[i])
            out[i] = math.log(total)
            if eta[i] >= 0.0:
                # slope of a node's log term in eta: k - n p, p = r
                d_eta[i] = rejects - m * s1[i] / total
                d_sigma[i] = (rejects * s2[i] - m * s3[i]) / total
            else:
                # slope k - n (1 - r), at the mirrored node -x
                accepts = m - rejects
                d_eta[i] = m * s1[i] / total - accepts
                d_sigma[i] = (accepts * s2[i] - m * s3[i]) / total
        else:
            out[i], d_eta[i], d_sigma[i] = _cell_log_space(eta[i], sigma, n[i], k[i], x, log_w)
    return out, d_eta, d_sigma


@numba.njit(cache=False)
def _invert(f, u, mass, uniform):
    # the point where the distribution function of the density taken as linear between
    # grid points reaches ``uniform`` (a quadratic a piece, solved exactly)
    size = u.size
    mass[0] = 0.0
    for j in range(1, size):
        mass[j] = mass[j - 1] + 0.5 * (f[j - 1] + f[j]) * (u[j] - u[j - 1])
    target = uniform * mass[size - 1]
    j = 1
    while j < size - 1 and mass[j] < target:
        j += 1
    h = u[j] - u[j - 1]
    rest = target - mass[j - 1]
    f0 = f[j - 1]
    slope = (f[j] - f0) / h
    if abs(slope) * rest <= 1e-12 * f0 * f0:
        step = rest / f0 if f0 > 0 else 0.0
    else:
        step = (math.sqrt(max(f0 * f0 + 2.0 * slope * rest, 0.0)) - f0) / slope
    return u[j - 1] + min(max(step, 0.0), h)


GOLDEN_GAMMA = np.uint64(0x9E3779B97F4A7C15)


@numba.njit(cache=False)
def _mix64(z):
    # splitmix64's output function: a counter-based generator, so that each (draw, cell)
    # has its own stream whatever thread runs it (the draws do not depend on threads)
    z = (z ^ (z >> np.uint64(30))) * np.uint64(0xBF58476D1CE4E5B9)
    z = (z ^ (z >> np.uint64(27))) * np.uint64(0x94D049BB133111EB)
    return z ^ (z >> np.uint64(31))


@numba.njit(cache=False)
def _uniform(stream, counter):
    # in (0, 1): 53 random bits, plus half a step
    bits = _mix64(stream + GOLDEN_GAMMA * np.uint64(counter)) >> np.uint64(11)
    return (float(bits) + 0.5) * 1.1102230246251565e-16


@numba.njit(cache=False)
def _log_like(x, rejects, accepts):
    log_p = min(x, 0.0) - math.log1p(math.exp(-abs(x)))
    return rejects * log_p + accepts * (log_p - x)


def draw_cell_effects(eta, scale, n, k, u, seed, attempts):
    # One draw u per (draw, cell) from the density proportional to
    # exp(-u^2 / 2) expit(x)^k (1 - expit(x))^(n - k), x = eta + scale u. Rejection
    # from the standard normal with the likelihood's maximum (at p = k / n) as bound:
    # exact, and a cell whose calls agree with its logit accepts within a few tries.
    # After ``attempts`` rejections the cell's density on the grid u is inverted.
    draws, cells = eta.shape
    out = np.empty((draws, cells))
    size = u.size
    for s in numba.prange(draws):
        f = np.empty(size)
        mass = np.empty(size)
        for c in range(cells):
            rejects = int(k[c])
            accepts = int(n[c]) - rejects
            total = rejects + accepts
            top = 0.0
            if 0 < rejects < total:
                share = rejects / total
                top = rejects * math.log(share) + accepts * math.log1p(-share)
            stream = _mix64(np.uint64(seed) * GOLDEN_GAMMA + np.uint64(s * cells + c))
            found = False
            for attempt in range(attempts):
                first = _uniform(stream, 3 * attempt)
                second = _uniform(stream, 3 * attempt + 1)
                z = math.sqrt(-2.0 * math.log(first)) * math.cos(2.0 * math.pi * second)
                gap = _log_like(eta[s, c] + scale[s] * z, rejects, accepts) - top
                if math.log(_uniform(stream, 3 * attempt + 2)) <= gap:
                    out[s, c] = z
                    found = True
                    break
            if not found:
                for j in range(size):
                    f[j] = -0.5 * u[j] * u[j] + _log_like(
                        eta[s, c] + scale[s] * u[j], rejects, accepts
                    )
                peak = f.max()
                for j in range(size):
                    f[j] = math.exp(f[j] - peak)
                out[s, c] = _invert(f, u, mass, _uniform(stream, 3 * attempts))
    return out
