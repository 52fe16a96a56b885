"""Sampling speed: our crossed-logit fit against a plain PyMC baseline, side by side.

Not collected by pytest (no ``test_`` prefix). Run from the repository root:

    python tests/benchmarks/bench_sampling.py            # table
    python tests/benchmarks/bench_sampling.py --json     # JSON
    python tests/benchmarks/bench_sampling.py --cases typical --repeats 3

For each case, both runs sample the same simulated study in the same process:

* ours: the bundled ``crossed-logit`` spec through ``bayes_rr`` (binomial cell
  likelihood, parameterization chosen by the ``auto`` rule, nutpie);
* baseline: the same crossed logit written plainly in PyMC (non-centered effects,
  one Bernoulli node per call, ``pm.sample`` with 4 chains and BASELINE_DRAWS draws).

``wall_s`` is model build + compile + sampling; ``min_ess`` the smallest bulk or
tail ESS over the study-level estimands and the hyper-parameters; ``ratio`` =
ours ess_per_s / baseline ess_per_s. With ``--repeats`` > 1 the medians are shown.
The large case also prints issue 23's targets (``targets``: each with the measured
median and whether it is met); the typical case is compared with earlier runs.
"""

from __future__ import annotations

import argparse
import json
import os
import statistics
import sys
import time
import warnings

import numpy as np

CASES = {"typical": (60, 3, 3), "large": (150, 8, 3)}
# Draws a chain for our run (None: the spec's default).
DRAWS = {"typical": None, "large": None}
# The baseline's draws a chain, with 4 chains: enough for a minimum ESS that is itself a
# real estimate (2 chains of pm.sample's default 1000 gave 12 on the large case).
BASELINE_DRAWS = {"typical": 1000, "large": 4000}
HYPER = ("intercept", "sigma_part", "sigma_appraiser", "sigma_interaction")
# Issue 23's targets for the large case: to the convergence gate (every estimand's bulk
# and tail ESS >= GATE_ESS) within LARGE_WALL_S, at >= LARGE_RATIO x the baseline's ESS/s.
GATE_ESS = 400
LARGE_WALL_S = 60.0
LARGE_RATIO = 10.0


def _targets(case: dict) -> dict | None:
    """Each target of the case with the measured figure and whether it is met."""
    if case["name"] != "large":
        return None
    ours = case["ours"]
    out = {
        "gate_ess": {"target": GATE_ESS, "measured": ours["min_ess"],
                     "met": ours["min_ess"] >= GATE_ESS},
        "wall_s": {"target": LARGE_WALL_S, "measured": ours["wall_s"],
                   "met": ours["wall_s"] <= LARGE_WALL_S},
    }  # fmt: skip
    if case["ratio"] is not None:
        out["ratio"] = {"target": LARGE_RATIO, "measured": case["ratio"],
                        "met": case["ratio"] >= LARGE_RATIO}  # fmt: skip
    return out


def _simulate(n_parts, n_appraisers, n_trials):
    from bayes_rr.simulation.known_truth import simulate_crossed_logit

    return simulate_crossed_logit(
        n_parts, n_appraisers, n_trials, mu=-0.5, sigma_part=2.0, sigma_appraiser=0.5,
        sigma_interaction=0.3, seed=2026,
    ).study  # fmt: skip


def _min_ess(posterior, study, spec) -> float:
    import arviz as az

    from bayes_rr.results.estimands import compute_estimands

    est = compute_estimands(posterior, spec, study, seed=1)
    study_level = est[[v for v in est.data_vars if "__study__" in v]]
    hyper = posterior[[v for v in HYPER if v in posterior]]
    values = []
    for ds in (study_level, hyper):
        for method in ("bulk", "tail"):
            ess = az.ess(ds, method=method)
            values += [float(ess[v]) for v in ess.data_vars]
    return min(values)


def run_ours(study, spec_text=None, draws=None):
    """The package's sampling step as a fit runs it: the sampler's model (grand mean,
    interaction integrated where the design allows) and the completion of its draws."""
    from bayes_rr.inference.sampling import SamplerSettings, sample_study
    from bayes_rr.priors.spec import load_spec, parse_spec

    spec = parse_spec(spec_text, "variant") if spec_text else load_spec("crossed-logit")
    start = time.perf_counter()
    sample = sample_study(spec, study, SamplerSettings.from_spec(spec, seed=1, draws=draws))
    wall = time.perf_counter() - start
    posterior = sample.run.idata.posterior
    timings = {**sample.run.timings, "form": sample.form, "rule_check": sample.rule_check}
    return wall, _min_ess(posterior, study, spec), timings


def run_baseline(study, draws: int = 1000):
    import pymc as pm

    from bayes_rr.priors.spec import load_spec

    calls = study.calls
    part_pos = {p: i for i, p in enumerate(study.parts)}
    app_pos = {a: j for j, a in enumerate(study.appraisers)}
    cells = study.cells
    cell_pos = {(p, a): k for k, (p, a) in enumerate(zip(cells["part"], cells["appraiser"],
                                                         strict=True))}  # fmt: skip
    part = calls["part"].map(part_pos).to_numpy()
    app = calls["appraiser"].map(app_pos).to_numpy()
    cell = np.array([cell_pos[(p, a)] for p, a in zip(calls["part"], calls["appraiser"],
                                                      strict=True)])  # fmt: skip
    coords = {"part": list(study.parts), "appraiser": list(study.appraisers),
              "cell": list(range(len(cells)))}  # fmt: skip
    start = time.perf_counter()
    with pm.Model(coords=coords):
        mu = pm.Normal("intercept", 0, 1.5)
        sp = pm.HalfNormal("sigma_part", 2.5)
        sa = pm.HalfNormal("sigma_appraiser", 1.0)
        sc = pm.HalfNormal("sigma_interaction", 0.5)
        a = pm.Deterministic("part_effect", sp * pm.Normal("za", 0, 1, dims="part"), dims="part")
        b = pm.Deterministic(
            "appraiser_effect", sa * pm.Normal("zb", 0, 1, dims="appraiser"), dims="appraiser"
        )
        c = pm.Deterministic(
            "interaction_effect", sc * pm.Normal("zc", 0, 1, dims="cell"), dims="cell"
        )
        pm.Bernoulli(
            "y", logit_p=mu + a[part] + b[app] + c[cell], observed=calls["call"].to_numpy()
        )
        # the same cores as ours (PyMC's default counts half the CPUs as hyper-threads
        # and would sample the four chains one after another on a 2-core machine)
        idata = pm.sample(draws=draws, chains=4, cores=min(4, os.cpu_count() or 1),
                          progressbar=False, random_seed=1,
                          compute_convergence_checks=False)  # fmt: skip
    wall = time.perf_counter() - start
    return wall, _min_ess(idata.posterior, study, load_spec("crossed-logit"))


def agreement(study) -> dict:
    """Posterior means of every study-scope estimand and hyper-parameter from our fit
    against the same model with every effect sampled (``integrate=False``, at the
    spec's earlier target_accept 0.95), as z = difference / combined Monte Carlo error."""
    import arviz as az

    from bayes_rr.inference.sampling import SamplerSettings, sample_study
    from bayes_rr.priors.spec import load_spec
    from bayes_rr.results.estimands import compute_estimands

    spec = load_spec("crossed-logit")
    means = {}
    for label, integrate, target in (("ours", True, None), ("sampled", False, 0.95)):
        settings = SamplerSettings.from_spec(spec, seed=5, target_accept=target)
        run = sample_study(spec, study, settings, integrate=integrate).run
        posterior = run.idata.posterior
        est = compute_estimands(posterior, spec, study, seed=1)
        ds = est[[v for v in est.data_vars if "__study__" in v]]
        ds = ds.assign({v: posterior[v] for v in HYPER if v in posterior})
        means[label] = (ds.mean(("chain", "draw")), az.mcse(ds))
    z = {}
    for v in means["ours"][0].data_vars:
        (m1, e1), (m2, e2) = ((float(m[v]), float(e[v])) for m, e in means.values())
        z[v] = round((m1 - m2) / float(np.hypot(e1, e2)), 2)
    return {"largest_abs_z": max(abs(x) for x in z.values()), "quantities": len(z), "z": z}


def _figures(wall, min_ess):
    return {"wall_s": round(wall, 2), "min_ess": round(min_ess, 1),
            "ess_per_s": round(min_ess / wall, 3)}  # fmt: skip


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--json", action="store_true", help="print JSON")
    parser.add_argument("--cases", default="typical,large", help="comma-separated case names")
    parser.add_argument("--repeats", type=int, default=1, help="runs per case (medians shown)")
    parser.add_argument("--no-baseline", action="store_true", help="skip the baseline")
    parser.add_argument("--agreement", action="store_true",
                        help="also compare our estimands with the all-sampled model's")  # fmt: skip
    args = parser.parse_args(argv)
    warnings.filterwarnings("ignore")
    out = {"cases": []}
    for name in args.cases.split(","):
        study = _simulate(*CASES[name])
        ours, base = [], []
        for _ in range(args.repeats):
            wall, ess, timings = run_ours(study, draws=DRAWS[name])
            ours.append(_figures(wall, ess) | {"timings": timings})
            if not args.no_baseline:
                base.append(_figures(*run_baseline(study, BASELINE_DRAWS[name])))

        def median(runs):
            if not runs:
                return None
            return {k: statistics.median(r[k] for r in runs) for k in ("wall_s", "min_ess",
                                                                      "ess_per_s")}  # fmt: skip

        case = {"name": name, "cells": len(study.cells), "calls": study.n_calls,
                "ours": median(ours), "baseline": median(base), "repeats": args.repeats,
                "ours_timings_last": ours[-1]["timings"]}  # fmt: skip
        case["ratio"] = (
            round(case["ours"]["ess_per_s"] / case["baseline"]["ess_per_s"], 2) if base else None
        )
        case["targets"] = _targets(case)
        if args.agreement:
            case["agreement"] = agreement(study)
        out["cases"].append(case)
        if not args.json:
            print(json.dumps(case), flush=True)
    if args.json:
        print(json.dumps(out, indent=2))
    return 0


if __name__ == "__main__":
    sys.exit(main())
