"""Fits of the wrong-call models: recovery of known rates, the rates leading the output,
limiting cases, and the dental data (Espeland and Handelman 1989) against the published
maximum-likelihood fit and our own EM."""

import json

import numpy as np
import pytest
from test_wrong_calls import (
    DENTAL_FALSE_POSITIVE,
    DENTAL_PREVALENCE,
    DENTAL_SENSITIVITY,
    dental_calls,
    dental_study,
    em_two_classes,
)
from typer.testing import CliRunner

from bayes_rr.cli import app
from bayes_rr.inference.sampling import SamplerSettings
from bayes_rr.priors.spec import load_spec, models_dir, parse_spec
from bayes_rr.simulation.known_truth import simulate_status_logit
from bayes_rr.study.data import study_from_cells
from bayes_rr.workflow.fit import fit_study

runner = CliRunner()


def rows_of(summary_or_result, **match):
    rows = (
        summary_or_result["estimands"]
        if isinstance(summary_or_result, dict)
        else [r.__dict__ for r in summary_or_result.estimand_rows]
    )
    return [r for r in rows if all(r[k] == v for k, v in match.items())]


@pytest.fixture(scope="module")
def reference_run(tmp_path_factory):
    """A simulated study with a reference status, fitted by the CLI without --model."""
    sim = simulate_status_logit(30, 3, 2, seed=1)
    folder = tmp_path_factory.mktemp("reference")
    data = folder / "study.csv"
    table = sim.study.calls.copy()
    table["reference"] = table["part"].map(sim.study.reference).map({0: "pass", 1: "fail"})
    table["call"] = table["call"].map({0: "pass", 1: "fail"})
    table.to_csv(data, index=False)
    criteria = folder / "criteria.toml"
    criteria.write_text('[[criterion]]\nkey = "false_reject_rate"\nscope = "study"\n'
                        "below = 0.5\nrequired_probability = 0.95\n")  # fmt: skip
    # without --draws: a first stage short of the gate runs on to the full number
    result = runner.invoke(app, ["fit", str(data), "--out", str(folder / "fit"),
                                 "--seed", "1", "--quiet",
                                 "--criteria", str(criteria)])  # fmt: skip
    return sim, folder / "fit", result


def test_criteria_on_a_system_rate_are_evaluated_in_the_fit(reference_run):
    _, folder, result = reference_run
    (row,) = json.loads((folder / "summary.json").read_text())["criteria"]
    assert row["key"] == "false_reject_rate" and row["probability"] == 1.0 and row["met"]
    assert "criterion: false reject rate (study scope) is below 0.5" in " ".join(
        result.stdout.split()
    )


def test_reference_fit_is_the_default_and_passes_the_gate(reference_run):
    _, folder, result = reference_run
    assert result.exit_code == 0, result.output
    summary = json.loads((folder / "summary.json").read_text())
    assert summary["model"]["name"] == "reference-logit"
    assert " ".join(result.stdout.split()).startswith("model: the data give each part")
    assert summary["diagnostics"]["ok"]


def test_reference_fit_intervals_hold_the_true_rates(reference_run):
    sim, folder, _ = reference_run
    summary = json.loads((folder / "summary.json").read_text())
    truth = sim.params["rates"]
    for key in ("false_reject_rate", "false_accept_rate"):
        (row,) = rows_of(summary, key=key, scope="study", level="system")
        assert row["lower"] <= truth["system"][key] <= row["upper"], key
        for j, appraiser in enumerate(sim.study.appraisers):
            (row,) = rows_of(summary, key=key, scope="study", level="appraiser",
                             appraiser=appraiser)  # fmt: skip
            assert row["lower"] <= truth["appraiser"][key][j] <= row["upper"], (key, appraiser)


def test_rates_lead_the_terminal_output(reference_run):
    _, _, result = reference_run
    text = " ".join(result.stdout.split())
    first_rate = text.index("Of good parts, A1 rejects")
    assert first_rate < text.index("Study level")  # the rates come before the R&R table
    assert "Of bad parts" in text and "Wrong calls" in text
    assert "a new appraiser" in text


def test_reference_fit_also_gives_the_decomposition(reference_run):
    _, folder, _ = reference_run
    summary = json.loads((folder / "summary.json").read_text())
    for scope in ("study", "population"):
        (t,) = rows_of(summary, key="rr_variance", scope=scope, level="study")
        (r,) = rows_of(summary, key="repeatability_variance", scope=scope, level="study")
        (v,) = rows_of(summary, key="reproducibility_variance", scope=scope, level="study")
        assert t["mean"] == pytest.approx(r["mean"] + v["mean"], rel=1e-9)


def test_checks_compare_agreement_with_the_reference(reference_run):
    _, folder, _ = reference_run
    result = runner.invoke(app, ["check", str(folder), "--json", "--draws", "100"])
    assert result.exit_code == 0, result.output
    names = [s["name"] for s in json.loads(result.stdout)["posterior_predictive"]["statistics"]]
    assert "reference_agreement" in names and "reference_agreement[A1]" in names


def test_report_states_the_rates_first(reference_run, tmp_path):
    _, folder, _ = reference_run
    out = tmp_path / "r.html"
    result = runner.invoke(app, ["report", str(folder), "--out", str(out)])
    assert result.exit_code == 0, result.output
    html = out.read_text()
    first_section = html[html.index("<section") : html.index("</section>")]
    # the answer leads with the system's wrong-call rates, each scope named in words
    assert first_section.index("false reject rate") < first_section.index("repeat disagreement")
    assert "a new appraiser from the same population" in first_section
    assert "Of good parts, A1 rejects" in html  # the readings, in the results
    assert "Appraisers compared" in html and "classical interval (Newcombe)" in html


@pytest.mark.slow
def test_perfect_appraisers_have_rates_near_zero():
    # Limiting case: every call matches the reference.
    status = np.array([0] * 12 + [1] * 8)
    n = np.full((20, 3), 3)
    study = study_from_cells([f"P{i}" for i in range(20)], ["A", "B", "C"], n,
                             n * status[:, None], reference=status)  # fmt: skip
    spec = load_spec("reference-logit")
    result = fit_study(study, spec, SamplerSettings.from_spec(spec, draws=1000, seed=4))
    assert result.diagnostics.ok, result.diagnostics.reasons
    for key in ("false_reject_rate", "false_accept_rate"):
        (row,) = rows_of(result, key=key, scope="study", level="system")
        assert row["mean"] < 0.03 and row["upper"] < 0.08, row


def _no_part_term(name: str):
    text = (models_dir() / f"{name}.toml").read_text()
    head, tail = text.split("\n[terms.part]")[0], text.split("\n[terms.appraiser]")[1]
    return parse_spec(head + "\n[terms.appraiser]" + tail, f"{name} without part term")


@pytest.fixture(scope="module")
def dental_fit():
    spec = _no_part_term("latent-class")
    return fit_study(dental_study(), spec, SamplerSettings.from_spec(spec, draws=1000, seed=2))


@pytest.mark.slow
def test_dental_data_against_the_published_fit_and_our_em(dental_fit):
    assert dental_fit.diagnostics.ok, dental_fit.diagnostics.reasons
    em_sens, em_fpr, em_prev = em_two_classes(dental_calls())
    for j, appraiser in enumerate(dental_fit.study.appraisers):
        (far,) = rows_of(dental_fit, key="false_accept_rate", scope="study", level="appraiser",
                         appraiser=appraiser)  # fmt: skip
        (frr,) = rows_of(dental_fit, key="false_reject_rate", scope="study", level="appraiser",
                         appraiser=appraiser)  # fmt: skip
        # sensitivity = 1 - false accept rate, false positive rate = false reject rate
        for row, published, em, flip in (
            (far, DENTAL_SENSITIVITY[j], em_sens[j], True),
            (frr, DENTAL_FALSE_POSITIVE[j], em_fpr[j], False),
        ):
            mean = 1 - row["mean"] if flip else row["mean"]
            low, high = (
                (1 - row["upper"], 1 - row["lower"]) if flip else (row["lower"], row["upper"])
            )
            assert mean == pytest.approx(published, abs=0.02), (appraiser, row["key"])
            assert low <= published <= high and low <= em <= high, (appraiser, row["key"])
    (prev,) = rows_of(dental_fit, key="reject_prevalence", scope="population")
    assert prev["mean"] == pytest.approx(DENTAL_PREVALENCE, abs=0.02)
    assert prev["lower"] <= em_prev <= prev["upper"]
    assert dental_fit.wrong_calls["weak_identification"] is None


@pytest.mark.slow
@pytest.mark.parametrize("seed", [3, 5])
def test_latent_class_recovers_rates_without_label_switching(seed):
    sim = simulate_status_logit(60, 4, 3, sigma_part=0.5, hide_reference=True, seed=seed)
    spec = load_spec("latent-class")
    result = fit_study(sim.study, spec, SamplerSettings.from_spec(spec, draws=1000, seed=seed))
    assert result.diagnostics.ok, result.diagnostics.reasons
    for key in ("false_reject_rate", "false_accept_rate"):
        (row,) = rows_of(result, key=key, scope="study", level="system")
        assert row["lower"] <= sim.params["rates"]["system"][key] <= row["upper"], key
        assert row["upper"] < 0.5  # labels did not switch (rates would be near 1)
    probability = np.array([r["mean"] for r in rows_of(result, key="reject_probability")])
    assert np.mean((probability > 0.5) == (sim.params["status"] == 1)) > 0.9


@pytest.mark.slow
def test_latent_class_says_so_when_one_class_made_the_data():
    # Every part from the same class: nothing separates two classes.
    sim = simulate_status_logit(40, 3, 2, reject_share=0.0, sigma_part=1.5, hide_reference=True,
                                seed=6)  # fmt: skip
    spec = load_spec("latent-class")
    result = fit_study(sim.study, spec, SamplerSettings.from_spec(spec, draws=1000, seed=6))
    assert result.wrong_calls["weak_identification"] is not None


@pytest.mark.slow
def test_reference_and_latent_class_fits_agree_when_identified():
    sim = simulate_status_logit(60, 4, 3, sigma_part=0.5, seed=8)
    found = {}
    for name in ("reference-logit", "latent-class"):
        spec = load_spec(name)
        study = sim.study if name == "reference-logit" else study_from_cells(
            sim.study.parts, sim.study.appraisers, *_grids(sim.study))  # fmt: skip
        result = fit_study(study, spec, SamplerSettings.from_spec(spec, draws=1000, seed=8))
        assert result.diagnostics.ok, (name, result.diagnostics.reasons)
        found[name] = {r["key"]: r for r in rows_of(result, scope="study", level="system")}
    for key in ("false_reject_rate", "false_accept_rate"):
        a, b = found["reference-logit"][key], found["latent-class"][key]
        assert a["lower"] <= b["upper"] and b["lower"] <= a["upper"], key  # intervals overlap


def _grids(study):
    cells = study.cells
    n = np.zeros((len(study.parts), len(study.appraisers)), dtype=int)
    s = np.zeros_like(n)
    n[cells["part_index"], cells["appraiser_index"]] = cells["n"]
    s[cells["part_index"], cells["appraiser_index"]] = cells["s"]
    return n, s
