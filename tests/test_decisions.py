"""Acceptance criteria as posterior probabilities: the probability is the share of draws
meeting the criterion (checked against numpy on the same draws)."""

from dataclasses import replace
from pathlib import Path

import numpy as np
import pytest
from typer.testing import CliRunner

from bayes_rr.cli import app
from bayes_rr.core.errors import SpecError
from bayes_rr.io.fit_folder import summary_document
from bayes_rr.results.decisions import evaluate_criteria, load_criteria, parse_criteria

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


def _estimands(call_rate, repeat=None):
    import xarray as xr

    ds = xr.Dataset(coords={"appraiser": [f"A{j + 1}" for j in range(call_rate.shape[-1])]})
    ds["study__appraiser__call_rate"] = (("chain", "draw", "appraiser"), call_rate)
    if repeat is not None:
        ds["study__appraiser__repeatability_variance"] = (("chain", "draw", "appraiser"), repeat)
    return ds


def test_comparisons_on_hand_set_draws():
    from bayes_rr.results.decisions import compare_appraisers

    rng = np.random.default_rng(1)
    rates = rng.normal([0.40, 0.42, 0.15], 0.03, size=(2, 400, 3))
    repeat = rng.normal([0.10, 0.05, 0.12], 0.02, size=(2, 400, 3))
    found = compare_appraisers(_estimands(rates, repeat))
    assert [(d["appraiser"], d["direction"]) for d in found["differ"]] == [("A3", "below")]
    pair = next(p for p in found["pairs"] if (p["appraiser"], p["other"]) == ("A1", "A3"))
    diff = (rates[..., 0] - rates[..., 2]).ravel()
    assert pair["mean"] == pytest.approx(diff.mean())  # numpy on the same draws
    assert pair["probability_greater"] == pytest.approx((diff > 0).mean())
    best = np.bincount(repeat.reshape(-1, 3).argmin(axis=1), minlength=3) / 800
    assert list(found["most_consistent_probability"].values()) == pytest.approx(best)
    alike = compare_appraisers(_estimands(rng.normal(0.4, 0.03, size=(2, 400, 3))))
    assert alike["differ"] == [] and "No appraiser is above or below" in alike["sentences"][0]


@pytest.mark.slow
def test_a_lenient_appraiser_is_flagged_and_identical_ones_are_not():
    from bayes_rr.inference.sampling import SamplerSettings
    from bayes_rr.priors.spec import load_spec
    from bayes_rr.results.decisions import compare_appraisers
    from bayes_rr.simulation.known_truth import simulate_status_logit
    from bayes_rr.workflow.fit import fit_study

    spec = load_spec("reference-logit")
    lenient = np.array([[0.0, 0.0], [0.0, 0.0], [-2.5, -2.5]])
    sim = simulate_status_logit(40, 3, 3, appraiser_effect=lenient, seed=11)
    result = fit_study(sim.study, spec, SamplerSettings.from_spec(spec, draws=1000, seed=11))
    flagged = {(d["key"], d["appraiser"], d["direction"]) for d in result.comparisons["differ"]}
    assert ("call_rate", "A3", "below") in flagged
    assert ("false_accept_rate", "A3", "above") in flagged
    clean = 0
    for seed in (21, 22, 23):
        same = simulate_status_logit(40, 3, 3, appraiser_effect=np.zeros((3, 2)), seed=seed)
        fitted = fit_study(same.study, spec, SamplerSettings.from_spec(spec, draws=1000, seed=seed))
        clean += not compare_appraisers(fitted.estimands)["differ"]
    assert clean >= 2  # none flagged at the 0.95 level in most seeds
