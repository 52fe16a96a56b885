"""Experiment (not used by the package): the crossed-logit with its grand mean sampled.

Issue 23: on a 150 x 8 x 3 crossed-logit study the intercept mixes slowest (it trades
off against the means of the part and appraiser effects), then sigma_interaction. This
script measures exact reparameterizations of the same model, by effective samples
per gradient (a figure the machine's load does not move), against the package's:

- ``grand``: with a_i ~ N(0, sp), b_j ~ N(0, sb) and mu ~ N(m0, s0), write
  a = abar + a_dev, b = bbar + b_dev. The deviations are ZeroSumNormal(sp) and
  ZeroSumNormal(sb) and independent of the means; the data see only
  G = mu + abar + bbar ~ N(m0, s0^2 + sp^2/I + sb^2/J). Sampling (G, deviations) is the
  same model; (mu, abar, bbar) given G and the scales is Gaussian and is drawn after
  sampling, exactly.
- ``grand-gh``: the same, with the interaction c_ij ~ N(0, sc) integrated out of each
  cell by a fixed Gauss-Hermite rule (no Newton steps; ``accuracy`` bounds its error
  against ``scipy.integrate.quad``), written as a PyTensor graph.
- ``grand-kernel``: the same rule as a numba kernel behind a PyTensor Op that returns
  the cells' values and both gradients from one call (one evaluation a gradient); since
  2026-12-04 the package's own (``bayes_rr.families.cell_integral``), which the
  crossed-logit's sampler model now uses.

    python tests/benchmarks/try_grand_mean.py accuracy
    python tests/benchmarks/try_grand_mean.py sample package grand-kernel --target-accept 0.8

What it measured is written in DEVELOPERS.md ("Large studies").
"""

from __future__ import annotations

import time
import warnings

import numpy as np
import pytensor.tensor as pt

NODES = 16
VARIANTS = ("package", "grand", "grand-gh", "grand-kernel")
INTERCEPT_MU, INTERCEPT_SIGMA = 0.0, 1.5  # the bundled crossed-logit spec's intercept prior


def gh_rule(count: int = NODES) -> tuple[np.ndarray, np.ndarray]:
    """Nodes and log weights for E[f(Z)], Z ~ N(0, 1) (probabilists' Hermite)."""
    from bayes_rr.core.cell_rule import gauss_hermite

    return gauss_hermite(count)


def integrated_log_lik_numpy(eta, sigma, n, k, count: int = NODES) -> np.ndarray:
    """log of E_z[p^k (1-p)^(n-k)], logit p = eta + sigma z (binomial coefficient left out)."""
    from scipy.special import log_expit, logsumexp

    x, logw = gh_rule(count)
    t = eta[:, None] + sigma * x[None, :]
    terms = k[:, None] * log_expit(t) + (n - k)[:, None] * log_expit(-t) + logw[None, :]
    return logsumexp(terms, axis=1)


def quad_log_lik(eta: float, sigma: float, n: int, k: int) -> float:
    """The same integral by adaptive quadrature (scipy.integrate.quad), the reference."""
    from scipy.integrate import quad
    from scipy.special import log_expit

    def integrand(z):
        t = eta + sigma * z
        return np.exp(k * log_expit(t) + (n - k) * log_expit(-t) - 0.5 * z * z) / np.sqrt(2 * np.pi)

    value, _ = quad(integrand, -12, 12, epsabs=0, epsrel=1e-12, limit=400)
    return float(np.log(value))


def accuracy() -> None:
    """Largest absolute log error of the fixed rule against quad, by scale and calls a cell."""
    etas = np.linspace(-8, 8, 33)
    for count in (8, 12, 16, 24):
        for n in (3, 6, 10, 30):
            row = []
            for sigma in (0.25, 0.5, 1.0, 1.5, 2.0, 3.0):
                worst = 0.0
                for k in range(n + 1):
                    full_n, full_k = np.full_like(etas, n), np.full_like(etas, k)
                    ours = integrated_log_lik_numpy(etas, sigma, full_n, full_k, count)
                    ref = np.array([quad_log_lik(e, sigma, n, k) for e in etas])
                    worst = max(worst, float(np.abs(ours - ref).max()))
                row.append(f"s={sigma}: {worst:.1e}")
            print(f"nodes {count:2d}, n {n:2d}: " + ", ".join(row))


def _study():
    from bayes_rr.simulation.known_truth import simulate_crossed_logit

    return simulate_crossed_logit(150, 8, 3, mu=-0.5, sigma_part=2.0, sigma_appraiser=0.5,
                                  sigma_interaction=0.3, seed=2026).study  # fmt: skip


def _model(variant: str, study):
    import pymc as pm

    from bayes_rr.families.base import cell_index

    part, app = cell_index(study)
    n, k = study.cells["n"].to_numpy(), study.cells["s"].to_numpy()
    n_parts, n_app = len(study.parts), len(study.appraisers)
    coords = {"part": list(study.parts), "appraiser": list(study.appraisers),
              "cell": np.arange(len(n))}  # fmt: skip
    with pm.Model(coords=coords) as model:
        sp = pm.HalfNormal("sigma_part", 2.5)
        sa = pm.HalfNormal("sigma_appraiser", 1.0)
        sc = pm.HalfNormal("sigma_interaction", 0.5)
        if variant == "package":  # parts noncentered, appraisers centered (auto)
            mu = pm.Normal("intercept", INTERCEPT_MU, INTERCEPT_SIGMA)
            a = sp * pm.Normal("part_effect_z", 0, 1, dims="part")
            b = pm.Normal("appraiser_effect", 0, sa, dims="appraiser")
            eta = mu + a[part] + b[app]
        else:
            spread = pt.sqrt(INTERCEPT_SIGMA**2 + sp**2 / n_parts + sa**2 / n_app)
            grand = pm.Normal("grand_mean", INTERCEPT_MU, spread)
            a_dev = sp * pm.ZeroSumNormal("part_dev_z", sigma=1.0, dims="part")
            b_dev = pm.ZeroSumNormal("appraiser_dev", sigma=sa, dims="appraiser")
            eta = grand + a_dev[part] + b_dev[app]
        if variant == "grand-kernel":
            from bayes_rr.families.cell_integral import integrated_cells

            pm.Potential(
                "cells", integrated_cells(eta, sc, n.astype(float), k.astype(float), NODES)
            )
        elif variant == "grand-gh":
            x, logw = gh_rule()
            t = eta[:, None] + sc * x[None, :]
            terms = -k[:, None] * pt.log1pexp(-t) - (n - k)[:, None] * pt.log1pexp(t)
            pm.Potential("cells", pt.sum(pt.logsumexp(terms + logw[None, :], axis=1)))
        else:
            c = sc * pm.Normal("interaction_effect_z", 0, 1, dims="cell")
            pm.Binomial("s", n=n, logit_p=eta + c, observed=k, dims="cell")
    return model


def _recover_means(post, n_parts: int, n_app: int, rng) -> dict[str, np.ndarray]:
    """Draw (mu, abar, bbar) given G and the scales: a Gaussian conditioned on its sum."""
    grand = post["grand_mean"].to_numpy().ravel()
    sp = post["sigma_part"].to_numpy().ravel()
    sa = post["sigma_appraiser"].to_numpy().ravel()
    v = np.stack([np.full_like(sp, INTERCEPT_SIGMA**2), sp**2 / n_parts, sa**2 / n_app], 1)
    m = np.array([INTERCEPT_MU, 0.0, 0.0])
    total = v.sum(1)
    mean = m[None, :] + v / total[:, None] * (grand - INTERCEPT_MU)[:, None]
    cov = v[:, :, None] * np.eye(3)[None] - v[:, :, None] * v[:, None, :] / total[:, None, None]
    # the conditional covariance is singular (the three sum to G): draw two, the third follows
    chol = np.linalg.cholesky(cov[:, :2, :2])
    first = mean[:, :2] + np.einsum("sij,sj->si", chol, rng.standard_normal((len(grand), 2)))
    third = grand - first.sum(1)
    return {"intercept": first[:, 0], "abar": first[:, 1], "bbar": third}


def _error_at_largest_scale(post, study, mu, a, b) -> str:
    """The fixed rule's largest log error over the study's cells against quad, at the
    largest sigma_interaction the posterior visited and the cells' posterior mean logits:
    the check a switch back to sampling would make after the fit."""
    from bayes_rr.families.base import cell_index

    part, app = cell_index(study)
    n, k = study.cells["n"].to_numpy(), study.cells["s"].to_numpy()
    sigma = float(post["sigma_interaction"].max())
    eta = (mu[..., None] + a[..., part] + b[..., app]).reshape(-1, len(n)).mean(0)
    ours = integrated_log_lik_numpy(eta, sigma, n.astype(float), k.astype(float))
    cells = zip(eta, n, k, strict=True)
    ref = np.array([quad_log_lik(e, sigma, int(m), int(j)) for e, m, j in cells])
    return f"largest sigma_interaction draw {sigma:.3f}: log error {np.abs(ours - ref).max():.1e}"


def sample(variant: str, target_accept: float = 0.95, draws: int = 1000) -> None:
    import arviz as az
    import nutpie

    study = _study()
    n_parts, n_app = len(study.parts), len(study.appraisers)
    compiled = nutpie.compile_pymc_model(_model(variant, study))
    start = time.perf_counter()
    idata = nutpie.sample(compiled, draws=draws, tune=1000, chains=4, cores=2, seed=1,
                          target_accept=target_accept, progress_bar=False)  # fmt: skip
    seconds = time.perf_counter() - start
    gradients = int(idata.sample_stats["n_steps"].sum())
    post = idata.posterior
    shape = (post.sizes["chain"], post.sizes["draw"])
    # what the estimands are made of: each part's logit mu + a_i, each appraiser's b_j
    if variant == "package":
        mu = post["intercept"].to_numpy()
        a = post["part_effect_z"].to_numpy() * post["sigma_part"].to_numpy()[..., None]
        b = post["appraiser_effect"].to_numpy()
    else:
        means = _recover_means(post, n_parts, n_app, np.random.default_rng(7))
        mu = means["intercept"].reshape(shape)
        a = (post["part_dev_z"].to_numpy() * post["sigma_part"].to_numpy()[..., None]
             + means["abar"].reshape(shape)[..., None])  # fmt: skip
        b = post["appraiser_dev"].to_numpy() + means["bbar"].reshape(shape)[..., None]
    quantities = {
        "intercept": mu,
        "part_logit": mu[..., None] + a,
        "appraiser_effect": b,
        **{v: post[v].to_numpy() for v in ("sigma_part", "sigma_appraiser", "sigma_interaction")},
    }
    ess = {}
    for name, value in quantities.items():
        arr = az.convert_to_dataset({name: value})
        bulk = float(az.ess(arr).to_array().min())
        tail = float(az.ess(arr, method="tail").to_array().min())
        ess[name] = round(min(bulk, tail))
    smallest = min(ess.values())
    # the same model: means with their Monte Carlo errors agree across the variants
    means = {}
    for name in ("intercept", "sigma_part", "sigma_appraiser", "sigma_interaction"):
        value = quantities[name]
        error = float(az.mcse(az.convert_to_dataset({name: value}))[name])
        means[name] = f"{float(value.mean()):.3f}+-{error:.3f}"
    bound = ""
    if variant.startswith("grand-"):
        bound = "; " + _error_at_largest_scale(post, study, mu, a, b)
    print(
        f"{variant} ta={target_accept}: sampling {seconds:.1f} s, {gradients} gradients, "
        f"min ESS {smallest} ({1000 * smallest / gradients:.2f} per 1,000 gradients), "
        f"{2e6 * seconds / gradients:.0f} us a gradient (2 chains at a time), "
        f"divergences {int(idata.sample_stats['diverging'].sum())}; {ess}; means {means}{bound}"
    )


def main() -> None:
    import argparse

    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("mode", choices=("accuracy", "sample"))
    parser.add_argument("variants", nargs="*", choices=VARIANTS, default=list(VARIANTS))
    parser.add_argument("--target-accept", type=float, default=0.95)
    parser.add_argument("--draws", type=int, default=1000, help="draws a chain (4 chains)")
    args = parser.parse_args()
    warnings.filterwarnings("ignore")
    if args.mode == "accuracy":
        accuracy()
        return
    for variant in args.variants:
        sample(variant, args.target_accept, args.draws)


if __name__ == "__main__":
    main()
