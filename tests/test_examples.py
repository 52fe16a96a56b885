"""The examples run as written (short chains; their output is checked, not only their exit)."""

import importlib.util
from pathlib import Path

import pytest

EXAMPLES = Path(__file__).resolve().parent.parent / "examples"


def _load(path: Path):
    spec = importlib.util.spec_from_file_location(path.stem, path)
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module


def test_analyse_demo_runs_the_whole_job(tmp_path, capsys):
    _load(EXAMPLES / "analyse_demo.py").main(tmp_path, draws=300)
    printed = capsys.readouterr().out
    assert "false_reject_rate" in printed and "repeat_disagreement" in printed
    assert (tmp_path / "fit" / "summary.json").is_file()
    assert (tmp_path / "report.html").read_text(encoding="utf-8").startswith("<!DOCTYPE html>")


@pytest.mark.slow
def test_sequential_example_carries_last_year_in(tmp_path, capsys):
    _load(EXAMPLES / "sequential" / "sequential.py").main(tmp_path)
    printed = capsys.readouterr().out
    assert "quantile gap" in printed
    assert (tmp_path / "fit-2026" / "model.toml").read_text().count("[[earlier_study.factor]]")


@pytest.mark.slow
def test_gauge_example_runs_as_the_readme_says(tmp_path):
    """The README's call-curve command on the invented plug-gauge study: production
    figures, a criterion on one inspector and one on the side of a limit."""
    import json

    from typer.testing import CliRunner

    from bayes_rr.cli import app

    gauge = EXAMPLES / "gauge"
    out = tmp_path / "fit-gauge"
    result = CliRunner().invoke(app, [
        "fit", str(gauge / "gauge_study.csv"), "--model", "call-curve", "--upper-limit",
        "10.050", "--production", str(gauge / "production.toml"), "--criteria",
        str(gauge / "criteria.toml"), "--out", str(out), "--quiet", "--draws", "500",
    ])  # fmt: skip
    assert result.exit_code in (0, 3), result.output
    summary = json.loads((out / "summary.json").read_text())
    if summary["use_results"]:
        rows = {row["label"]: row for row in summary["criteria"]}
        assert rows["Kemal's false accept rate on the study's bodies"]["appraiser"] == "Kemal"
        assert "limit_spread[side=upper]" in {row["key"] for row in summary["criteria"]}
        assert summary["strategies"] and summary["production"]["measured_value"]


@pytest.mark.slow
def test_fallible_reference_example_runs_as_its_readme_says(tmp_path):
    """The example's two commands on its invented data (simulated with 6 wrong
    references, true system rates 8.8% and 13.0%): the fit against the fallible
    reference holds both true rates in its intervals, the exact-reference fit's rates are
    higher, and the doubted joints are among the truly wrong ones."""
    import json

    from typer.testing import CliRunner

    from bayes_rr.cli import app

    folder = EXAMPLES / "fallible-reference"
    spec, out = tmp_path / "fallible.toml", tmp_path / "fit-fallible"
    runner = CliRunner()
    made = runner.invoke(app, ["prior", str(folder / "statements.toml"), "--out", str(spec)])
    assert made.exit_code == 0, made.output
    fitted = runner.invoke(app, ["fit", str(folder / "study.csv"), "--model", str(spec),
                                 "--out", str(out), "--seed", "3"])  # fmt: skip
    assert fitted.exit_code == 0, fitted.output
    summary = json.loads((out / "summary.json").read_text())
    block = summary["reference_comparison"]
    system = {
        r["key"]: r for r in block["rows"] if r["level"] == "system" and r["scope"] == "study"
    }
    for key, truth in (("false_reject_rate", 0.0881), ("false_accept_rate", 0.1302)):
        fallible = system[key]["fallible"]
        assert fallible["lower"] <= truth <= fallible["upper"], (key, fallible)
        assert system[key]["exact"]["mean"] > fallible["mean"]
    wrong = {"J-01", "J-04", "J-08", "J-33", "J-34", "J-41"}
    assert {d["part"] for d in block["doubtful_parts"]} <= wrong
    assert "reference fallible vs taken as exact" in " ".join(fitted.output.split())
