"""Acceptance criteria as posterior probabilities: the probability is the share of draws
meeting the criterion (checked against numpy on the same draws)."""

from dataclasses import replace
from pathlib import Path

import numpy as np
import pytest
from typer.testing import CliRunner

from bayes_rr.cli import app
from bayes_rr.decisions import evaluate_criteria, load_criteria, parse_criteria
from bayes_rr.errors import SpecError
from bayes_rr.outputs import summary_document

runner = CliRunner()
EXAMPLE = Path(__file__).resolve().parent.parent / "examples" / "criteria.toml"


def one(key="reproducibility_share", side="below", value=0.5, probability=0.9, scope="study"):
    return (f'[[criterion]]\nkey = "{key}"\nscope = "{scope}"\n{side} = {value}\n'
            f"required_probability = {probability}\n")  # fmt: skip


def test_probability_is_the_share_of_draws_meeting_it(fits):
    estimands = fits["crossed-logit"].estimands
    draws = estimands["study__study__reproducibility_share"].to_numpy().ravel()
    threshold = float(np.median(draws))
    (row,) = evaluate_criteria(parse_criteria(one(value=threshold)), estimands)
    assert row["probability"] == pytest.approx(np.mean(draws < threshold))
    assert row["below"] == threshold and row["met"] is (row["probability"] >= 0.9)
    (above,) = evaluate_criteria(parse_criteria(one(side="above", value=threshold)), estimands)
    assert above["probability"] == pytest.approx(np.mean(draws > threshold))


def test_trivially_true_and_impossible_criteria(fits):
    estimands = fits["crossed-logit"].estimands
    rows = evaluate_criteria(
        parse_criteria(one(value=1.5) + one(value=-0.5) + one("cross_disagreement",
                                                              scope="population", value=2)),
        estimands,
    )  # fmt: skip
    assert [r["probability"] for r in rows] == [1.0, 0.0, 1.0]
    assert [r["met"] for r in rows] == [True, False, True]


def test_the_example_file_parses_and_says_thresholds_are_not_universal():
    criteria = load_criteria(EXAMPLE)
    assert len(criteria) == 2
    assert "NOT universal" in EXAMPLE.read_text()


@pytest.mark.parametrize(
    ("text", "expected"),
    [
        ("[[criterion]]\nkey = 'x'\nbelow = 1\nabove = 0\nrequired_probability = 0.9\n",
         "exactly one"),
        (one(probability=1.5), "required_probability"),
        (one(scope="everyone"), "scope"),
        ("[[criterion]]\nkey = 'rr_sd'\nbelow = 1\nrequired_probability = 0.9\ncolour = 'red'\n",
         "unknown key"),
        ("", "no [[criterion]]"),
    ],
)  # fmt: skip
def test_bad_criteria_files_are_refused(text, expected):
    with pytest.raises(SpecError, match=expected.replace("[", r"\[")):
        parse_criteria(text, "c.toml")


def test_criteria_go_into_summary_json(fits):
    result = fits["crossed-logit"]
    rows = tuple(evaluate_criteria(parse_criteria(one()), result.estimands))
    summary = summary_document(replace(result, criteria=rows))
    assert summary["criteria"][0]["key"] == "reproducibility_share"
    assert "posterior probability" in summary["criteria"][0]["sentence"]


def test_report_criteria_sentence_and_unknown_key(fit_dirs, tmp_path):
    criteria = tmp_path / "c.toml"
    criteria.write_text(one(value=1.5))
    out = tmp_path / "r.html"
    result = runner.invoke(app, ["report", str(fit_dirs["crossed-logit"]), "--out", str(out),
                                 "--criteria", str(criteria)])  # fmt: skip
    assert result.exit_code == 0, result.output
    html = out.read_text()
    assert "not universal limits" in html and "posterior probability 1.000" in html
    criteria.write_text(one(key="happiness"))
    bad = runner.invoke(app, ["report", str(fit_dirs["crossed-logit"]), "--out", str(out),
                              "--criteria", str(criteria)])  # fmt: skip
    assert bad.exit_code == 2 and "happiness" in bad.stderr and "\n" not in bad.stderr.strip()
