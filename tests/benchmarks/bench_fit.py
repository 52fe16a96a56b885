"""Whole-fit speed and size figures against the speed issue's targets.

Not collected by pytest (no ``test_`` prefix). Run from the repository root:

    python tests/benchmarks/bench_fit.py                 # table
    python tests/benchmarks/bench_fit.py --json          # JSON
    python tests/benchmarks/bench_fit.py --repeats 3 --studies 20
    python tests/benchmarks/bench_fit.py --large         # also the sampling benchmark's large case

Figures (medians over ``--repeats``; the machine is shared, so quote medians):

* ``whole_fit``: wall seconds of ``bayes-rr fit`` as a new process (warm: numba and
  compiled-model caches filled by a first, unmeasured run, whose own figures are
  reported as ``first_run``; the compiled-model cache is a temporary folder of this
  run), on the demo study and on a
  simulated 60 x 3 x 3 study, with each phase's seconds from ``run.json`` and the
  output folder's size;
* ``repeat_compile_s``: compile seconds of a second fit of the same model and design in
  one process;
* ``per_fit_s``: seconds per fit of ``--studies`` simulated studies of the demo's design
  fitted one after another in one process, for beta-binomial and crossed-logit, as
  ``bayes-rr fit`` samples (two stages) and with all its post-processing;
* ``production_s``: seconds that the production figures and the strategies (default
  set, with costs and a criterion) add to a demo fit: ``line_result`` and
  ``production_document`` timed on the demo's posterior of 4 x 1,000 draws, in process;
* with ``--large``: the large case of ``bench_sampling.py`` (ours and the baseline side
  by side, ESS per second and their ratio).
"""

from __future__ import annotations

import argparse
import json
import os
import shutil
import statistics
import subprocess
import sys
import tempfile
import time
import warnings
from pathlib import Path

TARGETS = {
    "warm demo fit wall_s": 5.0,
    "post-processing / sampling": 0.25,
    "repeat compile_s": 1.0,
    "per-fit s, beta-binomial": 1.0,
    "per-fit s, crossed-logit": 3.0,
    "demo folder MB": 15.0,
    "production figures s, demo": 1.0,
}


def _folder_mb(folder: Path) -> float:
    return sum(p.stat().st_size for p in folder.rglob("*") if p.is_file()) / 1e6


def _write_sim_csv(path: Path, parts: int, appraisers: int, trials: int, seed: int) -> Path:
    from bayes_rr.io.fit_folder import calls_table
    from bayes_rr.simulation.known_truth import simulate_crossed_logit

    sim = simulate_crossed_logit(parts, appraisers, trials, mu=-0.5, sigma_part=2.0,
                                 sigma_appraiser=0.5, sigma_interaction=0.3, seed=seed)  # fmt: skip
    calls_table(sim.study).to_csv(path, index=False)
    return path


def whole_fit(data: Path, model: str | None, repeats: int, work: Path) -> dict:
    """Wall seconds of the CLI fit as a new process, phases from run.json, folder size."""
    cmd = [sys.executable, "-m", "bayes_rr.cli", "fit", str(data), "--quiet", "--overwrite"]
    if model:
        cmd += ["--model", model]
    walls, phases, sources, size, cold = [], [], [], 0.0, {}
    for k in range(repeats + 1):  # the first run fills the caches and is not counted
        out = work / f"fit-{data.stem}"
        t0 = time.perf_counter()
        done = subprocess.run([*cmd, "--out", str(out)], capture_output=True, text=True)
        wall = time.perf_counter() - t0
        if done.returncode not in (0, 3):
            raise RuntimeError(done.stderr[-2000:])
        run = json.loads((out / "run.json").read_text())
        if not k:
            cold = {"wall_s": wall, "compile_s": run["timings"]["compile_s"],
                    "source": run.get("compiled_model_source")}  # fmt: skip
            continue
        walls.append(wall)
        phases.append(run["timings"])
        sources.append(run.get("compiled_model_source"))
        size = _folder_mb(out)
    keys = phases[0].keys()
    median_phases = {key: statistics.median(p[key] for p in phases) for key in keys}
    post = median_phases.get("estimands_s", 0) + median_phases.get("summaries_s", 0)
    return {
        "wall_s": statistics.median(walls),
        "phases_s": median_phases,
        "post_over_sampling": post / median_phases["sample_s"],
        "folder_mb": size,
        "compiled_model_sources": sources,
        "first_run": cold,
    }


def repeat_compile(repeats: int) -> float:
    """Compile seconds of a repeated fit of the same model and design in one process."""
    from bayes_rr.inference.sampling import SamplerSettings
    from bayes_rr.priors.spec import load_spec
    from bayes_rr.study.data import read_study
    from bayes_rr.study.describe import demo_path
    from bayes_rr.workflow.fit import fit_study

    study = read_study(demo_path())
    spec = load_spec("crossed-logit")
    settings = SamplerSettings.from_spec(spec, seed=1, progress=False)
    fit_study(study, spec, settings)
    return statistics.median(
        fit_study(study, spec, settings).provenance["timings"]["compile_s"] for _ in range(repeats)
    )


def per_fit(model: str, studies: int) -> dict:
    """Seconds per fit of simulated studies of the demo's design (45 x 3 x 3) in one process."""
    from bayes_rr.inference.sampling import SamplerSettings
    from bayes_rr.priors.spec import load_spec
    from bayes_rr.simulation.known_truth import simulate_crossed_logit
    from bayes_rr.workflow.fit import fit_study

    spec = load_spec(model)
    times, gates, draws = [], 0, []
    for seed in range(studies):
        study = simulate_crossed_logit(45, 3, 3, mu=-1.0, sigma_part=1.5, sigma_appraiser=0.6,
                                       sigma_interaction=0.3, seed=seed).study  # fmt: skip
        settings = SamplerSettings.from_spec(spec, seed=seed, progress=False)
        t0 = time.perf_counter()
        # as `bayes-rr fit` runs without --draws: a short first stage, the spec's full
        # length only when the gate asks for it
        result = fit_study(study, spec, settings, two_stage=True)
        times.append(time.perf_counter() - t0)
        gates += result.diagnostics.ok
        draws.append(result.provenance["stages"][-1]["draws"])
    return {"median_s": statistics.median(times), "first_s": times[0], "passed_gate": gates,
            "studies": studies, "draws_a_chain": draws}  # fmt: skip


def production_cost(repeats: int) -> dict:
    """Seconds the production figures add to the demo fit (median over ``repeats``)."""
    from bayes_rr.inference.sampling import SamplerSettings
    from bayes_rr.priors.spec import load_spec
    from bayes_rr.results.decisions import parse_criteria
    from bayes_rr.results.production import line_result, production_document
    from bayes_rr.study.data import read_study
    from bayes_rr.study.describe import demo_path
    from bayes_rr.study.production import parse_production
    from bayes_rr.workflow.fit import fit_study

    study = read_study(demo_path())
    spec = load_spec("reference-logit")
    fit = fit_study(study, spec, SamplerSettings.from_spec(spec, draws=1000, seed=1))
    mix = parse_production(
        "bad_share = [0.01, 0.04]\n[costs]\nfalse_reject = 12\nescape = 400\ncall = 0.5\n"
    )
    criteria = parse_criteria(
        "[[criterion]]\nkey = 'escaped_per_million'\nscope = 'production'\nbelow = 500\n"
        "required_probability = 0.95\n"
    )
    times = []
    for _ in range(repeats):
        t0 = time.perf_counter()
        line = line_result(fit.idata.posterior, spec, study, mix, seed=1)
        production_document(line, 0.95, criteria)
        times.append(time.perf_counter() - t0)
    return {"median_s": statistics.median(times), "runs_s": times,
            "draws": int(fit.idata.posterior.sizes["chain"] * fit.idata.posterior.sizes["draw"]),
            "strategies": len(line.strategies)}  # fmt: skip


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--json", action="store_true")
    parser.add_argument("--repeats", type=int, default=3)
    parser.add_argument("--studies", type=int, default=20)
    parser.add_argument("--large", action="store_true")
    args = parser.parse_args()
    warnings.filterwarnings("ignore")
    from bayes_rr.study.describe import demo_path

    work = Path(tempfile.mkdtemp(prefix="bench-fit-"))
    # A compile cache of this run alone (the fit processes inherit it): the first,
    # unmeasured fit of each model compiles and stores, the measured ones load.
    os.environ["BAYES_RR_CACHE_DIR"] = str(work / "cache")
    try:
        typical = _write_sim_csv(work / "typical_60x3x3.csv", 60, 3, 3, seed=2026)
        figures = {
            "machine": {"cpus": os.cpu_count(), "python": sys.version.split()[0]},
            "whole_fit": {
                "demo (reference-logit)": whole_fit(demo_path(), None, args.repeats, work),
                "60x3x3 (crossed-logit)": whole_fit(typical, "crossed-logit", args.repeats, work),
            },
            "repeat_compile_s": repeat_compile(args.repeats),
            "per_fit_s": {m: per_fit(m, args.studies) for m in ("beta-binomial", "crossed-logit")},
            "production_s": production_cost(args.repeats),
        }
        if args.large:
            script = Path(__file__).with_name("bench_sampling.py")
            done = subprocess.run(
                [sys.executable, str(script), "--cases", "large", "--json", "--repeats",
                 str(args.repeats)], capture_output=True, text=True, check=True,
            )  # fmt: skip
            figures["large"] = json.loads(done.stdout)["cases"][0]
    finally:
        shutil.rmtree(work, ignore_errors=True)
    demo = figures["whole_fit"]["demo (reference-logit)"]
    figures["against_targets"] = {
        "warm demo fit wall_s": (demo["wall_s"], TARGETS["warm demo fit wall_s"]),
        "post-processing / sampling": (demo["post_over_sampling"],
                                       TARGETS["post-processing / sampling"]),
        "repeat compile_s": (figures["repeat_compile_s"], TARGETS["repeat compile_s"]),
        "compile_s, new process": (demo["phases_s"]["compile_s"], TARGETS["repeat compile_s"]),
        "per-fit s, beta-binomial": (figures["per_fit_s"]["beta-binomial"]["median_s"],
                                     TARGETS["per-fit s, beta-binomial"]),
        "per-fit s, crossed-logit": (figures["per_fit_s"]["crossed-logit"]["median_s"],
                                     TARGETS["per-fit s, crossed-logit"]),
        "demo folder MB": (demo["folder_mb"], TARGETS["demo folder MB"]),
        "production figures s, demo": (figures["production_s"]["median_s"],
                                       TARGETS["production figures s, demo"]),
    }  # fmt: skip
    if args.json:
        print(json.dumps(figures, indent=2))
        return
    for name, (value, target) in figures["against_targets"].items():
        verdict = "met" if value <= target else "not met"
        print(f"{name:32s} {value:8.2f}   target <= {target:g}   {verdict}")
    for name, row in figures["whole_fit"].items():
        phases = ", ".join(f"{k} {v:.1f}" for k, v in row["phases_s"].items())
        print(f"{name}: wall {row['wall_s']:.1f} s ({phases}); folder {row['folder_mb']:.1f} MB")
        first = row["first_run"]
        print(f"  first run (compiles and stores): wall {first['wall_s']:.1f} s, compile "
              f"{first['compile_s']:.1f} s; measured runs' compiled model: "
              f"{sorted(set(map(str, row['compiled_model_sources'])))}")  # fmt: skip


if __name__ == "__main__":
    main()
