"""Seconds per simulated fit at the demo's design (45 parts x 3 appraisers x 3 trials)
on one core, against the planning targets (1 s beta-binomial, 3 s crossed-logit).

Fits run in this process one after another (as a single Dask worker runs them): the
first fit of a model compiles it, the rest replace its calls. Prints the median of
the fits after the first, and the first (compile) separately.

    python tests/benchmarks/bench_plan.py [--sims 10] [--json]
"""

from __future__ import annotations

import argparse
import json
import statistics
import time

TARGETS = {"beta-binomial": 1.0, "crossed-logit": 3.0}


def measure(model: str, sims: int, seed: int) -> dict:
    from bayes_rr.inference.sampling import forget_compiled
    from bayes_rr.priors.spec import load_spec
    from bayes_rr.simulation.designs import Design
    from bayes_rr.simulation.plan import plan_task
    from bayes_rr.simulation.quick import simulation_settings
    from bayes_rr.simulation.seeds import derived_seed
    from bayes_rr.simulation.truths import simulate_design

    forget_compiled()
    spec = load_spec(model)
    simulated = simulate_design(spec, Design(45, 3, 3), sims + 1, seed)
    seconds, converged = [], 0
    for k in range(sims + 1):
        settings = simulation_settings(spec, derived_seed(seed, 0, k))
        payload = {"spec": spec, "study": simulated.study(k), "settings": settings,
                   "criteria": (), "prob": 0.95}  # fmt: skip
        start = time.perf_counter()
        result = plan_task(payload)
        seconds.append(time.perf_counter() - start)
        converged += bool(result["converged"])
    warm = seconds[1:]
    return {
        "model": model,
        "first_fit_s": round(seconds[0], 2),
        "median_fit_s": round(statistics.median(warm), 3),
        "target_s": TARGETS[model],
        "ratio_to_target": round(statistics.median(warm) / TARGETS[model], 2),
        "converged": f"{converged}/{sims + 1}",
    }


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--sims", type=int, default=10)
    parser.add_argument("--seed", type=int, default=1)
    parser.add_argument("--json", action="store_true")
    args = parser.parse_args()
    rows = [measure(model, args.sims, args.seed) for model in TARGETS]
    if args.json:
        print(json.dumps(rows, indent=2))
        return
    for row in rows:
        print(f"{row['model']:>14}: {row['median_fit_s']:.3f} s a fit (median of {args.sims}; "
              f"target {row['target_s']} s, ratio {row['ratio_to_target']}), first fit with "
              f"compile {row['first_fit_s']} s, converged {row['converged']}")  # fmt: skip


if __name__ == "__main__":
    main()
