"""Call curves along a measured reference value (docs/statistics.md family 5).

Outside reference: with a probit curve and a normal production distribution the
expected false accept rate has a closed form through the bivariate normal CDF
(scipy.stats.multivariate_normal); simulated studies with known effective limits.
"""

import json

import numpy as np
import pytest
from scipy import stats
from scipy.special import logit
from typer.testing import CliRunner

from bayes_rr.cli import app
from bayes_rr.families.curves import Production, expected_rates
from bayes_rr.simulation.known_truth import simulate_call_curve

runner = CliRunner()


def closed_form(t, w, limit, mean, sd):
    """Probit curve P(reject | x) = Phi((x - t)/w), x ~ N(mean, sd), upper limit L.

    With Z ~ N(0, 1) independent of X, a call is accept when V = X - w Z < t, and
    (X, V) is bivariate normal: Var V = sd^2 + w^2, Cov(X, V) = sd^2. So
    P(accept, X > L) = P(V < t) - P(X <= L, V < t), and
    P(reject, X <= L) = P(X <= L) - P(X <= L, V < t).
    """
    cov = [[sd**2, sd**2], [sd**2, sd**2 + w**2]]
    both = stats.multivariate_normal([mean, mean], cov).cdf([limit, t])
    accept = stats.norm.cdf(t, mean, np.sqrt(sd**2 + w**2))
    good = stats.norm.cdf(limit, mean, sd)
    return (good - both) / good, (accept - both) / (1 - good)


@pytest.mark.parametrize(
    ("t", "w", "mean", "sd"),
    [(10.0, 0.2, 10.0, 1.0), (9.7, 0.05, 9.5, 0.5), (10.4, 0.6, 10.0, 1.2)],
)
def test_expected_rates_match_the_bivariate_normal_closed_form(t, w, mean, sd):
    limit = 10.0
    rates = expected_rates(np.array([[[t]]]), np.array([[w]]), np.array([limit]),
                           np.array([1.0]), "probit", Production(mean, sd))  # fmt: skip
    frr, far = closed_form(t, w, limit, mean, sd)
    assert rates["false_reject_rate"][0, 0] == pytest.approx(frr, abs=2e-4)
    assert rates["false_accept_rate"][0, 0] == pytest.approx(far, abs=2e-4)


def test_expected_rates_from_measured_values_are_plain_averages():
    values = (9.0, 9.9, 10.1, 11.0)
    rates = expected_rates(np.array([[[10.0]]]), np.array([[0.1]]), np.array([10.0]),
                           np.array([1.0]), "logistic", Production(values=values))  # fmt: skip
    p = 1 / (1 + np.exp(-(np.array(values) - 10.0) / 0.1))
    assert rates["false_reject_rate"][0, 0] == pytest.approx(p[:2].mean())
    assert rates["false_accept_rate"][0, 0] == pytest.approx(1 - p[2:].mean())


@pytest.mark.slow
def test_call_curve_recovers_the_effective_limits_end_to_end(tmp_path):
    sim = simulate_call_curve(40, 3, 3, seed=1)
    data = tmp_path / "study.csv"
    table = sim.study.calls.copy()
    table["reference_value"] = table["part"].map(sim.study.reference_value)
    table.to_csv(data, index=False)
    out = tmp_path / "fit"
    result = runner.invoke(app, ["fit", str(data), "--out", str(out), "--upper-limit", "10",
                                 "--production-mean", "10", "--production-sd", "1",
                                 "--draws", "1000", "--seed", "1", "--quiet"])  # fmt: skip
    assert result.exit_code == 0, result.output
    assert " ".join(result.stdout.split()).startswith("model: the data give a measured")
    assert "call-curve model" in " ".join(result.stdout.split())
    summary = json.loads((out / "summary.json").read_text())
    assert summary["design"]["limits"] == {"lower": None, "upper": 10.0}
    rows = {(r["key"], r["appraiser"]): r for r in summary["estimands"]
            if r["scope"] == "study" and r["level"] == "appraiser"}  # fmt: skip
    for j, name in enumerate(sim.study.appraisers):
        row = rows[("effective_limit[side=upper]", name)]
        assert row["lower"] <= sim.params["effective_limits"][j] <= row["upper"], name
        # the 10%-90% distance: 2 ln 9 times the logistic scale (docs/statistics.md,
        # family 5; the logistic quantile function, scipy.special.logit)
        width = rows[("transition_width", name)]
        true_width = 2 * logit(0.9) * sim.params["widths"][j]
        assert width["lower"] <= true_width <= width["upper"], name
        assert ("false_accept_rate", name) in rows
    assert "Of bad parts" in " ".join(result.stdout.split())
    report = runner.invoke(app, ["report", str(out)])
    assert report.exit_code == 0, report.output
    assert "effective limit" in (out / "report.html").read_text()


def test_describe_shows_reference_values_and_limits(tmp_path):
    data = tmp_path / "s.csv"
    data.write_text(
        "part,appraiser,call,reference_value,USL\n"
        "1,A,pass,9.2,10\n1,B,pass,9.2,10\n2,A,fail,10.4,10\n2,B,pass,10.4,10\n"
    )
    result = runner.invoke(app, ["describe", str(data), "--json"])
    assert result.exit_code == 0, result.output
    design = json.loads(result.stdout)["design"]
    assert design["limits"] == {"lower": None, "upper": 10.0}
    assert design["reference_value_range"] == [9.2, 10.4]
    text = " ".join(runner.invoke(app, ["describe", str(data)]).stdout.split())
    for label, value in (("reference values", "9.2 to 10.4"), ("upper specification limit", "10")):
        assert f"{label} │ {value} " in text
    clash = runner.invoke(app, ["describe", str(data), "--upper-limit", "11"])
    assert clash.exit_code == 2 and "differs" in clash.stderr


def test_two_sided_expected_rates_against_numerical_integration():
    # Reference: scipy.integrate.quad over the production density, side by side.
    from scipy import integrate
    from scipy.special import expit

    low, high, t_low, t_high, w, mean, sd = 9.0, 11.0, 9.1, 10.8, 0.15, 10.0, 0.8
    rates = expected_rates(np.array([[[t_low, t_high]]]), np.array([[w]]),
                           np.array([low, high]), np.array([-1.0, 1.0]), "logistic",
                           Production(mean, sd))  # fmt: skip

    def reject(x):
        return min(1.0, expit((t_low - x) / w) + expit((x - t_high) / w))

    def density(x):
        return stats.norm.pdf(x, mean, sd)

    good = integrate.quad(density, low, high)[0]
    frr = integrate.quad(lambda x: reject(x) * density(x), low, high, points=[t_low, t_high])[0]
    bad_low = integrate.quad(lambda x: (1 - reject(x)) * density(x), mean - 9 * sd, low)[0]
    bad_high = integrate.quad(lambda x: (1 - reject(x)) * density(x), high, mean + 9 * sd)[0]
    assert rates["false_reject_rate"][0, 0] == pytest.approx(frr / good, abs=2e-4)
    assert rates["false_accept_rate"][0, 0] == pytest.approx(
        (bad_low + bad_high) / (1 - good), abs=2e-4
    )


def test_a_two_sided_study_builds_a_model_with_both_limits():
    from bayes_rr.families import build_model
    from bayes_rr.priors.spec import load_spec
    from bayes_rr.study.data import build_study

    sim = simulate_call_curve(12, 2, 2, seed=3)
    study = build_study(sim.study.calls, source="two-sided", limits=(8.5, 10.0),
                        reference_value=sim.study.reference_value)  # fmt: skip
    model = build_model(load_spec("call-curve"), study)
    assert list(model.coords["side"]) == ["lower", "upper"]
    logp = model.compile_logp(mode="NUMBA")(model.initial_point())
    assert np.isfinite(logp)


def test_transition_width_is_the_ten_to_ninety_distance_for_either_link():
    """docs/statistics.md family 5: transition_width = the distance in x between 10% and
    90% reject probability. Reference: the logistic and normal quantile functions
    (scipy.stats.logistic.ppf, scipy.stats.norm.ppf) at 0.1 and 0.9."""
    from bayes_rr.families.curves import ten_ninety_factor

    for link, dist in (("logistic", stats.logistic), ("probit", stats.norm)):
        assert ten_ninety_factor(link) == pytest.approx(dist.ppf(0.9) - dist.ppf(0.1))
    assert ten_ninety_factor("logistic") == pytest.approx(4.394, abs=5e-4)
    assert ten_ninety_factor("probit") == pytest.approx(2.563, abs=5e-4)
