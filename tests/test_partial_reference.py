"""A reference for some parts only: read, counted, and used by the latent class model
where given (issue: studies without a full reference).

Checks: the known-status likelihood terms against a direct enumeration (numpy), the
reading and its refusals, and (slow) a simulated study with known truth whose partial
reference (a random third of the parts) gives back the full-reference fit's study-scope
rates within their intervals.
"""

import numpy as np
import pandas as pd
import pytest
from helpers import write
from scipy.special import logsumexp
from test_output_safety import one_line_error
from typer.testing import CliRunner

from bayes_rr.cli import app
from bayes_rr.families import default_model
from bayes_rr.families.latent_class import call_patterns, latent_class_posterior
from bayes_rr.study.data import read_study

runner = CliRunner()


def _study_text(statuses: dict[str, str]) -> str:
    rows = ["part,appraiser,trial,call,reference"]
    for i, part in enumerate(("P1", "P2", "P3", "P4", "P5", "P6")):
        for a in ("A", "B", "C"):
            for t in (1, 2):
                call = "fail" if (i >= 3) ^ (a == "C" and t == 2) else "pass"
                rows.append(f"{part},{a},{t},{call},{statuses.get(part, '')}")
    return "\n".join(rows) + "\n"


def test_a_partial_reference_is_read_and_counted(tmp_path):
    study = read_study(write(tmp_path, "s.csv", _study_text({"P1": "pass", "P5": "fail"})))
    assert study.reference is None
    assert study.partial_status.isna().sum() == 4
    assert study.partial_status["P1"] == 0 and study.partial_status["P5"] == 1
    assert study.design()["reference_known_parts"] == 2
    assert any("given for 2 of 6 parts" in note for note in study.notes)
    assert default_model(study)[0] == "latent-class"
    full = read_study(write(tmp_path, "f.csv", _study_text(
        {p: ("fail" if p in ("P4", "P5", "P6") else "pass") for p in
         ("P1", "P2", "P3", "P4", "P5", "P6")})))  # fmt: skip
    assert full.sha256 != study.sha256 and full.partial_status is None


def test_a_partial_reference_survives_the_fit_folder(tmp_path):
    """calls.csv keeps the unknown statuses empty, so a fit folder of a partly referenced
    study reads back with the same data hash (it was refused as changed before)."""
    from bayes_rr.io.fit_folder import calls_table
    from bayes_rr.study.data import study_from_frame

    study = read_study(write(tmp_path, "s.csv", _study_text({"P1": "pass", "P5": "fail"})))
    calls_table(study).to_csv(tmp_path / "calls.csv", index=False)
    frame = pd.read_csv(tmp_path / "calls.csv", dtype=str, keep_default_na=False)
    back = study_from_frame(frame, source="calls.csv")
    assert back.sha256 == study.sha256
    pd.testing.assert_series_equal(back.partial_status, study.partial_status)


def test_known_parts_of_one_status_only_are_refused(tmp_path):
    path = write(tmp_path, "one.csv", _study_text({"P1": "pass", "P2": "pass"}))
    result = runner.invoke(app, ["describe", str(path)])
    assert "all of them accept" in one_line_error(result)


def test_known_status_takes_that_class_term():
    """A pattern of known status: reject probability = the status, log likelihood = that
    class's joint term; unknown: the class summed out (direct enumeration)."""
    rng = np.random.default_rng(0)
    log_lik = rng.normal(-5, 1, (4, 3, 2))  # draws, patterns, class
    prevalence = rng.uniform(0.1, 0.9, 4)
    status = np.array([-1, 0, 1])
    reject, marginal = latent_class_posterior(log_lik, prevalence, status)
    prior = np.stack([np.log1p(-prevalence), np.log(prevalence)], axis=-1)
    joint = log_lik + prior[:, None, :]
    np.testing.assert_allclose(marginal[:, 0], logsumexp(joint[:, 0], axis=-1))
    np.testing.assert_allclose(marginal[:, 1], joint[:, 1, 0])
    np.testing.assert_allclose(marginal[:, 2], joint[:, 2, 1])
    np.testing.assert_allclose(reject[:, 0], np.exp(joint[:, 0, 1] - marginal[:, 0]))
    assert (reject[:, 1] == 0).all() and (reject[:, 2] == 1).all()


def test_parts_with_the_same_calls_but_another_status_are_kept_apart(tmp_path):
    study = read_study(write(tmp_path, "s.csv", _study_text({"P1": "pass", "P5": "fail"})))
    patterns = call_patterns(study)
    assert patterns.weight.sum() == 6
    p1, p2 = patterns.part_of[0], patterns.part_of[1]  # same calls, P1 known, P2 not
    assert p1 != p2
    assert patterns.status[p1] == 0 and patterns.status[p2] == -1


@pytest.mark.slow
def test_a_random_third_of_references_recovers_the_full_reference_rates():
    """Simulated study with known truth (two statuses, 40 parts, 4 appraisers, 2
    trials): latent-class with a random third of the statuses gives study-scope system
    rates within the 95% intervals of the reference-logit fit with every status."""
    from dataclasses import replace

    from bayes_rr.inference.sampling import SamplerSettings
    from bayes_rr.priors.spec import load_spec
    from bayes_rr.simulation.known_truth import simulate_status_logit
    from bayes_rr.workflow.fit import fit_study

    sim = simulate_status_logit(40, 4, 2, sigma_part=0.5, seed=11)
    full = sim.study
    keep = np.random.default_rng(5).random(len(full.parts)) < 1 / 3
    partial = full.reference.astype(float).where(pd.Series(keep, index=full.reference.index))
    study = replace(full, reference=None, partial_status=partial)

    def system(result, key):
        row = next(r for r in result.estimand_rows if (r.key, r.scope, r.level) ==
                   (key, "study", "system"))  # fmt: skip
        return row

    spec_full, spec_part = load_spec("reference-logit"), load_spec("latent-class")
    settings = dict(draws=1000, tune=1000, chains=4, seed=2)
    with_all = fit_study(full, spec_full, SamplerSettings.from_spec(spec_full, **settings))
    with_third = fit_study(study, spec_part, SamplerSettings.from_spec(spec_part, **settings))
    assert with_third.diagnostics.ok, with_third.diagnostics.reasons
    for key in ("false_reject_rate", "false_accept_rate"):
        a, b = system(with_all, key), system(with_third, key)
        assert a.lower <= b.mean <= a.upper, (key, a, b)


@pytest.mark.slow
def test_dental_data_with_a_fifth_of_references_stays_with_the_published_fit():
    """Espeland and Handelman (1989) dental data (docs/statistics.md, outside reference
    values): a random fifth of the patients given a reference, each drawn from their
    class's posterior probability under our own EM fit (a truth the fitted model finds
    plausible); the latent class model without part term, using those, holds the
    published two-class estimates (randomLCA vignette) in its 95% intervals.

    Giving each the *most probable* class instead makes the classes cleaner than they
    are and biases the sensitivities up (measured: dentist 3's 95% interval 0.61 to 0.70
    against the published 0.598), so the references are drawn, not assigned."""
    from dataclasses import replace

    from test_wrong_call_fits import _no_part_term
    from test_wrong_calls import (
        DENTAL_FALSE_POSITIVE,
        DENTAL_SENSITIVITY,
        dental_calls,
        dental_study,
        em_two_classes,
    )

    from bayes_rr.inference.sampling import SamplerSettings
    from bayes_rr.workflow.fit import fit_study

    y = dental_calls()
    p1, p0, theta = em_two_classes(y)
    l1 = theta * np.prod(p1**y * (1 - p1) ** (1 - y), axis=1)
    l0 = (1 - theta) * np.prod(p0**y * (1 - p0) ** (1 - y), axis=1)
    rng = np.random.default_rng(9)
    drawn = (rng.random(len(y)) < l1 / (l1 + l0)).astype(float)
    study = dental_study()
    given = rng.random(len(y)) < 0.2
    partial = pd.Series(np.where(given, drawn, np.nan), index=list(study.parts))
    study = replace(study, partial_status=partial)
    spec = _no_part_term("latent-class")
    result = fit_study(study, spec, SamplerSettings.from_spec(spec, draws=1000, seed=4))
    assert result.diagnostics.ok, result.diagnostics.reasons
    rows = {(r.key, r.appraiser): r for r in result.estimand_rows
            if r.scope == "study" and r.level == "appraiser"}  # fmt: skip
    for j, name in enumerate(study.appraisers):
        far, frr = rows[("false_accept_rate", name)], rows[("false_reject_rate", name)]
        assert 1 - far.upper <= DENTAL_SENSITIVITY[j] <= 1 - far.lower, (name, far)
        assert frr.lower <= DENTAL_FALSE_POSITIVE[j] <= frr.upper, (name, frr)
