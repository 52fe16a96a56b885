"""The crossed-logit's sampler model: the interaction integrated out of each cell by a
fixed rule, the draws completed after sampling, and the refit when the rule's check fails.

References: ``scipy.integrate.quad`` (each cell's integral, and the moments of an
interaction effect given its cell); the Gaussian conditional of a sum (closed form, any
multivariate-normal text; computed here with numpy); finite differences (the gradient).
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy.integrate import quad
from scipy.special import log_expit

from bayes_rr.core.cell_rule import gauss_hermite, rule_log_lik, rule_nodes


def _quad_log_lik(eta: float, sigma: float, n: int, k: int) -> float:
    """log E_z[p^k (1 - p)^(n - k)], logit p = eta + sigma z, by scipy.integrate.quad."""

    def integrand(z):
        t = eta + sigma * z
        return np.exp(k * log_expit(t) + (n - k) * log_expit(-t) - 0.5 * z * z)

    value, _ = quad(integrand, -12, 12, epsabs=0, epsrel=1e-12, limit=400)
    return float(np.log(value / np.sqrt(2 * np.pi)))


def _rule(eta, sigma, n, k, nodes):
    eta = np.atleast_2d(np.asarray(eta, dtype=float))
    scale = np.full(eta.shape[0], sigma)
    return rule_log_lik(eta, scale, np.asarray(n, float), np.asarray(k, float), nodes)[0]


@pytest.mark.parametrize(("nodes", "calls"), [(24, (1, 2, 3)), (32, (4, 5, 6))])
def test_rule_matches_quad_within_the_design_limits(nodes, calls):
    etas = np.array([-6.0, -3.0, -1.0, 0.0, 0.5, 2.0, 4.0, 6.0])
    for n in calls:
        assert rule_nodes(np.array([n, 1])) == nodes
        for sigma, bound in ((0.1, 1e-7), (0.5, 1e-7), (1.0, 1e-6), (1.65, 5e-4)):
            for k in range(n + 1):
                ours = _rule(etas, sigma, np.full(etas.size, n), np.full(etas.size, k), nodes)
                ref = np.array([_quad_log_lik(e, sigma, n, k) for e in etas])
                assert np.abs(ours - ref).max() <= bound, (n, k, sigma)


def test_the_rule_is_not_used_where_it_fails():
    """16 nodes with 6 calls a cell are off by far more (measured 3e-3 at sigma 1),
    which is why such a design takes 32 nodes; beyond 6 calls the effect is sampled."""
    etas = np.linspace(-6, 6, 13)
    worst = 0.0
    for k in range(7):
        ours = _rule(etas, 1.0, np.full(etas.size, 6), np.full(etas.size, k), 16)
        ref = np.array([_quad_log_lik(e, 1.0, 6, k) for e in etas])
        worst = max(worst, float(np.abs(ours - ref).max()))
    assert worst > 1e-4
    assert rule_nodes(np.array([2, 6])) == 32
    assert rule_nodes(np.array([3, 7])) is None


@pytest.mark.parametrize("mode", ["FAST_COMPILE", "NUMBA"])
def test_operation_value_and_gradient(mode):
    """The PyTensor operation (Python and numba versions) against the numpy rule, and
    its gradient against central finite differences of the numpy rule."""
    import pytensor
    import pytensor.tensor as pt

    from bayes_rr.families.cell_integral import integrated_cells

    rng = np.random.default_rng(5)
    # 1 to 9 calls: the kernel's direct sum (up to 7) and its log-space sum (more)
    n = rng.integers(1, 10, 40).astype(float)
    k = np.floor(rng.random(40) * (n + 1))
    eta_value = rng.normal(0, 2.5, 40)
    eta_value[0] = -40.0  # the log-space branch: k = n at a very low logit
    k[0] = n[0]
    eta_value[1], eta_value[2] = 350.0, -350.0  # past the direct sum's logit limit
    eta, sigma = pt.vector("eta"), pt.scalar("sigma")
    total = integrated_cells(eta, sigma, n, k, 16)
    fn = pytensor.function([eta, sigma], [total, *pt.grad(total, [eta, sigma])], mode=mode)
    value, d_eta, d_sigma = fn(eta_value, 0.8)

    def numpy_total(e, s):
        return _rule(e, s, n, k, 16).sum()

    assert value == pytest.approx(numpy_total(eta_value, 0.8), rel=1e-12)
    h = 1e-6
    numeric = [(numpy_total(eta_value + h * np.eye(40)[i], 0.8)
                - numpy_total(eta_value - h * np.eye(40)[i], 0.8)) / (2 * h)
               for i in range(40)]  # fmt: skip
    np.testing.assert_allclose(d_eta, numeric, atol=1e-6)
    numeric_sigma = (numpy_total(eta_value, 0.8 + h) - numpy_total(eta_value, 0.8 - h)) / (2 * h)
    assert d_sigma == pytest.approx(numeric_sigma, abs=1e-6)


@pytest.mark.parametrize(
    ("eta", "sigma", "n", "k"),
    [(0.5, 0.3, 3, 1), (-4.0, 1.0, 3, 3), (2.0, 1.5, 6, 0), (-1.0, 0.05, 2, 2), (-30.0, 0.7, 3, 3)],
)
@pytest.mark.parametrize("attempts", [32, 0])
def test_effects_drawn_from_the_cell_conditional(eta, sigma, n, k, attempts):
    """Mean and sd of 100,000 draws of c given the cell against quad's moments of
    N(c; 0, sigma) Binomial(k | n, expit(eta + c)); 5 standard errors of the mean, 2%
    of the sd. By rejection (``attempts`` 32) and by the grid alone (0)."""
    from bayes_rr.core.kernels import draw_cell_effects

    def moment(power):
        def f(c):
            t = eta + c
            log_like = k * log_expit(t) + (n - k) * log_expit(-t)
            return c**power * np.exp(log_like - 0.5 * (c / sigma) ** 2)

        return quad(f, -12 * sigma, 12 * sigma, epsabs=0, epsrel=1e-11, limit=400)[0]

    z0, z1, z2 = moment(0), moment(1), moment(2)
    mean, sd = z1 / z0, np.sqrt(z2 / z0 - (z1 / z0) ** 2)
    draws = 100_000
    c = draw_cell_effects(np.full((draws, 1), eta), np.full(draws, sigma),
                          np.array([n], float), np.array([k], float), seed=11,
                          attempts=attempts)[:, 0]  # fmt: skip
    assert abs(c.mean() - mean) <= 5 * sd / np.sqrt(draws)
    assert c.std() == pytest.approx(sd, rel=0.02)


def test_grand_mean_split_is_the_gaussian_conditional():
    """(mu, abar, bbar) given mu + abar + bbar = G: numpy's conditioning of the joint
    normal (mean m + S 1 (1' S 1)^-1 (G - 1'm), covariance S - S 1 1' S / 1' S 1)."""
    import xarray as xr

    from bayes_rr.families.crossed_logit import _split_grand_mean
    from bayes_rr.priors.spec import load_spec
    from bayes_rr.simulation.known_truth import simulate_crossed_logit

    spec = load_spec("crossed-logit")
    study = simulate_crossed_logit(10, 4, 2, mu=0.0, sigma_part=1.0, sigma_appraiser=0.5,
                                   sigma_interaction=0.3, seed=1).study  # fmt: skip
    draws, grand, sp, sa = 200_000, 1.3, 2.0, 0.8
    posterior = xr.Dataset({
        "grand_mean": (("chain", "draw"), np.full((1, draws), grand)),
        "sigma_part": (("chain", "draw"), np.full((1, draws), sp)),
        "sigma_appraiser": (("chain", "draw"), np.full((1, draws), sa)),
        "part_deviation_z": (("chain", "draw", "part"), np.zeros((1, draws, 10))),
        "appraiser_deviation": (("chain", "draw", "appraiser"), np.zeros((1, draws, 4))),
    })  # fmt: skip
    split = _split_grand_mean(posterior, spec, study, ("part", "appraiser"),
                              np.random.default_rng(3))  # fmt: skip
    x = np.stack([split["intercept"], split["part_effect"][:, 0],
                  split["appraiser_effect"][:, 0]], axis=1)  # fmt: skip
    m0, s0 = spec.intercept.kwargs["mu"], spec.intercept.kwargs["sigma"]
    m = np.array([m0, 0.0, 0.0])
    cov = np.diag([s0**2, sp**2 / 10, sa**2 / 4])
    one = np.ones(3)
    mean = m + cov @ one / (one @ cov @ one) * (grand - one @ m)
    conditional = cov - np.outer(cov @ one, one @ cov) / (one @ cov @ one)
    np.testing.assert_allclose(x.sum(axis=1), grand, atol=1e-12)
    np.testing.assert_allclose(x.mean(axis=0), mean, atol=5 * np.sqrt(cov.diagonal().max() / draws))
    np.testing.assert_allclose(np.cov(x.T), conditional, atol=0.01)


def _fit(study, spec, **settings):
    from bayes_rr.inference.sampling import SamplerSettings
    from bayes_rr.workflow.fit import fit_study

    args = {"draws": 300, "tune": 300, "chains": 2, "seed": 4} | settings
    return fit_study(study, spec, SamplerSettings.from_spec(spec, **args))


def test_refit_with_the_interaction_sampled_when_the_check_fails(small_sim, monkeypatch):
    from bayes_rr.core import cell_rule
    from bayes_rr.priors.spec import load_spec

    spec = load_spec("crossed-logit")
    monkeypatch.setattr(cell_rule, "RULE_TOLERANCE", -1.0)  # no rule can pass
    result = _fit(small_sim.study, spec)
    check = result.provenance["integration_rule_check"]
    assert check["ok"] is False and "sampled" in check["then"]
    assert "integrated" not in result.provenance["sampled_form"]
    assert "interaction_effect" in result.idata.posterior
    assert not {"grand_mean", "part_deviation", "part_deviation_z"} & set(result.idata.posterior)


def test_design_with_many_calls_a_cell_samples_the_interaction():
    from bayes_rr.priors.spec import load_spec
    from bayes_rr.simulation.known_truth import simulate_crossed_logit

    spec = load_spec("crossed-logit")
    study = simulate_crossed_logit(12, 3, 8, mu=-0.5, sigma_part=1.5, sigma_appraiser=0.5,
                                   sigma_interaction=0.3, seed=9).study  # fmt: skip
    result = _fit(study, spec)
    assert "integrated" not in result.provenance["sampled_form"]
    assert result.provenance["integration_rule_check"] is None
    assert "grand mean" in result.provenance["sampled_form"]
    posterior = result.idata.posterior
    assert posterior["interaction_effect"].sizes["cell"] == len(study.cells)
    assert posterior["part_effect"].sizes["part"] == 12


def test_gauss_hermite_rule_integrates_normal_moments():
    """Probabilists' Gauss-Hermite with 16 nodes: E[Z^2k] = (2k - 1)!! exactly up to
    degree 31 (numpy.polynomial.hermite_e.hermegauss)."""
    x, log_w = gauss_hermite(16)
    w = np.exp(log_w)
    assert w.sum() == pytest.approx(1.0, rel=1e-13)
    assert (w * x**4).sum() == pytest.approx(3.0, rel=1e-12)
    assert (w * x**10).sum() == pytest.approx(945.0, rel=1e-11)


def test_divergences_at_a_low_target_acceptance_sample_again(small_sim, monkeypatch):
    """A sample with divergent transitions at target_accept < 0.95 is drawn again at
    0.95 and the fit says so; the divergence is injected into the first sample."""
    from bayes_rr.inference import sampling
    from bayes_rr.priors.spec import load_spec

    spec = load_spec("crossed-logit")
    asked = []
    original = sampling.sample_model

    def diverging_once(model, settings, compiled=None):
        run = original(model, settings, compiled)
        asked.append(settings.target_accept)
        if len(asked) == 1:
            run.idata.sample_stats["diverging"][0, 0] = True
        return run

    monkeypatch.setattr(sampling, "sample_model", diverging_once)
    result = _fit(small_sim.study, spec, target_accept=0.8)
    assert asked == [0.8, 0.95]
    assert "drawn again at 0.95" in result.provenance["sampled_again"][0]
    assert result.provenance["sampler_settings"]["target_accept"] == 0.95
    assert int(result.idata.sample_stats["diverging"].sum()) == 0


def test_the_report_says_how_the_model_was_sampled():
    from bayes_rr.report.sections import _sampling_notes

    assert _sampling_notes({"sampled_form": "as stated"}) == []
    assert _sampling_notes({}) == []  # a fit folder written before these keys
    check = {"nodes": 16, "largest_scale": 0.7736, "largest_study_log_lik_error": 1.42e-6,
             "tolerance": 0.01, "ok": True}  # fmt: skip
    notes = _sampling_notes({"sampled_form": "grand mean; interaction integrated",
                             "integration_rule_check": check,
                             "sampled_again": ["2 divergent transitions"]})  # fmt: skip
    assert len(notes) == 3
    assert "up to 0.774" in notes[1] and "1.4e-06" in notes[1] and "within" in notes[1]
    failed = {**check, "ok": False, "then": "the fit ran again with the effects sampled"}
    text = _sampling_notes({"sampled_form": "grand mean", "integration_rule_check": failed})[1]
    assert "beyond the tolerance" in text and "ran again" in text


def test_the_integrated_likelihood_is_even_in_the_scale():
    """Why the scale may be sampled with a sign: the rule's nodes and weights are
    symmetric, so the value at -sigma equals that at sigma and its sigma-derivative
    changes sign (checked on the kernel, eta on both sides of 0, 1 to 6 calls)."""
    from bayes_rr.families.cell_integral import _kernel

    rng = np.random.default_rng(8)
    n = rng.integers(1, 7, 60).astype(float)
    k = np.floor(rng.random(60) * (n + 1))
    eta = rng.normal(0, 3, 60)
    x, log_w = gauss_hermite(24)
    plus = _kernel()(eta, 0.9, n, k, x, log_w)
    minus = _kernel()(eta, -0.9, n, k, x, log_w)
    np.testing.assert_allclose(minus[0], plus[0], rtol=1e-13, atol=1e-13)
    np.testing.assert_allclose(minus[1], plus[1], rtol=1e-11, atol=1e-12)
    np.testing.assert_allclose(minus[2], -plus[2], rtol=1e-11, atol=1e-12)
    # and the rule's value against scipy.integrate.quad at a negative scale
    for i in range(5):
        ref = _quad_log_lik(eta[i], 0.9, int(n[i]), int(k[i]))
        assert minus[0][i] == pytest.approx(ref, abs=1e-6)


@pytest.mark.parametrize(
    ("toml_prior", "reference"),
    [
        ('{ distribution = "half_normal", sigma = 0.5 }', "halfnorm"),
        ('{ distribution = "half_student_t", nu = 4, sigma = 0.5 }', "halft"),
    ],
)
def test_the_signed_scale_has_the_stated_prior(small_sim, toml_prior, reference):
    """|s| of the sampled signed scale has the stated prior: the density of s at +-v,
    doubled, against scipy.stats (halfnorm; t doubled on the half line)."""
    import pymc as pm
    from scipy import stats

    from bayes_rr.families import build_sampling_model
    from bayes_rr.families.crossed_logit import SIGNED_SCALE, signed_scale_prior
    from bayes_rr.priors.spec import parse_spec

    text = _spec_text().replace('{ distribution = "half_normal", sigma = 0.5 }', toml_prior)
    spec = parse_spec(text, "variant")
    assert signed_scale_prior(spec) is not None
    model = build_sampling_model(spec, small_sim.study)
    assert SIGNED_SCALE in {v.name for v in model.free_RVs}
    assert "sigma_interaction" not in {v.name for v in model.free_RVs}
    values = np.array([0.05, 0.4, 1.3])
    for sign in (1.0, -1.0):
        ours = np.log(2) + pm.logp(model[SIGNED_SCALE], sign * values).eval()
        if reference == "halfnorm":
            ref = stats.halfnorm.logpdf(values, scale=0.5)
        else:
            ref = np.log(2) + stats.t.logpdf(values, 4, scale=0.5)
        # PyMC rounds its normalising constant (measured offset 1.9e-9)
        np.testing.assert_allclose(ours, ref, rtol=0, atol=1e-8)


def _spec_text() -> str:
    from bayes_rr.priors.spec import bundled_models

    return bundled_models()["crossed-logit"].read_text(encoding="utf-8")


def test_no_signed_scale_without_a_symmetric_prior_or_with_an_earlier_factor():
    from dataclasses import replace
    from types import SimpleNamespace

    from bayes_rr.families.crossed_logit import signed_scale_prior
    from bayes_rr.priors.spec import load_spec, parse_spec

    text = _spec_text().replace(
        '{ distribution = "half_normal", sigma = 0.5 }',
        '{ distribution = "exponential", lam = 2.0 }',
    )
    assert signed_scale_prior(parse_spec(text, "variant")) is None
    spec = load_spec("crossed-logit")
    assert signed_scale_prior(spec) == "normal"
    earlier = SimpleNamespace(factors=[SimpleNamespace(parameter="sigma_interaction")])
    assert signed_scale_prior(replace(spec, earlier=earlier)) is None


def test_a_fit_reports_the_scale_and_not_its_signed_draws(small_sim):
    from bayes_rr.priors.spec import load_spec

    result = _fit(small_sim.study, load_spec("crossed-logit"))
    posterior = result.idata.posterior
    assert "sigma_interaction_signed" not in posterior
    assert float(posterior["sigma_interaction"].min()) >= 0.0
    assert "sampled with a sign" in result.provenance["sampled_form"]
    assert result.provenance["integration_rule_check"]["ok"] is True


@pytest.mark.parametrize(
    ("design", "expected"),
    [
        ((100, 2, 10), "centered"),  # 100 levels, 20 calls each
        ((99, 2, 10), "noncentered"),  # one level short
        ((100, 3, 6), "noncentered"),  # 18 calls a level
        ((6, 2, 10), "noncentered"),  # few levels: 12 divergences centered (terms.py)
    ],
)
def test_many_informed_levels_are_centered(design, expected):
    from bayes_rr.families.pymc_parts import resolve_parameterization
    from bayes_rr.priors.spec import load_spec
    from bayes_rr.simulation.known_truth import simulate_crossed_logit

    study = simulate_crossed_logit(*design, mu=-0.5, sigma_part=2.0, sigma_appraiser=0.5,
                                   sigma_interaction=0.3, seed=3).study  # fmt: skip
    spec = load_spec("crossed-logit")
    assert resolve_parameterization(spec.term("part"), study) == expected
    # the appraisers (1,000 calls each, but at most 3 levels) stay noncentered
    assert resolve_parameterization(spec.term("appraiser"), study) == "noncentered"
