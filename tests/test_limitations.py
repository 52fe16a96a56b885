"""Designs that cannot answer a question: results marked, readings withheld, reasons given."""

import json
from dataclasses import asdict, replace

import pytest
from typer.testing import CliRunner

from bayes_rr.cli import app, print_fit
from bayes_rr.core.jsonio import jsonable
from bayes_rr.io.fit_folder import summary_document
from bayes_rr.priors.spec import load_spec, models_dir
from bayes_rr.results.limitations import CONSTRUCTION, PRIOR, design_limitations
from bayes_rr.study.data import study_from_cells
from bayes_rr.workflow.fit import mark_limited, plain_readings

runner = CliRunner()


def _codes(study, spec=None):
    return {lim.code: lim for lim in design_limitations(study, spec)}


def test_a_good_design_has_no_limitations(small_sim):
    assert design_limitations(small_sim.study, load_spec("crossed-logit")) == []


def test_one_appraiser():
    study = study_from_cells(["P1", "P2"], ["A"], [[3], [3]], [[1], [2]])
    codes = _codes(study)
    assert codes["one_appraiser"].effect == CONSTRUCTION
    assert codes["one_appraiser"].covers("reproducibility_share", "study")
    assert not codes["one_appraiser"].covers("repeatability_variance", "study")
    assert codes["one_appraiser_population"].effect == PRIOR
    assert codes["one_appraiser_population"].covers("cross_disagreement", "population")


def test_one_trial_per_cell():
    study = study_from_cells(["P1", "P2"], ["A", "B"], [[1, 1], [1, 1]], [[1, 0], [0, 0]])
    lim = _codes(study)["one_trial"]
    assert lim.effect == PRIOR
    assert lim.covers("repeat_disagreement", "study") and lim.covers("repeatability_share", None)
    assert not lim.covers("rr_variance", "study")  # the total is still informed


def test_no_variation_in_the_calls():
    study = study_from_cells(["P1", "P2"], ["A", "B"], [[2, 2], [2, 2]], [[0, 0], [0, 0]])
    lim = _codes(study)["no_variation"]
    assert lim.covers("rr_variance", "study") and lim.covers("call_rate", "population")
    assert "accept" in lim.sentence


def _part_only_spec(folder):
    """The bundled crossed-logit spec without its appraiser and interaction terms."""
    text = (models_dir() / "crossed-logit.toml").read_text()
    head, tail = text.split("[terms.appraiser]")[0], text.split("[terms.reference]")[1]
    path = folder / "part-only.toml"
    path.write_text((head + "[terms.reference]" + tail).replace("crossed-logit", "part-only"))
    return path


def test_a_spec_without_appraiser_terms(small_sim, tmp_path):
    lim = _codes(small_sim.study, load_spec(_part_only_spec(tmp_path)))["no_appraiser_terms"]
    assert lim.effect == CONSTRUCTION and lim.covers("reproducibility_variance", "population")


def test_readings_that_rest_on_a_limited_result_are_withheld(fits, small_sim):
    result = fits["crossed-logit"]
    rows = [jsonable(asdict(r)) for r in result.estimand_rows]
    assert len(plain_readings(rows, 0.95)) == 3
    one_trial = _codes(
        study_from_cells(["P1", "P2"], ["A", "B"], [[1, 1], [1, 1]], [[1, 0], [0, 0]])
    )["one_trial"]
    readings = plain_readings(rows, 0.95, [one_trial])
    assert len(readings) == 1 and "different appraisers" in readings[0]


def test_limited_rows_carry_a_note_and_print_no_number(fits, capsys):
    result = fits["crossed-logit"]
    one_trial = _codes(
        study_from_cells(["P1", "P2"], ["A", "B"], [[1, 1], [1, 1]], [[1, 0], [0, 0]])
    )["one_trial"]
    rows = mark_limited(list(result.estimand_rows), [one_trial])
    noted = {(r.key, r.scope) for r in rows if r.note and r.note.startswith("set by the prior")}
    assert ("repeatability_variance", "study") in noted
    assert ("rr_variance", "study") not in noted
    limited = replace(result, estimand_rows=tuple(rows), limitations=(one_trial,))
    summary = summary_document(limited)
    assert summary["limitations"][0]["code"] == "one_trial"
    print_fit(summary, None)
    printed = capsys.readouterr().out
    assert "prior only" in printed
    assert one_trial.sentence.split(",")[0] in " ".join(printed.split())
    share = next(r for r in rows if (r.key, r.scope, r.level) ==
                 ("repeatability_variance", "study", "study"))  # fmt: skip
    assert f"{share.mean:.4f}" not in printed


def test_an_unconverged_fit_prints_no_result_numbers(fits, capsys):
    summary = summary_document(fits["crossed-logit"])
    failed = {"ok": False, "reasons": ["max r_hat 1.2 > 1.01"], "advice": ["run longer"]}
    summary["diagnostics"] = {**summary["diagnostics"], **failed}
    print_fit(summary, None)
    printed = capsys.readouterr().out
    assert "NOT CONVERGED" in printed and "run longer" in printed
    for row in summary["estimands"]:
        if row["level"] == "study" and row["mean"] is not None:
            assert f"{row['mean']:.4f}" not in printed


@pytest.mark.slow
def test_fit_without_appraiser_terms_says_why_end_to_end(small_sim, tmp_path):
    spec = _part_only_spec(tmp_path)
    data = tmp_path / "study.csv"
    small_sim.study.calls.to_csv(data, index=False)
    out = tmp_path / "fit"
    result = runner.invoke(app, ["fit", str(data), "--out", str(out), "--model", str(spec),
                                 "--draws", "1000", "--seed", "5", "--quiet"])  # fmt: skip
    assert result.exit_code == 0, result.output
    summary = json.loads((out / "summary.json").read_text())
    assert [lim["code"] for lim in summary["limitations"]] == ["no_appraiser_terms"]
    assert not any("due to appraisers" in s for s in summary["readings"])
    assert "by design" in result.stdout
    assert "zero by the model's construction" in " ".join(result.stdout.split())


def test_the_answer_box_and_the_python_face_follow_the_limitations(fits):
    """A study with one trial per cell: the report's answer box shows the repeat
    disagreement as set by the prior, not as a number, and the face's summary carries the
    note on that row."""
    from bayes_rr.api.fitting import Fit
    from bayes_rr.report.answer import answer_box
    from bayes_rr.report.blocks import ReportInputs

    result = fits["crossed-logit"]
    one_trial = _codes(
        study_from_cells(["P1", "P2"], ["A", "B"], [[1, 1], [1, 1]], [[1, 0], [0, 0]])
    )["one_trial"]
    rows = mark_limited(list(result.estimand_rows), [one_trial])
    limited = replace(result, estimand_rows=tuple(rows), limitations=(one_trial,))
    summary = summary_document(limited)
    box = answer_box(ReportInputs(summary=summary, run={}, classical={}, checks=None))
    repeat = next(r for r in rows if (r.key, r.scope, r.level) ==
                  ("repeat_disagreement", "study", "study"))  # fmt: skip
    assert f"{repeat.mean:.1%}" not in box
    assert "set by the prior (one trial)" in box
    frame = Fit(result.study, result.spec, summary, {}, {}, None, result=limited).summary()
    noted = frame[(frame["key"] == "repeat_disagreement") & (frame["level"] == "study")]
    assert noted["note"].str.startswith("set by the prior").all()
    assert (noted["rests_on"] == "prior only").all()
    assert (frame.loc[frame["key"] == "call_rate", "rests_on"] == "data").all()
