"""Our simulation-based calibration against simuk's on one small case.

simuk (https://github.com/arviz-devs/simuk) does SBC for a PyMC model one fit at a
time with PyMC's sampler, ranking each prior draw among all posterior draws. Both
should give uniform ranks for a correct model: the script runs both on the
beta-binomial model at 8 parts x 3 appraisers x 2 trials and prints, per
hyper-parameter, the Kolmogorov-Smirnov p-value of each one's ranks against the
uniform (scipy.stats.kstest) and the two rank distributions' two-sample KS p-value
(scipy.stats.ks_2samp). simuk is not a dependency of bayes_rr:

    pip install simuk arviz_base tqdm
    python tests/benchmarks/compare_sbc_simuk.py [--sims 40]
"""

from __future__ import annotations

import argparse
import tempfile
import time
from pathlib import Path

import numpy as np
from scipy import stats


def simuk_ranks(sims: int, seed: int) -> tuple[dict[str, np.ndarray], float]:
    import simuk

    from bayes_rr.families import build_model
    from bayes_rr.priors.spec import load_spec
    from bayes_rr.simulation.designs import Design, skeleton_study

    spec = load_spec("beta-binomial")
    model = build_model(spec, skeleton_study(Design(8, 3, 2), spec))
    start = time.perf_counter()
    sbc = simuk.SBC(model, num_simulations=sims, seed=seed,
                    sample_kwargs={"draws": 500, "tune": 500, "chains": 2})  # fmt: skip
    sbc.run_simulations()
    seconds = time.perf_counter() - start
    out = {}
    for name in ("intercept", "sigma_part", "rho"):
        ranks = np.asarray(sbc.simulations["prior_sbc"][name]).ravel()
        out[name] = (ranks + np.random.default_rng(seed).random(ranks.size)) / 1001
    return out, seconds


def our_ranks(sims: int, seed: int) -> tuple[dict[str, np.ndarray], float]:
    import json

    from bayes_rr.priors.spec import load_spec
    from bayes_rr.simulation.calibrate import CalibrationRequest, run_calibration
    from bayes_rr.simulation.designs import Design

    folder = Path(tempfile.mkdtemp()) / "calib"
    start = time.perf_counter()
    run_calibration(CalibrationRequest(load_spec("beta-binomial"), Design(8, 3, 2), sims, seed),
                    folder, workers=1, progress=False)  # fmt: skip
    seconds = time.perf_counter() - start
    out = {}
    for path in sorted((folder / "tasks").glob("*.json")):
        for name, row in json.loads(path.read_text())["quantities"].items():
            out.setdefault(name, []).append(row["rank"])
    return {k: np.array(v) for k, v in out.items()}, seconds


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--sims", type=int, default=40)
    parser.add_argument("--seed", type=int, default=3)
    args = parser.parse_args()
    try:
        import simuk  # noqa: F401
    except ImportError:
        raise SystemExit("simuk is not installed: pip install simuk arviz_base tqdm") from None
    theirs, their_s = simuk_ranks(args.sims, args.seed)
    ours, our_s = our_ranks(args.sims, args.seed)
    print(f"{args.sims} simulations; seconds: simuk {their_s:.0f} (one process, PyMC NUTS), "
          f"bayes_rr {our_s:.0f} (one Dask worker, nutpie, compiled once)")  # fmt: skip
    for name in ("intercept", "sigma_part", "rho"):
        p_theirs = stats.kstest(theirs[name], "uniform").pvalue
        p_ours = stats.kstest(ours[name], "uniform").pvalue
        p_both = stats.ks_2samp(theirs[name], ours[name]).pvalue
        print(f"{name:>11}: uniformity p simuk {p_theirs:.3f}, bayes_rr {p_ours:.3f}; "
              f"same distribution p {p_both:.3f}")  # fmt: skip


if __name__ == "__main__":
    main()
