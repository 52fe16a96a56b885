"""An earlier study as prior: the approximation, the weight, the refusals, the CLI.

References: the normal-normal conjugate update (any Bayesian text, e.g. Gelman et al.
2013, Bayesian Data Analysis, 3rd ed., section 2.5) for the factor of a normal
prior; scipy.stats for the lognormal draws; the fit without the earlier study for
the weight near 0."""

import json
import os
import subprocess
import sys

import numpy as np
import pytest
from scipy import stats

from bayes_rr.core.distributions import Prior
from bayes_rr.core.errors import SpecError
from bayes_rr.core.moments import decompose_population_logit
from bayes_rr.inference.sampling import SamplerSettings
from bayes_rr.io.fit_folder import load_fit, write_fit
from bayes_rr.priors.earlier import approximate, prior_from_fit
from bayes_rr.priors.spec import load_spec, parse_spec
from bayes_rr.results.estimands import add_shares, study_level
from bayes_rr.simulation.known_truth import simulate_crossed_logit
from bayes_rr.workflow.fit import fit_study

FAST = {"draws": 1000, "tune": 1000, "chains": 4}


def test_normal_prior_factor_is_the_conjugate_likelihood():
    """Prior N(0, 1.5) and a posterior N(0.4, 0.2): the factor is the normal that,
    times the prior, gives the posterior: precision 1/0.2^2 - 1/1.5^2, mean
    (0.4/0.2^2 - 0)/precision (normal-normal conjugacy)."""
    draws = stats.norm(0.4, 0.2).rvs(size=40_000, random_state=np.random.default_rng(0))
    prior = Prior("normal", (("sigma", 1.5), ("mu", 0.0)))
    mu, sigma, _, _, gap, widened = approximate(draws, prior, "identity")
    assert not widened
    precision = 1 / 0.2**2 - 1 / 1.5**2
    assert mu == pytest.approx((0.4 / 0.2**2) / precision, abs=0.01)
    assert sigma == pytest.approx(precision**-0.5, rel=0.02)
    assert gap < 0.01


def test_scale_draws_are_reproduced_on_the_log_scale():
    """Lognormal draws of a scale under a half-normal prior: prior x factor follows the
    draws' quantiles to within 0.02 in probability (the tolerance the notes state)."""
    draws = stats.lognorm(0.3, scale=np.exp(-0.5)).rvs(size=20_000, random_state=1)
    prior = Prior("half_normal", (("sigma", 1.0),))
    mu, _, mean, sd, gap, widened = approximate(draws, prior, "log")
    assert not widened
    assert mu is not None
    assert gap < 0.02
    assert mean == pytest.approx(-0.5, abs=0.01)
    assert sd == pytest.approx(0.3, rel=0.03)


def test_draws_like_the_prior_carry_no_factor():
    prior = Prior("half_normal", (("sigma", 1.0),))
    draws = stats.halfnorm(0, 1.0).rvs(size=20_000, random_state=2)
    mu, sigma, _, _, gap, _ = approximate(draws, prior, "log")
    assert mu is None and sigma is None
    assert gap <= 0.02


@pytest.fixture(scope="module")
def earlier_fit(small_sim, fits, tmp_path_factory):
    folder = tmp_path_factory.mktemp("earlier") / "fit"
    return write_fit(fits["crossed-logit"], folder)


def test_spec_with_earlier_study_round_trips_and_is_checked(earlier_fit):
    spec, approximations = prior_from_fit(load_fit(earlier_fit), 0.5)
    assert spec.earlier is not None and spec.earlier.weight == 0.5
    again = parse_spec(spec.text, "again")
    assert again.earlier == spec.earlier
    carried = {a.label for a in approximations if a.factor_mu is not None}
    assert {f.parameter for f in spec.earlier.factors} == carried
    # each approximation's quality is stated, and small on this fit
    assert all(a.quantile_gap < 0.06 for a in approximations), approximations
    bad = spec.text.replace('parameter = "sigma_part"', 'parameter = "sigma_tolerance"')
    with pytest.raises(SpecError, match="not a hyper-parameter"):
        parse_spec(bad, "bad")
    with pytest.raises(SpecError, match="weight"):
        parse_spec(spec.text.replace("weight = 0.5", "weight = 1.5"), "bad")


def test_incompatible_models_and_weights_are_refused(earlier_fit):
    loaded = load_fit(earlier_fit)
    with pytest.raises(SpecError, match="needs the same family"):
        prior_from_fit(loaded, 1.0, load_spec("beta-binomial"))
    other = parse_spec(
        'name = "no-interaction"\nfamily = "logit"\n[terms.part]\n[terms.appraiser]\n', "x"
    )
    with pytest.raises(SpecError, match="same terms"):
        prior_from_fit(loaded, 1.0, other)
    for weight in (0.0, -1.0, 1.5):
        with pytest.raises(SpecError, match="prior-weight"):
            prior_from_fit(loaded, weight)


def test_weight_near_zero_gives_back_the_fit_without_it(small_sim, fits, earlier_fit):
    """With weight 1e-6 every factor is flat: the posterior is the stated prior's."""
    spec, _ = prior_from_fit(load_fit(earlier_fit), 1e-6)
    settings = SamplerSettings.from_spec(spec, **FAST, seed=3)
    with_it = fit_study(small_sim.study, spec, settings)
    without = fits["crossed-logit"]
    rows = {(r.key, r.scope): r for r in without.estimand_rows if r.level == "study"}
    for row in with_it.estimand_rows:
        if row.level != "study" or row.mean is None:
            continue
        other = rows[(row.key, row.scope)]
        # two independent samples of one posterior: means differ by MC error only
        mcse = np.hypot(row.sd / np.sqrt(row.ess_bulk), other.sd / np.sqrt(other.ess_bulk))
        assert abs(row.mean - other.mean) <= 4 * mcse + 1e-9, (row.key, row.scope)


def _population_truth(sim) -> float:
    params = sim.params
    eta = params["mu"] + params["part_effect"]
    scale = np.hypot(params["sigma_appraiser"], params["sigma_interaction"])
    per_part = add_shares(decompose_population_logit(eta[None], np.array([scale])), "population")
    return float(study_level(per_part, "population")["reproducibility_variance"][0])


@pytest.mark.slow
def test_large_earlier_study_narrows_population_intervals_and_holds_the_truth(tmp_path):
    truth = {"mu": -0.5, "sigma_part": 2.0, "sigma_appraiser": 0.6, "sigma_interaction": 0.3}
    large = simulate_crossed_logit(60, 10, 3, seed=31, **truth)
    new = simulate_crossed_logit(30, 3, 3, seed=32, **truth)
    spec = load_spec("crossed-logit")
    earlier = fit_study(large.study, spec, SamplerSettings.from_spec(spec, seed=1))
    assert earlier.diagnostics.ok, earlier.diagnostics.reasons
    folder = write_fit(earlier, tmp_path / "earlier")
    with_prior, _ = prior_from_fit(load_fit(folder), 1.0)
    alone = fit_study(new.study, spec, SamplerSettings.from_spec(spec, seed=2))
    helped = fit_study(new.study, with_prior, SamplerSettings.from_spec(with_prior, seed=2))
    assert alone.diagnostics.ok and helped.diagnostics.ok
    target = _population_truth(new)

    def row(result):
        return next(
            r for r in result.estimand_rows
            if (r.key, r.scope, r.level) == ("reproducibility_variance", "population", "study")
        )  # fmt: skip

    a, h = row(alone), row(helped)
    assert h.upper - h.lower < 0.7 * (a.upper - a.lower), (a, h)
    assert a.lower <= target <= a.upper
    assert h.lower <= target <= h.upper


def _run(*args: str) -> subprocess.CompletedProcess:
    env = {**os.environ, "COLUMNS": "80"}
    return subprocess.run(
        [sys.executable, "-m", "bayes_rr.cli", *args], capture_output=True, text=True, env=env
    )


def test_cli_prior_from_writes_the_spec_and_keeps_the_criteria(earlier_fit, tmp_path):
    data = earlier_fit / "calls.csv"
    criteria = tmp_path / "criteria.toml"
    criteria.write_text(
        '[[criterion]]\nkey = "repeatability_share"\nscope = "study"\nabove = 0.1\n'
        "required_probability = 0.9\n"
    )
    first = tmp_path / "first"
    done = _run("fit", str(data), "--out", str(first), "--model", "crossed-logit", "--draws",
                "300", "--tune", "300", "--quiet", "--criteria", str(criteria))  # fmt: skip
    assert done.returncode in (0, 3), done.stderr
    second = tmp_path / "second"
    done = _run("fit", str(data), "--out", str(second), "--prior-from", str(first),
                "--prior-weight", "0.5", "--draws", "300", "--tune", "300", "--quiet")  # fmt: skip
    if json.loads((first / "summary.json").read_text())["use_results"]:
        assert done.returncode in (0, 3), done.stderr
        spec = load_spec(second / "model.toml")
        assert spec.earlier is not None and spec.earlier.weight == 0.5
        summary = json.loads((second / "summary.json").read_text())
        assert summary["prior_from"]["weight"] == 0.5
        assert summary["prior_from"]["fit"] == str(first)
        assert "the 1 of the earlier fit" in done.stdout
        if summary["use_results"]:
            assert [c["key"] for c in summary["criteria"]] == ["repeatability_share"]
    else:
        assert done.returncode == 2
        assert "did not pass the convergence gate" in done.stderr


def test_cli_refusals_with_prior_from(earlier_fit, tmp_path):
    data = earlier_fit / "calls.csv"
    before = {p.name: p.read_bytes() for p in earlier_fit.iterdir() if p.is_file()}
    done = _run("fit", str(data), "--out", str(tmp_path / "x"), "--prior-from",
                str(earlier_fit), "--model", "beta-binomial")  # fmt: skip
    assert done.returncode == 2  # a SpecError
    assert "needs the same family" in done.stderr and "Traceback" not in done.stderr
    assert not (tmp_path / "x").exists()
    done = _run("fit", str(data), "--out", str(earlier_fit), "--overwrite", "--prior-from",
                str(earlier_fit))  # fmt: skip
    assert done.returncode != 0 and "Traceback" not in done.stderr
    done = _run("fit", str(data), "--out", str(tmp_path / "y"), "--prior-from",
                str(earlier_fit), "--prior-weight", "2")  # fmt: skip
    assert done.returncode == 2 and "--prior-weight 2.0" in done.stderr
    after = {p.name: p.read_bytes() for p in earlier_fit.iterdir() if p.is_file()}
    assert before == after
