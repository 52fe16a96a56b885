"""Experiment (not used by the package): the crossed-logit interaction integrated out.

Issue 23 asks for large crossed-logit studies in a minute. This script keeps the
experiment of 2026-12-04 so that it can be measured again and carried on: the cell
likelihood with c_ij ~ N(0, sigma_interaction^2) integrated out by a trapezoid rule in
the units of each cell's Laplace approximation (mode by safeguarded Newton, nodes held
fixed for the gradient, node weights and logistic factors by recurrence), as a numba
kernel behind a PyTensor Op that nutpie compiles.

    python tests/benchmarks/try_integrated_interaction.py accuracy   # vs a dense rule
    python tests/benchmarks/try_integrated_interaction.py sample     # 150 x 8 x 3, both ways

What it measured is written in DEVELOPERS.md ("Large studies").
"""

import math
import sys
import time
import warnings

import numba
import numpy as np
import pytensor.tensor as pt
from cells_op import CellsOp
from pytensor.link.numba.dispatch.basic import (
    numba_njit,
    register_funcify_default_op_cache_key,
)

HALF, STEP = 7.0, 0.5
COUNT = round(2 * HALF / STEP) + 1


LOG_SQRT_2PI = 0.5 * math.log(2 * math.pi)


@numba.njit(cache=False)
def _log_space(eta, sigma, n, k, z, s, half, step, count):
    # exact-but-slow fallback: log-space sum at the same nodes
    mx = -np.inf
    lg = np.empty(count)
    for m in range(count):
        v = z + s * (-half + step * m)
        x = eta + sigma * v
        sp = math.log1p(math.exp(-abs(x))) + max(x, 0.0)  # softplus(x)
        lg[m] = k * x - n * sp - 0.5 * v * v
        mx = max(mx, lg[m])
    f = 0.0
    de = 0.0
    ds = 0.0
    for m in range(count):
        v = z + s * (-half + step * m)
        x = eta + sigma * v
        p = 1.0 / (1.0 + math.exp(-x))
        g = math.exp(lg[m] - mx)
        t = g * (k - n * p)
        f += g
        de += t
        ds += t * v
    return mx + math.log(f * step * s) - LOG_SQRT_2PI, de / f, ds / f


@numba.njit(cache=False)
def cells(eta, sigma, n, k, half, step, count):
    nc = eta.shape[0]
    lf = np.empty(nc)
    de = np.empty(nc)
    ds = np.empty(nc)
    for i in range(nc):
        e = eta[i]
        ni = n[i]
        ki = k[i]
        lo = sigma * (ki - ni)
        hi = sigma * ki
        z = 0.0 if lo < 0.0 < hi else 0.5 * (lo + hi)
        for _ in range(60):
            x = e + sigma * z
            p = 1.0 / (1.0 + math.exp(-x))
            gz = sigma * (ki - ni * p) - z
            if gz > 0.0:
                lo = z
            else:
                hi = z
            znew = z + gz / (1.0 + sigma * sigma * ni * p * (1.0 - p))
            if not (lo < znew < hi):
                znew = 0.5 * (lo + hi)
            if abs(znew - z) < 1e-6 or hi - lo < 1e-6:
                z = znew
                break
            z = znew
        x = e + sigma * z
        p = 1.0 / (1.0 + math.exp(-x))
        s = 1.0 / math.sqrt(1.0 + sigma * sigma * ni * p * (1.0 - p))
        v0 = z - s * half
        x0 = e + sigma * v0
        span = sigma * s * 2 * half
        ok = abs(x0) < 600.0 and abs(x0 + span) < 600.0
        if ok:
            E = math.exp(x0)
            r = math.exp(sigma * s * step)
            sh = s * step
            w = math.exp(-0.5 * v0 * v0)
            ratio = math.exp(-v0 * sh - 0.5 * sh * sh)
            c = math.exp(-sh * sh)
            f = 0.0
            d1 = 0.0
            d2 = 0.0
            v = v0
            for _m in range(count):
                q = 1.0 / (1.0 + E)
                pm = E * q
                g = w * pm**ki * q ** (ni - ki)
                t = g * (ki - ni * pm)
                f += g
                d1 += t
                d2 += t * v
                E *= r
                w *= ratio
                ratio *= c
                v += sh
            if f > 1e-280 and math.isfinite(f):
                lf[i] = math.log(f * sh) - LOG_SQRT_2PI
                de[i] = d1 / f
                ds[i] = d2 / f
                continue
        a, b, cc = _log_space(e, sigma, ni, ki, z, s, half, step, count)
        lf[i] = a
        de[i] = b
        ds[i] = cc
    return lf, de, ds


class IntegratedCells(CellsOp):
    __props__ = ("half", "step", "count")
    count_dtype = "int64"

    def __init__(self, half, step, count):
        self.half, self.step, self.count = float(half), float(step), int(count)

    def evaluate(self, eta, sigma, n, k):
        return cells(np.asarray(eta, float), sigma, np.asarray(n, np.int64),
                     np.asarray(k, np.int64), self.half, self.step, self.count)  # fmt: skip


@register_funcify_default_op_cache_key(IntegratedCells)
def _funcify(op, node=None, **kw):
    half, step, count = op.half, op.step, op.count

    @numba_njit
    def integrated(eta, sigma, n, k):
        return cells(eta, sigma, n, k, half, step, count)

    return integrated


def dense_reference(eta, sigma, n, k):
    """log of the same integral by a dense trapezoid rule on [-60, 60] (step 0.002)."""
    from scipy.special import log_expit, logsumexp

    u = np.linspace(-60, 60, 60001)
    log_w = -0.5 * u * u - 0.5 * np.log(2 * np.pi) + np.log(u[1] - u[0])
    out = np.empty(eta.size)
    for i in range(eta.size):
        x = eta[i] + sigma * u
        out[i] = logsumexp(k * log_expit(x) + (n - k) * log_expit(-x) + log_w)
    return out


def accuracy() -> None:
    eta = np.linspace(-20, 20, 81)
    for n in (1, 3, 6, 10, 30):
        for sigma in (0.5, 1.0, 2.0, 3.0):
            worst = 0.0
            for k in range(n + 1):
                got = cells(eta, sigma, np.full(eta.size, n), np.full(eta.size, k), HALF, STEP,
                            COUNT)[0]  # fmt: skip
                worst = max(worst, float(np.abs(got - dense_reference(eta, sigma, n, k)).max()))
            print(f"n={n:2d} sigma={sigma:.1f} max |log error| over logit -20..20: {worst:.1e}")


def sample(integrated: bool, target_accept: float = 0.95, draws: int = 1000) -> None:
    import arviz as az
    import nutpie
    import pymc as pm
    from scipy.special import gammaln

    from bayes_rr.families.base import cell_index
    from bayes_rr.simulation.known_truth import simulate_crossed_logit

    study = simulate_crossed_logit(150, 8, 3, mu=-0.5, sigma_part=2.0, sigma_appraiser=0.5,
                                   sigma_interaction=0.3, seed=2026).study  # fmt: skip
    part, app = cell_index(study)
    n, k = study.cells["n"].to_numpy(), study.cells["s"].to_numpy()
    coords = {"part": list(study.parts), "appraiser": list(study.appraisers),
              "cell": np.arange(len(n))}  # fmt: skip
    with pm.Model(coords=coords) as model:
        mu = pm.Normal("intercept", 0, 1.5)
        sp = pm.HalfNormal("sigma_part", 2.5)
        sa = pm.HalfNormal("sigma_appraiser", 1.0)
        sc = pm.HalfNormal("sigma_interaction", 0.5)
        a = sp * pm.Normal("part_effect_z", 0, 1, dims="part")
        b = pm.Normal("appraiser_effect", 0, sa, dims="appraiser")
        eta = mu + a[part] + b[app]
        if integrated:
            const = float((gammaln(n + 1) - gammaln(k + 1) - gammaln(n - k + 1)).sum())
            op = IntegratedCells(HALF, STEP, COUNT)
            pm.Potential("cells", pt.sum(op(eta, sc, n, k)[0]) + const)
        else:
            c = sc * pm.Normal("interaction_effect_z", 0, 1, dims="cell")
            pm.Binomial("s", n=n, logit_p=eta + c, observed=k, dims="cell")
    compiled = nutpie.compile_pymc_model(model)
    start = time.perf_counter()
    idata = nutpie.sample(compiled, draws=draws, tune=1000, chains=4, cores=2, seed=1,
                          target_accept=target_accept, progress_bar=False)  # fmt: skip
    seconds = time.perf_counter() - start
    gradients = int(idata.sample_stats["n_steps"].sum())
    post = idata.posterior
    names = ("intercept", "sigma_part", "sigma_appraiser", "sigma_interaction")
    ess = {}
    for v in names:
        bulk = float(az.ess(post[v]).to_array().min())
        tail = float(az.ess(post[v], method="tail").to_array().min())
        ess[v] = round(min(bulk, tail))
    print(
        f"integrated={integrated} sampling {seconds:.1f} s, {gradients} gradients, "
        f"{2e6 * seconds / gradients:.0f} us a gradient (2 chains at a time); "
        f"min(bulk, tail) ESS of {4 * draws} draws: {ess}"
    )


if __name__ == "__main__":
    warnings.filterwarnings("ignore")
    if sys.argv[1:2] == ["accuracy"]:
        accuracy()
    else:
        sample(integrated=False)
        sample(integrated=True)
