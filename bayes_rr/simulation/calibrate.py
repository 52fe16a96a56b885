"""Simulation-based calibration (Talts et al. 2018): parameters from the prior, a study
simulated from them, a fit, and the rank of each true value among the posterior draws.
When the fit is calibrated the ranks are uniform and the 50% and 90% intervals hold
the truth in 50% and 90% of the studies; the ECDF of the ranks minus the uniform CDF
is drawn with a simultaneous band (Saeilynoja et al. 2022)."""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import numpy as np

from bayes_rr.core.errors import SpecError
from bayes_rr.families import family_of
from bayes_rr.io.fit_folder import CALIBRATION_FILE
from bayes_rr.priors.spec import ModelSpec
from bayes_rr.simulation.designs import Design, check_simulated
from bayes_rr.simulation.quick import (
    CALIBRATED_KEYS,
    fractional_rank,
    hyper_variables,
    interval,
    quick_fit,
    scalar_draws,
    simulation_settings,
)
from bayes_rr.simulation.runner import Task, run_folder, run_tasks
from bayes_rr.simulation.seeds import derived_seed, signature
from bayes_rr.simulation.truths import simulate_design

FIGURE_FILE = "calibration_ranks.png"
FALSE_ALARM = 0.05
"""The share of runs in which the verdict may flag a calibrated model (family-wise, over
every test of every quantity)."""


@dataclass(frozen=True)
class CalibrationRequest:
    """The model, the design and the number of simulated studies."""

    spec: ModelSpec
    design: Design
    sims: int
    seed: int
    draws: int | None = None
    tune: int | None = None
    fit_spec: ModelSpec | None = None
    """A different model to fit with (default: the simulating one). Only for showing
    that the check can fail: a fit with another prior is miscalibrated."""


def calibration_task(payload: dict) -> dict:
    """One simulated study fitted: each checked quantity's fractional rank and whether
    the 50% and 90% intervals held the truth."""
    from bayes_rr.results.estimands import compute_estimands

    study, spec, settings = payload["study"], payload["spec"], payload["settings"]
    fit, _ = quick_fit(study, spec, settings, CALIBRATED_KEYS)
    truth = payload["truth"]
    true_values = scalar_draws(truth, hyper_variables(truth))
    true_values.update(scalar_draws(compute_estimands(truth, spec, study, settings.seed),
                                    CALIBRATED_KEYS))  # fmt: skip
    rng = np.random.default_rng([settings.seed, 17])
    rows = {}
    for name, draws in fit.draws.items():
        if name not in true_values:
            continue
        value = float(np.asarray(true_values[name]).ravel()[0])
        if not np.isfinite(value):
            continue  # e.g. a share of a variance that is zero in this truth
        low50, high50 = interval(draws, 0.5)
        low90, high90 = interval(draws, 0.9)
        rows[name] = {
            "truth": value,
            "rank": fractional_rank(draws, value, fit.min_ess, rng),
            "in_50": bool(low50 <= value <= high50),
            "in_90": bool(low90 <= value <= high90),
        }
    return {"quantities": rows, "converged": fit.ok, "max_r_hat": fit.max_r_hat,
            "min_ess": fit.min_ess, "seconds": fit.seconds}  # fmt: skip


def summarise(results: list[dict]) -> list[dict]:
    """Per quantity: the ranks' uniformity p-value (Kolmogorov-Smirnov against the
    uniform, scipy.stats.kstest), the coverage of the 50% and 90% intervals, and
    whether the rank ECDF stays inside its simultaneous 95% band."""
    from arviz.stats.ecdf_utils import ecdf_confidence_band
    from scipy import stats

    names = list(dict.fromkeys(n for r in results for n in r["quantities"]))
    rows = []
    grid = np.linspace(0, 1, 101)
    for name in names:
        items = [r["quantities"][name] for r in results if name in r["quantities"]]
        ranks = np.array([item["rank"] for item in items])
        count = ranks.size
        ecdf = np.searchsorted(np.sort(ranks), grid, side="right") / count
        low, high = ecdf_confidence_band(count, grid, grid, prob=0.95, method="optimized")
        rows.append({
            "name": name,
            "rank_uniformity_p": float(stats.kstest(ranks, "uniform").pvalue),
            "coverage_50": float(np.mean([item["in_50"] for item in items])),
            "coverage_90": float(np.mean([item["in_90"] for item in items])),
            "sims": int(count),
            "ecdf_within_band": bool(np.all((ecdf >= low - 1e-12) & (ecdf <= high + 1e-12))),
        })  # fmt: skip
    return rows


def holm(p_values: list[float], level: float) -> list[bool]:
    """Holm's step-down rejections at family-wise error ``level`` (Holm 1979): the k-th
    smallest p-value is compared with level / (m - k); valid under any dependence."""
    order = np.argsort(p_values, kind="stable")
    rejected = [False] * len(p_values)
    for k, index in enumerate(order):
        if p_values[index] > level / (len(p_values) - k):
            break
        rejected[index] = True
    return rejected


def verdict(rows: list[dict], sims: int) -> str:
    """One sentence: calibrated or not, and which quantities are off.

    Every quantity gives two tests: the ranks' uniformity (Kolmogorov-Smirnov) and the
    90% interval's coverage (exact binomial test against 0.9). All of them together are
    judged by Holm's adjustment at :data:`FALSE_ALARM`, so a calibrated model is flagged
    in at most that share of runs, however many quantities are checked.
    """
    from scipy import stats

    tests = []
    for row in rows:
        tests.append((row["name"], "ranks", row["rank_uniformity_p"]))
        hits = round(row["coverage_90"] * row["sims"])
        coverage_p = stats.binomtest(hits, row["sims"], 0.9).pvalue if row["sims"] else 1.0
        tests.append((row["name"], "coverage", float(coverage_p)))
    rejected = holm([p for _, _, p in tests], FALSE_ALARM)
    flagged = [name for (name, kind, _), r in zip(tests, rejected, strict=True)
               if r and kind == "ranks"]  # fmt: skip
    wide = [name for (name, kind, _), r in zip(tests, rejected, strict=True)
            if r and kind == "coverage"]  # fmt: skip
    rule = (
        f"{len(tests)} tests (rank uniformity and 90% coverage of each of {len(rows)} "
        f"quantities) judged together by Holm's adjustment, so a calibrated model is flagged "
        f"in at most {FALSE_ALARM:.0%} of runs"
    )
    if not flagged and not wide:
        return f"No sign of miscalibration in {sims} simulated studies ({rule})."
    parts = []
    if flagged:
        parts.append(f"ranks not uniform for {', '.join(flagged)}")
    if wide:
        parts.append(f"90% coverage off for {', '.join(wide)}")
    return "Miscalibration found: " + "; ".join(parts) + f" ({rule})."


def run_calibration(
    request: CalibrationRequest, out: str | Path, *, workers: int | None = None,
    scheduler: str | None = None, progress: bool = True, client=None,
) -> dict:  # fmt: skip
    """Run the calibration on Dask and write ``calibration.json`` and the rank figure."""
    from bayes_rr import __version__
    from bayes_rr.core.jsonio import dumps, write_bytes_atomic, write_text_atomic
    from bayes_rr.io.fit_folder import GENERATOR
    from bayes_rr.simulation.figures import ecdf_difference_figure

    spec, design = request.spec, request.design
    check_simulated(spec, design.part_mix)
    if design.part_mix is not None and family_of(spec).simulated_parts in ("drawn", "class"):
        raise SpecError(
            "--part-mix: a calibration draws its parts from the prior; choosing which parts "
            "(borderline ones, or a share of reject parts) would no longer be a draw from "
            "it. Leave --part-mix out for this model"
        )
    if spec.earlier is not None:
        raise SpecError(f"{spec.source}: a spec carrying an earlier study cannot be drawn "
                        "from directly; calibrate the stated model")  # fmt: skip
    if not 10 <= request.sims <= 10_000:
        raise SpecError(f"--sims {request.sims}: expected a whole number from 10 to 10000")
    fit_spec = request.fit_spec or spec
    settings = simulation_settings(fit_spec, 0, draws=request.draws, tune=request.tune)
    run_settings = {
        "command": "calibrate", "spec_sha256": spec.sha256, "spec_name": spec.name,
        "fit_spec_sha256": fit_spec.sha256, "design": design.as_dict(), "sims": request.sims,
        "seed": request.seed,
        "sampler": {"draws": settings.draws, "tune": settings.tune, "chains": settings.chains},
    }  # fmt: skip
    out = Path(out)
    with run_folder(out, "calibrate", signature(run_settings), client=client,
                    scheduler=scheduler) as client:  # fmt: skip
        simulated = simulate_design(spec, design, request.sims, derived_seed(request.seed, 0))
        tasks = []
        for k in range(request.sims):
            seed = derived_seed(request.seed, 0, k)
            task_settings = simulation_settings(fit_spec, seed, draws=request.draws,
                                                tune=request.tune)  # fmt: skip
            payload = {"spec": fit_spec, "study": simulated.study(k), "settings": task_settings,
                       "truth": simulated.truth_of(k)}  # fmt: skip
            tasks.append(Task(f"s{k:04d}", payload, {**design.as_dict(), "simulation": k + 1,
                                                       "seed": seed}))  # fmt: skip
        outcome = run_tasks(calibration_task, tasks, out, client=client, workers=workers,
                            scheduler=scheduler, progress=progress, what="fits")  # fmt: skip
        results = [v for _, v in sorted(outcome.results.items())]
        rows = summarise(results)
        document = {
            "generator": f"{GENERATOR} {__version__}",
            **run_settings,
            "parameters": rows,
            "fits_converged": sum(1 for r in results if r["converged"]),
            "fits_failed": len(outcome.failures),
            "failures": list(outcome.failures.values()),
            "seconds_per_fit": float(np.median([r["seconds"] for r in results])) if results
            else None,
            "verdict": verdict(rows, len(results)),
            "method": (
                "Talts et al. (2018) simulation-based calibration: ranks among posterior draws "
                "thinned to about the bulk ESS; uniformity by scipy.stats.kstest on fractional "
                "ranks; simultaneous 95% ECDF band by ArviZ (Saeilynoja et al. 2022). Every fit "
                "counts, converged or not (leaving some out would bias the ranks)."
            ),
            "resumed_tasks": outcome.resumed,
        }  # fmt: skip
        ranks = {}
        for row in rows:
            name = row["name"]
            ranks[name] = np.array([r["quantities"][name]["rank"] for r in results
                                    if name in r["quantities"]])  # fmt: skip
        write_bytes_atomic(out / FIGURE_FILE, ecdf_difference_figure(ranks))
        write_text_atomic(out / CALIBRATION_FILE, dumps(document) + "\n")
        return document
