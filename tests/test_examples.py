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
