"""A fallible reference: the reference as one more rater whose error rates the user
states (reference-logit with ``[reference_accuracy]``)."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import integrate, stats
from scipy.special import expit
from typer.testing import CliRunner

from bayes_rr.cli import app
from bayes_rr.core.errors import SpecError
from bayes_rr.families import reference_logit as rl
from bayes_rr.families.status import StatusDraws
from bayes_rr.priors.elicit import elicit
from bayes_rr.priors.spec import load_spec, parse_spec
from bayes_rr.results.reference_shift import reference_comparison
from bayes_rr.simulation.known_truth import simulate_status_logit

runner = CliRunner()
BASE = load_spec("reference-logit").text


def _spec(table: str):
    return parse_spec(BASE + "\n[reference_accuracy]\n" + table, "fallible.toml")


def test_reference_accuracy_is_read_with_priors_or_fixed_rates():
    spec = _spec('false_reject_prior = { distribution = "beta", alpha = 2, beta = 40 }\n'
                 "false_accept = 0\n")  # fmt: skip
    accuracy = spec.reference_accuracy
    assert accuracy.false_reject.distribution == "beta" and accuracy.false_accept == 0.0
    assert accuracy.prevalence.text() == "beta(alpha=1, beta=1)"
    assert not accuracy.exact
    assert _spec("false_reject = 0\nfalse_accept = 0.0\n").reference_accuracy.exact
    assert load_spec("reference-logit").reference_accuracy is None


@pytest.mark.parametrize(
    ("table", "message"),
    [
        ("false_reject = 1.2\nfalse_accept = 0\n", "false_reject = 1.2"),
        ("false_reject = -0.1\nfalse_accept = 0\n", "false_reject = -0.1"),
        ("false_reject = 0.5\nfalse_accept = 0\n", "below 0.5"),
        ("false_accept = 0\n", "exactly one of 'false_reject'"),
        (
            'false_reject = 0\nfalse_reject_prior = { distribution = "beta", alpha = 1, beta = 9 }'
            "\nfalse_accept = 0\n",
            "found ['false_reject', 'false_reject_prior']",
        ),
        (
            'false_reject_prior = { distribution = "beta", alpha = 9, beta = 1 }\n'
            "false_accept = 0\n",
            "median 0.926",
        ),
        (
            'false_reject_prior = { distribution = "normal", sigma = 1 }\nfalse_accept = 0\n',
            "needs a distribution on unit values",
        ),
        ("false_reject = 0\nfalse_accept = 0\ncertainty = 1\n", "unknown key(s) ['certainty']"),
    ],
)
def test_bad_reference_accuracy_is_refused_with_the_value(table, message):
    with pytest.raises(SpecError) as caught:
        _spec(table)
    assert message in str(caught.value)


def test_reference_accuracy_belongs_to_reference_logit_only():
    text = load_spec("crossed-logit").text + "\n[reference_accuracy]\nfalse_reject = 0\n"
    with pytest.raises(SpecError, match="for the reference_logit family, not 'logit'; remove it"):
        parse_spec(text, "x.toml")


def test_statements_give_beta_priors_through_median_and_bound():
    """Each statement's beta prior has the stated median and bound quantile exactly
    (checked with scipy.stats.beta); a side not stated stays exact; the written spec
    reads back with the same priors."""
    text = (
        'model = "reference-logit"\n'
        '[[statement]]\nabout = "reference_false_accept_rate"\ntypical = 0.01\nat_most = 0.05\n'
    )
    spec, rows = elicit(text, "statements.toml")
    prior = spec.reference_accuracy.false_accept
    beta = stats.beta(prior.kwargs["alpha"], prior.kwargs["beta"])
    assert beta.ppf(0.5) == pytest.approx(0.01, rel=1e-6)
    assert beta.ppf(0.95) == pytest.approx(0.05, rel=1e-6)
    assert spec.reference_accuracy.false_reject == 0.0
    assert rows[0]["sets"] == "reference_accuracy.false_accept_prior"
    assert abs(rows[0]["implied_median"] - 0.01) < 0.001  # from 20,000 prior draws


def test_a_statement_outside_zero_one_exits_2_with_one_line(tmp_path):
    statements = tmp_path / "s.toml"
    statements.write_text(
        'model = "reference-logit"\n[[statement]]\n'
        'about = "reference_false_reject_rate"\ntypical = 1.5\nat_most = 2\n'
    )
    result = runner.invoke(app, ["prior", str(statements), "--out", str(tmp_path / "o.toml")])
    assert result.exit_code == 2
    assert "typical = 1.5: expected a number between 0 and 1" in result.stderr
    assert "Traceback" not in result.output and not (tmp_path / "o.toml").exists()


def test_a_spec_with_an_impossible_rate_exits_2_before_reading_data(tmp_path, demo_csv):
    spec = tmp_path / "bad.toml"
    spec.write_text(BASE + "\n[reference_accuracy]\nfalse_reject = 1.5\nfalse_accept = 0\n")
    out = tmp_path / "fit"
    result = runner.invoke(app, ["fit", str(demo_csv), "--model", str(spec), "--out", str(out)])
    assert result.exit_code == 2
    assert "false_reject = 1.5" in result.stderr and "Traceback" not in result.output
    assert not out.exists()


def _nested_quad(mu, b, sigma_part, sigma_cell, n, s) -> float:
    """log of the integral over a ~ N(0, 1) of prod_j the integral over c ~ N(0, 1) of
    Binomial(s_j | n_j, expit(mu + b_j + sigma_part a + sigma_cell c)), by nested
    scipy.integrate.quad."""

    def cell(a, j):
        eta = mu + b[j] + sigma_part * a
        if sigma_cell == 0:
            return stats.binom.pmf(s[j], n[j], expit(eta))
        f = lambda c: stats.norm.pdf(c) * stats.binom.pmf(s[j], n[j], expit(eta + sigma_cell * c))  # noqa: E731
        return integrate.quad(f, -9, 9, epsabs=1e-15, limit=200)[0]

    g = lambda a: stats.norm.pdf(a) * math.prod(cell(a, j) for j in range(len(n)))  # noqa: E731
    return math.log(integrate.quad(g, -9, 9, epsabs=1e-16, limit=400, points=[0])[0])


CASES = [((3, 3, 3), (3, 2, 0), 3.0, 0.0, 1e-5), ((6, 6, 6), (6, 5, 1), 3.0, 0.0, 1e-4),
         ((6, 6, 6), (6, 5, 1), 5.0, 0.0, 2e-2)]  # fmt: skip
SLOW_CASES = [((3, 3, 3), (3, 2, 0), 1.0, 0.5, 1e-5), ((6, 6, 6), (6, 5, 1), 3.0, 1.0, 1e-3)]


@pytest.mark.parametrize(
    ("n", "s", "sigma_part", "sigma_cell", "tolerance"),
    [*CASES, *(pytest.param(*case, marks=pytest.mark.slow) for case in SLOW_CASES)],
)
def test_pattern_likelihood_matches_nested_quadrature(n, s, sigma_part, sigma_cell, tolerance):
    """The per-pattern log likelihood with the part's and the cells' effects integrated
    agrees with nested scipy.integrate.quad: to 1e-5 at the priors' typical scales, 1e-3
    at part scale 3 with cell scale 1, 0.02 at part scale 5 (the prior's 95th
    percentile) with 18 calls; the drawn call probabilities lie in (0, 1)."""
    mu, b = np.array([-2.0, 2.0]), np.array([[0.3, -0.2], [0.0, 0.5], [-0.4, 0.1]])
    draws = StatusDraws(mu[None], np.zeros((1, 1)), b[None], np.array([sigma_part]),
                        np.ones((1, 2)), np.array([sigma_cell]))  # fmt: skip
    patterns = rl.ReferencePatterns(np.array([n]), np.array([s]), np.array([False]),
                                    np.ones(1), np.zeros(1, dtype=int))  # fmt: skip
    spec = load_spec("reference-logit")
    marginal, drawn = rl._pattern_block(draws, patterns, rl.effect_nodes(spec), slice(0, 1),
                                        np.random.default_rng(0))  # fmt: skip
    for status in (0, 1):
        expected = _nested_quad(mu[status], b[:, status], sigma_part, sigma_cell, n, s)
        assert marginal[status][0, 0] == pytest.approx(expected, abs=tolerance)
        assert drawn[status].shape == (1, 1, 3) and np.all(
            (drawn[status] > 0) & (drawn[status] < 1)
        )


def test_comparison_names_the_shift_and_the_doubted_parts():
    def row(key, level, appraiser, mean, part=None, scope="study"):
        return {"key": key, "scope": scope, "level": level, "appraiser": appraiser,
                "part": part, "mean": mean, "lower": mean - 0.02, "upper": mean + 0.02}  # fmt: skip

    fallible = [row("false_reject_rate", "appraiser", "A", 0.05),
                row("false_reject_rate", "system", None, 0.05),
                row("reference_wrong_probability", "part", None, 0.9, part="P7"),
                row("reference_wrong_probability", "part", None, 0.2, part="P8")]  # fmt: skip
    exact = [row("false_reject_rate", "appraiser", "A", 0.12),
             row("false_reject_rate", "system", None, 0.12)]  # fmt: skip
    block = reference_comparison(fallible, exact, True, ["A"])
    assert [r["shift"] for r in block["rows"]] == pytest.approx([-0.07, -0.07])
    assert block["doubtful_parts"] == [{"part": "P7", "probability": 0.9}]
    assert "false reject rate is 5.0%, lower than the 12.0%" in " ".join(block["sentences"])
    unconverged = reference_comparison(fallible, exact, False, ["A"])
    assert all(r["exact"] is None for r in unconverged["rows"])
    assert "did not pass the convergence gate" in unconverged["sentences"][0]


@pytest.mark.slow
def test_exact_accuracy_gives_the_reference_logit_rates_back():
    """Stated error rates of 0: the summed-out model is the exact-reference model. Its
    system rates (study and population scope) agree with the bundled reference-logit's
    within Monte Carlo error: means within 4 Monte Carlo standard errors of their
    difference plus 3% of the sd (the integrated model draws the parts' effects over
    quadrature nodes), sds within 15%."""
    import bayes_rr as brr

    sim = simulate_status_logit(30, 3, 2, seed=4)
    spec = BASE + "\n[reference_accuracy]\nfalse_reject = 0\nfalse_accept = 0\n"
    fits = {}
    for name, model in (("fallible", spec), ("exact", None)):
        path = None
        if model is not None:
            import tempfile
            from pathlib import Path

            path = Path(tempfile.mkdtemp()) / "exact0.toml"
            path.write_text(model)
        fit = brr.fit(sim.study, str(path) if path else "reference-logit", seed=1, draws=1000,
                      tune=1000)  # fmt: skip
        assert fit.result.diagnostics.ok
        assert fit.result.reference_comparison is None  # exact: nothing to compare
        fits[name] = fit.rates().set_index(["key", "scope", "level", "appraiser"], drop=False)
    for key in ("false_reject_rate", "false_accept_rate"):
        for scope in ("study", "population"):
            a = fits["fallible"].loc[(key, scope, "system", None)]
            b = fits["exact"].loc[(key, scope, "system", None)]
            mcse = math.hypot(
                a["sd"] / math.sqrt(a["ess_bulk"]), b["sd"] / math.sqrt(b["ess_bulk"])
            )
            assert abs(a["mean"] - b["mean"]) <= 4 * mcse + 0.03 * b["sd"], (key, scope)
            assert a["sd"] == pytest.approx(b["sd"], rel=0.15), (key, scope)


@pytest.mark.slow
@pytest.mark.parametrize("seed", [3, 5])
def test_fallible_reference_recovers_rates_the_exact_reference_misses(seed):
    """Two seeds; 60 parts x 3 appraisers x 3 trials, 10% of the references wrong on each side
    (simulated with known truth): the fit that states the reference's error rates
    (beta(2, 18), median 0.09) holds the true system rates in its 95% intervals and finds
    the wrong references; the same data with the reference taken as exact give higher
    rates (the reference's errors counted as the appraisers')."""
    import tempfile
    from pathlib import Path

    import bayes_rr as brr

    sim = simulate_status_logit(60, 3, 3, reference_errors=(0.1, 0.1), seed=seed)
    path = Path(tempfile.mkdtemp()) / "fallible.toml"
    path.write_text(
        BASE + "\n[reference_accuracy]\n"
        'false_reject_prior = { distribution = "beta", alpha = 2, beta = 18 }\n'
        'false_accept_prior = { distribution = "beta", alpha = 2, beta = 18 }\n'
    )
    fit = brr.fit(sim.study, str(path), seed=1)
    assert fit.result.diagnostics.ok
    rates = fit.rates().set_index(["key", "scope", "level", "appraiser"], drop=False)
    comparison = fit.result.reference_comparison
    shifts = {(r["key"], r["level"], r["scope"]): r for r in comparison["rows"]}
    for key in ("false_reject_rate", "false_accept_rate"):
        row = rates.loc[(key, "study", "system", None)]
        truth = sim.params["rates"]["system"][key]
        assert row["lower"] <= truth <= row["upper"], (key, row["lower"], truth, row["upper"])
        assert shifts[(key, "system", "study")]["exact"]["mean"] > row["mean"]
    wrong = {
        f"P{i + 1:02d}" for i in np.flatnonzero(sim.params["reference"] != sim.params["status"])
    }
    doubted = {d["part"] for d in comparison["doubtful_parts"]}
    assert doubted <= wrong  # no sound reference doubted
    assert len(doubted) >= len(wrong) // 2


def test_plan_and_calibrate_refuse_a_fallible_reference_before_any_work(tmp_path):
    spec = tmp_path / "fallible.toml"
    spec.write_text(BASE + "\n[reference_accuracy]\nfalse_reject = 0.01\nfalse_accept = 0\n")
    out = tmp_path / "cal"
    result = runner.invoke(app, ["calibrate", "--out", str(out), "--model", str(spec),
                                 "--parts", "20", "--sims", "10", "--quiet"])  # fmt: skip
    assert result.exit_code == 2
    assert "not simulated yet" in result.stderr and "Traceback" not in result.output
    assert not out.exists()
