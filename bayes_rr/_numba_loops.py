"""The loops behind :mod:`bayes_rr.kernels`, as plain functions that it compiles with numba.

``numba.prange`` runs as ``range`` in plain Python, so the functions also run (slowly)
without compilation.
"""

import numba
import numpy as np


def nested_moments(eta, outer_scale, inner_scale, u_out, w_out, u_in, w_in):
    # With m1(b) = E_c[p], m2(b) = E_c[p^2], p = expit(eta + b + c), b ~ N(0, outer^2),
    # c ~ N(0, inner^2): E_b[m1], E_b[m1^2] and E_b[m2 - m1^2]
    draws, parts = eta.shape
    mean = np.empty((draws, parts))
    square = np.empty((draws, parts))
    spread = np.empty((draws, parts))
    for s in numba.prange(draws):
        sa = outer_scale[s]
        sc = inner_scale[s]
        for i in range(parts):
            first = 0.0
            second = 0.0
            inner_var = 0.0
            for k in range(u_out.size):
                x = eta[s, i] + sa * u_out[k]
                m1 = 0.0
                m2 = 0.0
                for j in range(u_in.size):
                    p = 1.0 / (1.0 + np.exp(-(x + sc * u_in[j])))
                    m1 += w_in[j] * p
                    m2 += w_in[j] * p * p
                first += w_out[k] * m1
                second += w_out[k] * m1 * m1
                inner_var += w_out[k] * (m2 - m1 * m1)
            mean[s, i] = first
            square[s, i] = second
            spread[s, i] = inner_var
    return mean, square, spread


def log_integrated_binomial(eta, scale, n, k, u, log_w):
    # log sum_l exp(log_w_l + k log expit(x_l) + (n - k) log expit(-x_l)),
    # x_l = eta + scale * u_l, without the binomial coefficient
    draws, cells = eta.shape
    out = np.empty((draws, cells))
    for s in numba.prange(draws):
        for c in range(cells):
            # streaming log-sum-exp: one pass, no scratch array
            top = -np.inf
            acc = 0.0
            for j in range(u.size):
                x = eta[s, c] + scale[s] * u[j]
                # log expit(x) without overflow for either sign of x
                log_p = -np.log1p(np.exp(-x)) if x > 0 else x - np.log1p(np.exp(x))
                t = log_w[j] + n[c] * log_p - (n[c] - k[c]) * x
                if t > top:
                    acc = acc * np.exp(top - t) + 1.0
                    top = t
                else:
                    acc += np.exp(t - top)
            out[s, c] = top + np.log(acc)
    return out
