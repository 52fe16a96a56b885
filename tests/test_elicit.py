"""Priors from statements: each prior's implied quantiles match the stated ones.

References: scipy.stats (normal and gamma quantiles), scipy.integrate.quad (the
expected repeat disagreement E[2p(1-p)] of a logit-normal part population), and
sampling from the written spec's priors (a prior predictive check of each stated
quantity)."""

import math
import subprocess
import sys

import numpy as np
import pytest
from scipy import integrate, stats
from scipy.special import expit, logit

from bayes_rr.core.errors import SpecError
from bayes_rr.priors.elicit import (
    MEDIAN_ABS_NORMAL,
    elicit,
    gamma_through,
    repeat_disagreement,
    spec_toml,
)
from bayes_rr.priors.spec import bundled_models, load_spec, parse_spec

STATEMENTS = """
model = "reference-logit"

[[statement]]
about = "false_reject_rate"
typical = 0.05
at_most = 0.2

[[statement]]
about = "false_accept_rate"
typical = 0.1
at_most = 0.3

[[statement]]
about = "appraiser_difference"
typical = 0.03
at_most = 0.1
at = 0.1

[[statement]]
about = "repeat_disagreement"
typical = 0.1
at_most = 0.3
sure = 0.99
"""


def _disagreement_quad(sigma: float, at: float) -> float:
    """E[2p(1-p)], logit p = logit(at) + a, a ~ N(0, sigma), by scipy.integrate.quad."""

    def integrand(a):
        p = expit(logit(at) + a)
        return 2 * p * (1 - p) * stats.norm.pdf(a, 0, sigma)

    return integrate.quad(integrand, -12 * sigma, 12 * sigma)[0]


def test_repeat_disagreement_matches_quad():
    for sigma in (0.05, 0.5, 2.0, 6.0):
        for at in (0.5, 0.1):
            assert repeat_disagreement(sigma, at) == pytest.approx(
                _disagreement_quad(sigma, at), abs=1e-7
            )


def test_gamma_through_two_quantiles():
    prior = gamma_through(0.4, 1.2, 0.95)
    dist = stats.gamma(prior.kwargs["alpha"], scale=1 / prior.kwargs["beta"])
    assert dist.ppf(0.5) == pytest.approx(0.4, rel=1e-6)
    assert dist.ppf(0.95) == pytest.approx(1.2, rel=1e-6)


def test_sampled_priors_reproduce_the_stated_quantiles():
    """Draws from the written spec's priors, mapped to each stated quantity by code in
    this test (not the module's), give back the stated median and bound."""
    spec, rows = elicit(STATEMENTS, "statements.toml")
    rng = np.random.default_rng(1)
    accept, reject = spec.status_intercepts
    n = 20_000
    frr = expit(accept.scipy().rvs(size=n, random_state=rng))
    far = 1 - expit(reject.scipy().rvs(size=n, random_state=rng))
    sigma_app = spec.term("appraiser").prior.scipy().rvs(size=n, random_state=rng)
    spread = expit(logit(0.1) + MEDIAN_ABS_NORMAL * sigma_app) - 0.1
    sigma_part = spec.term("part").prior.scipy().rvs(size=1500, random_state=rng)
    disagreement = np.array([_disagreement_quad(s, 0.5) for s in sigma_part])
    checks = [
        (frr, 0.05, 0.2, 0.95),
        (far, 0.1, 0.3, 0.95),
        (spread, 0.03, 0.1, 0.95),
        (disagreement, 0.1, 0.3, 0.99),
    ]
    for values, typical, bound, sure in checks:
        # sampling error of a quantile from n draws: a few per cent
        assert np.median(values) == pytest.approx(typical, rel=0.06)
        assert np.quantile(values, sure) == pytest.approx(bound, rel=0.08)
    # the module's own check agrees
    for row in rows:
        assert row["implied_median"] == pytest.approx(row["typical"], rel=0.05)
        assert row["implied_bound_quantile"] == pytest.approx(row["bound"], rel=0.06)


def test_at_least_statement_on_a_call_rate():
    text = """
model = "crossed-logit"
[[statement]]
about = "call_rate"
typical = 0.3
at_least = 0.1
sure = 0.9
"""
    spec, _ = elicit(text)
    mu, sigma = spec.intercept.kwargs["mu"], spec.intercept.kwargs["sigma"]
    assert mu == pytest.approx(logit(0.3))
    # P(rate >= 0.1) = 0.9 <=> the 10% quantile of the logit is logit(0.1)
    assert stats.norm.ppf(0.1, mu, sigma) == pytest.approx(logit(0.1))


@pytest.mark.parametrize(
    ("text", "message"),
    [
        ('model = "crossed-logit"\n[[statement]]\nabout = "false_reject_rate"\n'
         "typical = 0.05\nat_most = 0.2\n", "needs a model of family"),
        ('model = "reference-logit"\n[[statement]]\nabout = "false_reject_rate"\n'
         "typical = 0.2\nat_most = 0.05\n", "must lie above typical"),
        ('model = "crossed-logit"\n[[statement]]\nabout = "repeat_disagreement"\n'
         "typical = 0.6\nat_most = 0.7\n", "outside what this term can express"),
        ('model = "crossed-logit"\n[[statement]]\nabout = "call_rate"\ntypical = 1.5\n'
         "at_most = 2\n", "expected a number between 0 and 1"),
        ('model = "crossed-logit"\n[[statement]]\nabout = "tolerance"\ntypical = 0.1\n'
         "at_most = 0.2\n", "expected one of"),
        ('model = "crossed-logit"\n[[statement]]\nabout = "call_rate"\ntypical = 0.1\n',
         "exactly one of"),
    ],
)  # fmt: skip
def test_bad_statements_are_refused(text, message):
    with pytest.raises(SpecError, match=message):
        elicit(text)


@pytest.mark.parametrize("name", sorted(bundled_models()))
def test_spec_toml_round_trip(name):
    spec = load_spec(name)
    again = parse_spec(spec_toml(spec), "again")
    for field in ("name", "family", "intercept", "terms", "concentration", "sampler",
                  "intercepts", "link", "prevalence", "description", "suits"):  # fmt: skip
        assert getattr(again, field) == getattr(spec, field), field


def test_prior_command_writes_a_spec_and_keeps_foreign_files(tmp_path):
    statements = tmp_path / "beliefs.toml"
    statements.write_text(STATEMENTS)
    out = tmp_path / "elicited.toml"
    cmd = [sys.executable, "-m", "bayes_rr.cli", "prior", str(statements), "--out", str(out)]
    done = subprocess.run(cmd, capture_output=True, text=True, env=_env())
    assert done.returncode == 0, done.stderr
    spec = load_spec(out)
    assert spec.status_intercepts[0].kwargs["mu"] == pytest.approx(math.log(0.05 / 0.95))
    assert "false reject rate" in done.stdout
    # a second run replaces its own file; a file it did not write is kept
    assert subprocess.run(cmd, capture_output=True, env=_env()).returncode == 0
    foreign = tmp_path / "mine.toml"
    foreign.write_text("# my notes\n")
    cmd[-1] = str(foreign)
    done = subprocess.run(cmd, capture_output=True, text=True, env=_env())
    assert done.returncode != 0
    assert "not written by bayes-rr" in done.stderr
    assert "Traceback" not in done.stderr
    assert foreign.read_text() == "# my notes\n"


def _env() -> dict:
    import os

    return {**os.environ, "COLUMNS": "80"}
