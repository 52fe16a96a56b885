"""Planning, calibration and batch fits on Dask (bayes_rr.simulation).

External references: scipy.stats.kstest (uniformity of ranks) and the binomial
standard error of a coverage share; simulation-based calibration after Talts et al.
(2018), whose claim is that ranks of prior draws among the posterior draws of a
correct fit are uniform.
"""

from __future__ import annotations

import dataclasses
import json
import shutil
from pathlib import Path
from unittest import mock

import numpy as np
import pytest
from scipy import stats

from bayes_rr.core.errors import OutputError, SpecError
from bayes_rr.families import FAMILIES, family_of
from bayes_rr.priors.spec import load_spec, parse_spec
from bayes_rr.simulation.designs import (
    Design,
    design_grid,
    parse_counts,
    pick_parts,
    reference_statuses,
)
from bayes_rr.simulation.quick import fractional_rank


@pytest.fixture(scope="module")
def client():
    """A local Dask cluster with two single-threaded worker processes."""
    from bayes_rr.simulation.runner import close_client, make_client

    dask_client = make_client(workers=2)
    yield dask_client
    close_client(dask_client)


def _bb_spec(intercept_mu: float = 0.0, intercept_sigma: float = 1.5):
    text = load_spec("beta-binomial").text.replace(
        "mu = 0.0, sigma = 1.5", f"mu = {intercept_mu}, sigma = {intercept_sigma}"
    )
    assert f"mu = {intercept_mu}" in text
    return parse_spec(text, "test-bb.toml")


# ---------------------------------------------------------------------------
# pieces without Dask


def test_design_grid_and_counts():
    assert parse_counts("40, 20,40", "--parts", 2, 100) == (20, 40)
    with pytest.raises(SpecError, match="'x' is not a whole number"):
        parse_counts("20,x", "--parts", 2, 100)
    grid = design_grid((40, 20), (3,), (2, 3), None)
    calls = [d.parts * d.appraisers * d.trials for d in grid]
    assert calls == sorted(calls) and len(grid) == 4


def test_reference_statuses_and_part_picking():
    assert reference_statuses(10, 0.3).sum() == 3
    assert reference_statuses(10, 0.0).sum() == 1  # one part of each status at least
    rng = np.random.default_rng(0)
    rates = np.concatenate([np.full(50, 0.5), np.full(150, 0.01)])
    picked, share = pick_parts(rates, 20, 0.4, rng)
    assert len(set(picked)) == 20 and share == pytest.approx(0.4)
    assert np.sum(rates[picked] == 0.5) == 8
    # too few borderline parts: the clear ones fill in, and the share reached says so
    picked, share = pick_parts(np.concatenate([np.full(3, 0.5), np.full(50, 0.0)]), 20, 0.5, rng)
    assert share == pytest.approx(3 / 20)


def test_fractional_ranks_of_exact_draws_are_uniform():
    """A truth drawn from the same distribution as the 'posterior' draws has a uniform
    fractional rank (checked with scipy.stats.kstest); a shifted truth has not."""
    rng = np.random.default_rng(1)
    good, bad = [], []
    for _ in range(400):
        draws = rng.normal(size=(2, 200))
        good.append(fractional_rank(draws, rng.normal(), 400, rng))
        bad.append(fractional_rank(draws, rng.normal(0.7), 400, rng))
    assert stats.kstest(good, "uniform").pvalue > 0.01
    assert stats.kstest(bad, "uniform").pvalue < 1e-6


def test_simulated_studies_follow_the_design():
    from bayes_rr.simulation.truths import simulate_design

    spec = load_spec("crossed-logit")
    sim = simulate_design(spec, Design(12, 3, 2, 0.5), 4, seed=3)
    study = sim.study(0)
    assert (len(study.parts), len(study.appraisers)) == (12, 3)
    assert (study.cells["n"] == 2).all() and study.reference is None
    assert np.all(sim.borderline_share <= 1) and sim.truth is None
    ref = simulate_design(load_spec("reference-logit"), Design(10, 2, 2, 0.3), 3, seed=3)
    assert ref.study(1).reference.sum() == 3 and ref.truth is not None
    # the same seed gives the same studies
    again = simulate_design(load_spec("reference-logit"), Design(10, 2, 2, 0.3), 3, seed=3)
    np.testing.assert_array_equal(ref.calls, again.calls)


def test_unsupported_model_is_refused():
    from bayes_rr.simulation.designs import check_simulated

    custom = dataclasses.replace(family_of(load_spec("beta-binomial")), simulated=False)
    with (
        mock.patch.dict(FAMILIES, {"beta_binomial": custom}),
        pytest.raises(SpecError, match="can be simulated for the families"),
    ):
        check_simulated(load_spec("beta-binomial"), None)
    with pytest.raises(SpecError, match="both reference statuses"):
        check_simulated(load_spec("reference-logit"), 1.0)


def test_run_folder_is_ours_or_refused(tmp_path):
    from bayes_rr.simulation.runner import prepare_run_dir

    foreign = tmp_path / "foreign"
    foreign.mkdir()
    (foreign / "notes.txt").write_text("mine")
    with pytest.raises(OutputError, match="not a 'plan' run folder"):
        prepare_run_dir(foreign, "plan", "abc")
    assert (foreign / "notes.txt").read_text() == "mine"
    run = tmp_path / "run"
    prepare_run_dir(run, "plan", "abc")
    prepare_run_dir(run, "plan", "abc")  # the same run: resumed
    with pytest.raises(OutputError, match="other settings"):
        prepare_run_dir(run, "plan", "xyz")


# ---------------------------------------------------------------------------
# on a two-worker cluster


def _results(document: dict) -> list[dict]:
    """The plan's rows without the clock times."""
    return [{k: v for k, v in row.items() if k != "seconds_per_fit"}
            for row in document["designs"]]  # fmt: skip


@pytest.fixture(scope="module")
def bb_plan(client, tmp_path_factory):
    from bayes_rr.simulation.plan import PlanRequest, run_plan

    out = tmp_path_factory.mktemp("plan") / "run"
    request = PlanRequest(load_spec("beta-binomial"), (Design(8, 3, 2), Design(48, 3, 2)), 6, 7,
                          target_width=0.15, target_key="repeatability_variance")  # fmt: skip
    return run_plan(request, out, client=client, progress=False), out, request


def test_local_cluster_leaves_no_garbage_collector_timer_in_this_process(client):
    """distributed's scheduler (here in-process) hooks a timer into ``gc.callbacks``; a
    Ctrl-C inside it broke its state and every later full collection printed a traceback
    above the interrupt message (CI, distributed 2026.8). The cluster must not leave it."""
    import gc

    owners = [getattr(cb, "__self__", None) for cb in gc.callbacks]
    assert not any(type(o).__module__.startswith("distributed") for o in owners), owners
    gc.collect()  # a full collection with the cluster up raises nothing


def test_plan_more_parts_narrower_intervals(bb_plan):
    document, out, _ = bb_plan
    small, large = document["designs"]
    assert (small["parts"], large["parts"]) == (8, 48)
    for key in ("study__study__repeatability_variance", "study__study__repeat_disagreement",
                "study__study__reproducibility_variance"):  # fmt: skip
        assert large["expected_width"][key] < small["expected_width"][key]
        low, high = large["width_range"][key]
        assert low <= large["expected_width"][key] <= high
    assert small["sims"] == 6 and small["fits_failed"] == 0
    saved = json.loads((out / "plan.json").read_text())
    assert saved["designs"][1]["expected_width"] == large["expected_width"]
    assert (out / "plan_widths.png").stat().st_size > 10_000
    assert "repeatability variance" in document["recommendation"]


def test_plan_same_seed_same_results_with_one_worker(bb_plan, tmp_path):
    """A run's tasks carry their own seeds: one worker gives what two gave."""
    from bayes_rr.simulation.plan import run_plan

    document, _, request = bb_plan
    one = run_plan(request, tmp_path / "one", workers=1, progress=False)
    assert _results(one) == _results(document)


def test_plan_resumes_after_an_interruption(bb_plan, client, tmp_path):
    """A run folder with some task results (as a killed run leaves it) is completed by
    running the same request again: kept results are not recomputed, the rest are, and
    the plan equals the uninterrupted one."""
    from bayes_rr.simulation.plan import run_plan

    document, out, request = bb_plan
    copy = tmp_path / "copy"
    shutil.copytree(out, copy)
    tasks = sorted((copy / "tasks").glob("*.json"))
    for path in tasks[::2]:
        path.unlink()
    (copy / "plan.json").unlink()
    again = run_plan(request, copy, client=client, progress=False)
    assert again["resumed_tasks"] == len(tasks) - len(tasks[::2])
    assert _results(again) == _results(document)


def test_calibration_passes_for_the_right_model_and_fails_for_a_wrong_prior(client, tmp_path):
    """SBC of the beta-binomial model at a small design: ranks uniform at the 0.001 level
    and 90% coverage within 3 binomial standard errors of 0.9. Fitting with another
    intercept prior than the one simulated from must fail the same check."""
    from bayes_rr.simulation.calibrate import CalibrationRequest, run_calibration

    spec = load_spec("beta-binomial")
    sims = 40
    good = run_calibration(CalibrationRequest(spec, Design(8, 3, 2), sims, 5), tmp_path / "good",
                           client=client, progress=False)  # fmt: skip
    names = {row["name"] for row in good["parameters"]}
    assert {"intercept", "sigma_part", "rho", "study__study__call_rate"} <= names
    three_se = 3 * np.sqrt(0.9 * 0.1 / sims)
    for row in good["parameters"]:
        assert row["sims"] == sims
        assert row["rank_uniformity_p"] > 0.001, row
        assert abs(row["coverage_90"] - 0.9) <= three_se, row
    saved = json.loads((tmp_path / "good" / "calibration.json").read_text())
    assert [r["name"] for r in saved["parameters"]] == [r["name"] for r in good["parameters"]]
    wrong = CalibrationRequest(spec, Design(8, 3, 2), sims, 5, fit_spec=_bb_spec(2.0, 0.2))
    bad = run_calibration(wrong, tmp_path / "bad", client=client, progress=False)
    p = {row["name"]: row["rank_uniformity_p"] for row in bad["parameters"]}
    assert p["intercept"] < 0.001
    assert bad["verdict"].startswith("Miscalibration found")


def test_batch_reports_a_malformed_file_and_fits_the_rest(client, tmp_path):
    from bayes_rr.simulation.batch import BatchRequest, find_study_files, run_batch
    from bayes_rr.simulation.known_truth import simulate_beta_binomial

    folder = tmp_path / "stations"
    folder.mkdir()
    for k in (1, 2):
        simulate_beta_binomial(10, 3, 2, seed=k).study.calls.to_csv(folder / f"st{k}.csv",
                                                                     index=False)  # fmt: skip
    (folder / "st3.csv").write_text("part,appraiser,call\nP1,A,maybe\n")
    (folder / "readme.txt").write_text("not a study")
    files = find_study_files(folder)
    assert [f.name for f in files] == ["st1.csv", "st2.csv", "st3.csv"]
    document = run_batch(BatchRequest(files, "beta-binomial", 3, 1000), tmp_path / "out",
                         client=client, progress=False)  # fmt: skip
    assert [Path(r["file"]).name for r in document["rows"]] == ["st1.csv", "st2.csv"]
    (failure,) = document["failures"]
    assert failure["input"]["file"].endswith("st3.csv") and "maybe" in failure["error"]
    assert (tmp_path / "out" / "tasks" / "st3.failed.json").is_file()
    table = (tmp_path / "out" / "batch.csv").read_text().splitlines()
    assert len(table) == 3 and table[0].startswith("file,")
    html = (tmp_path / "out" / "batch.html").read_text()
    assert "st3.csv" in html and "maybe" in html
    assert (tmp_path / "out" / "fits" / "st1" / "summary.json").is_file()
    assert (folder / "readme.txt").read_text() == "not a study"


# ---------------------------------------------------------------------------
# the commands: bad input is refused before any work


@pytest.mark.parametrize(
    ("args", "message"),
    [
        (["plan", "--parts", "20,x"], "'x' is not a whole number"),
        (["plan", "--model", "latent-class", "--part-mix", "1"], "parts of both classes"),
        (["plan", "--target-assurance", "0.8"], "--target-assurance needs --criteria"),
        (["plan", "--target-key", "nonsense", "--target-width", "0.1"], "--target-key"),
        (["plan", "--sims", "1"], "--sims 1"),
        (["calibrate", "--model", "crossed-logit", "--part-mix", "0.3"], "--part-mix"),
        (["calibrate", "--model", "latent-class", "--part-mix", "0.3"], "share of reject parts"),
        (["calibrate", "--sims", "5"], "--sims 5"),
        (["plan", "--scheduler", "tcp://127.0.0.1:9", "--sims", "2", "--parts", "5"],
         "no Dask scheduler answered"),
    ],
)  # fmt: skip
def test_commands_refuse_bad_input_in_one_line(tmp_path, args, message):
    from typer.testing import CliRunner

    from bayes_rr.cli import app

    out = tmp_path / "run"
    result = CliRunner().invoke(app, [*args, "--out", str(out), "--quiet"])
    assert result.exit_code == 2, result.output
    assert message in " ".join(result.output.split())
    assert "Traceback" not in result.output
    if "--scheduler" not in args:
        assert not out.exists()  # refused before anything was written


def test_batch_without_study_files_is_refused(tmp_path):
    from typer.testing import CliRunner

    from bayes_rr.cli import app

    (tmp_path / "notes.txt").write_text("x")
    result = CliRunner().invoke(app, ["batch", str(tmp_path), "--out", str(tmp_path / "o")])
    assert result.exit_code == 2 and "no study files" in result.output
    assert not (tmp_path / "o").exists()


@pytest.mark.slow
def test_near_zero_reproducibility_prior_gives_near_zero_widths(client, tmp_path):
    """With appraiser and interaction scales held near 0 by their priors, appraisers
    cannot differ: the reproducibility variance's interval is near 0 wide, far
    narrower than under the bundled prior."""
    from bayes_rr.simulation.plan import PlanRequest, run_plan

    spec = load_spec("crossed-logit")
    lines = spec.text.splitlines()
    for term in ("appraiser", "interaction"):
        start = lines.index(f"[terms.{term}]")
        at = next(k for k in range(start, len(lines)) if lines[k].startswith("scale_prior"))
        lines[at] = 'scale_prior = { distribution = "half_normal", sigma = 0.005 }'
    tight = parse_spec("\n".join(lines), "tight.toml")
    assert tight.term("appraiser").prior.kwargs["sigma"] == 0.005
    key = "study__study__reproducibility_variance"
    widths = {}
    for name, model in (("bundled", spec), ("tight", tight)):
        request = PlanRequest(model, (Design(20, 3, 2),), 4, 2)
        document = run_plan(request, tmp_path / name, client=client, progress=False)
        widths[name] = document["designs"][0]["expected_width"][key]
    assert widths["tight"] < 1e-3
    assert widths["bundled"] > 10 * widths["tight"]


@pytest.mark.slow
def test_a_killed_plan_resumes_where_it_stopped(tmp_path):
    """Ctrl-C during a run keeps the results written so far (exit 130, with how to go
    on); the same command then runs only the rest."""
    import os
    import signal
    import subprocess
    import sys
    import time

    out = tmp_path / "run"
    command = [sys.executable, "-m", "bayes_rr.cli", "plan", "--model", "beta-binomial",
               "--parts", "8", "--trials", "2", "--sims", "12", "--workers", "1", "--seed", "4",
               "--out", str(out), "--quiet"]  # fmt: skip
    env = {**os.environ, "COLUMNS": "100"}
    process = subprocess.Popen(command, stdout=subprocess.PIPE, stderr=subprocess.PIPE,
                               text=True, env=env)  # fmt: skip
    deadline = time.monotonic() + 300
    while time.monotonic() < deadline and process.poll() is None:
        if len(list((out / "tasks").glob("*.json"))) >= 3:
            break
        time.sleep(0.2)
    process.send_signal(signal.SIGINT)
    _, stderr = process.communicate(timeout=120)
    assert process.returncode == 130, stderr
    assert "run the same command again" in stderr
    kept = len(list((out / "tasks").glob("d00-s*.json")))
    assert 3 <= kept < 12
    again = subprocess.run(command, capture_output=True, text=True, env=env, timeout=600)
    assert again.returncode == 0, again.stderr
    document = json.loads((out / "plan.json").read_text())
    assert document["resumed_tasks"] == kept
    assert document["designs"][0]["sims"] == 12


@pytest.mark.slow
def test_reference_logit_is_calibrated_at_a_small_design(client, tmp_path):
    """Simulation-based calibration (Talts et al. 2018) of reference-logit at 12 parts x
    3 appraisers x 2 trials, 40 studies: the multiplicity-adjusted verdict finds no
    miscalibration, and the 90% intervals of the wrong-call rates cover their truth
    within 3 binomial standard errors of 0.9."""
    from bayes_rr.simulation.calibrate import CalibrationRequest, run_calibration

    spec = load_spec("reference-logit")
    sims = 40
    done = run_calibration(CalibrationRequest(spec, Design(12, 3, 2, 0.4), sims, 7),
                           tmp_path / "cal", client=client, progress=False)  # fmt: skip
    assert not done["verdict"].startswith("Miscalibration found"), done["verdict"]
    rows = {row["name"]: row for row in done["parameters"]}
    three_se = 3 * np.sqrt(0.9 * 0.1 / sims)
    rates = [name for name in rows if name.endswith(("false_reject_rate", "false_accept_rate"))]
    assert rates, sorted(rows)
    for name in rates:
        assert abs(rows[name]["coverage_90"] - 0.9) <= three_se, rows[name]
