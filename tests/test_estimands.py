"""Estimand maths on hand-set draws (no MCMC), against scipy and exact identities."""

import math

import numpy as np
import pytest
import xarray as xr
from scipy import integrate, stats
from scipy.special import expit

from bayes_rr.core.moments import (
    GH_NODES_BY_SCALE,
    decompose_population_beta,
    decompose_population_logit,
    integrated_cell_log_lik,
    logistic_normal_moments,
    split_reproducibility_logit,
)
from bayes_rr.priors.spec import load_spec
from bayes_rr.results.estimands import (
    add_shares,
    compute_estimands,
    decompose_study,
    study_level,
    summarize,
)
from bayes_rr.study.data import study_from_cells


def _quad_moments(eta, s):
    # Reference: scipy.integrate.quad of expit(eta + z) N(z; 0, s^2).
    def moment(power):
        return integrate.quad(
            lambda z: expit(eta + z) ** power * stats.norm.pdf(z, 0, s),
            -40 * s, 40 * s, points=[-eta], epsabs=1e-14, epsrel=1e-13, limit=500,
        )[0]  # fmt: skip

    return moment(1), moment(2)


SCALES = [0.01, 0.3, 0.8, 1.4, 2.2, 3.0, 3.9, 4.8, 5.9, 7.5]


@pytest.mark.parametrize("scale", SCALES)
def test_quadrature_error_below_1e6_against_scipy_quad(scale):
    etas = np.linspace(-8, 8, 17)
    m1, m2 = logistic_normal_moments(etas[None, :], np.array([scale]))
    for k, eta in enumerate(etas):
        q1, q2 = _quad_moments(eta, scale)
        assert abs(m1[0, k] - q1) < 1e-6
        assert abs(m2[0, k] - q2) < 1e-6


def test_node_table_is_increasing():
    limits = [s for s, _ in GH_NODES_BY_SCALE]
    nodes = [k for _, k in GH_NODES_BY_SCALE]
    assert limits == sorted(limits) and nodes == sorted(nodes)


def test_zero_scale_is_the_plain_logistic():
    eta = np.array([[-2.0, 0.0, 3.0]])
    m1, m2 = logistic_normal_moments(eta, np.array([0.0]))
    np.testing.assert_allclose(m1, expit(eta), atol=1e-15)
    np.testing.assert_allclose(m2, expit(eta) ** 2, atol=1e-15)


def test_population_decomposition_identity_and_split():
    rng = np.random.default_rng(3)
    eta = rng.normal(0, 2.5, (200, 7))
    sa, sc = np.abs(rng.normal(0, 1, 200)), np.abs(rng.normal(0, 0.5, 200))
    pop = decompose_population_logit(eta, np.sqrt(sa**2 + sc**2))
    np.testing.assert_allclose(
        pop["rr_variance"], pop["repeatability_variance"] + pop["reproducibility_variance"],
        atol=1e-12,
    )  # fmt: skip
    split = split_reproducibility_logit(eta, sa, sc)
    # the two parts add up to the population reproducibility (quadrature error 1e-6)
    np.testing.assert_allclose(
        split["appraiser_bias_variance"] + split["interaction_variance"],
        pop["reproducibility_variance"],
        atol=1e-6,
    )
    assert (split["appraiser_bias_variance"] >= -1e-12).all()
    assert (split["interaction_variance"] >= -1e-12).all()


def test_split_against_monte_carlo():
    # Law of total variance by brute force: b ~ N(0, 1.2^2), c ~ N(0, 0.7^2).
    rng = np.random.default_rng(0)
    eta = np.array([[0.4]])
    b = rng.normal(0, 1.2, 4000)
    c = rng.normal(0, 0.7, (4000, 2000))
    p = expit(eta[0, 0] + b[:, None] + c)
    bias_mc = p.mean(axis=1).var()
    inter_mc = p.var(axis=1).mean()
    split = split_reproducibility_logit(eta, np.array([1.2]), np.array([0.7]))
    assert split["appraiser_bias_variance"][0, 0] == pytest.approx(bias_mc, rel=0.05)
    assert split["interaction_variance"][0, 0] == pytest.approx(inter_mc, rel=0.02)


@pytest.mark.parametrize(
    ("eta", "sa", "sc"), [(0.4, 1.2, 0.7), (-2.5, 0.3, 1.4), (1.0, 2.4, 0.05), (3.0, 4.5, 2.0)]
)
def test_split_against_nested_scipy_quad(eta, sa, sc):
    # Reference: nested scipy.integrate.quad (inner, over c) inside quad_vec (outer, over b).
    # m(b) = E_c[expit(eta + b + c)]: bias = Var_b(m(b)), interaction = E_b[Var_c(.)].
    def normal_pdf(x, s):
        return math.exp(-0.5 * (x / s) ** 2) / (s * math.sqrt(2 * math.pi))

    def inner(b, power):
        return integrate.quad(
            lambda c: expit(eta + b + c) ** power * normal_pdf(c, sc),
            -12 * sc, 12 * sc, epsabs=1e-13, limit=200,
        )[0]  # fmt: skip

    def outer_integrand(b):
        m1, m2 = inner(b, 1), inner(b, 2)
        return np.array([m1, m1 * m1, m2 - m1 * m1]) * normal_pdf(b, sa)

    m_mean, m_square, interaction = integrate.quad_vec(
        outer_integrand, -12 * sa, 12 * sa, epsabs=1e-12
    )[0]
    ours = split_reproducibility_logit(np.array([[eta]]), np.array([sa]), np.array([sc]))
    assert ours["appraiser_bias_variance"][0, 0] == pytest.approx(m_square - m_mean**2, abs=2e-6)
    assert ours["interaction_variance"][0, 0] == pytest.approx(interaction, abs=2e-6)


def test_split_groups_draws_with_different_rules():
    # Draws whose scales need different quadrature rules give the same values as
    # each draw computed alone.
    rng = np.random.default_rng(5)
    eta = rng.normal(0, 2, (40, 3))
    sa = np.concatenate([rng.uniform(0.05, 0.4, 20), rng.uniform(1.6, 6.5, 20)])
    sc = rng.permutation(np.concatenate([rng.uniform(0.01, 0.2, 20), rng.uniform(1.1, 2.4, 20)]))
    together = split_reproducibility_logit(eta, sa, sc)
    for d in (0, 13, 27, 39):
        alone = split_reproducibility_logit(eta[d : d + 1], sa[d : d + 1], sc[d : d + 1])
        for key, values in alone.items():
            np.testing.assert_allclose(together[key][d], values[0], atol=1e-6)


def test_study_scope_identity_draw_by_draw():
    p = np.random.default_rng(1).uniform(size=(500, 9, 4))
    d = decompose_study(p)
    np.testing.assert_allclose(
        d["rr_variance"], d["repeatability_variance"] + d["reproducibility_variance"], atol=1e-15
    )


@pytest.mark.parametrize(("a", "b"), [(2.0, 1.0), (0.5, 0.5), (3.0, 7.0), (20.0, 2.0)])
def test_beta_expectation_identity_against_quad(a, b):
    # E[p(1-p)] = pi(1-pi) - Var(p) (common practice; docs/statistics.md), for Beta(a, b):
    # scipy.integrate.quad of p(1-p) Beta(p; a, b).
    expected = integrate.quad(lambda x: x * (1 - x) * stats.beta.pdf(x, a, b), 0, 1)[0]
    pi, phi = a / (a + b), a + b
    d = decompose_population_beta(np.array([pi]), np.array([phi]))
    assert d["repeatability_variance"][0] == pytest.approx(expected, abs=1e-10)
    # V = pi(1-pi)/(phi+1) is the variance of Beta(a, b) (scipy.stats.beta.var)
    assert d["reproducibility_variance"][0] == pytest.approx(stats.beta(a, b).var(), abs=1e-14)


@pytest.mark.parametrize(("n", "a", "b"), [(5, 2.0, 1.0), (3, 0.7, 1.9), (8, 4.0, 4.0)])
def test_beta_binomial_variance_matches_scipy_betabinom(n, a, b):
    # scipy.stats.betabinom: Var = n pi(1-pi)[1 + (n-1) rho], rho = 1/(a+b+1); in our terms
    # Var(s) = n T + n(n-1) V for a cell of n calls.
    d = decompose_population_beta(np.array([a / (a + b)]), np.array([a + b]))
    var = n * d["rr_variance"][0] + n * (n - 1) * d["reproducibility_variance"][0]
    assert var == pytest.approx(stats.betabinom(n, a, b).var(), rel=1e-12)
    assert d["reproducibility_variance"][0] / d["rr_variance"][0] == pytest.approx(1 / (a + b + 1))


def test_scipy_betabinom_reference_identities():
    # scipy.stats.betabinom: betabinom(5, 2, 1) pmf = (k+1)/21, mean 10/3, variance 20/9.
    k = np.arange(6)
    np.testing.assert_allclose(stats.betabinom(5, 2, 1).pmf(k), (k + 1) / 21)
    assert stats.betabinom(5, 2, 1).var() == pytest.approx(20 / 9)


def test_shares_missing_where_total_is_zero():
    per_part = decompose_study(np.array([[[0.0, 0.0], [0.2, 0.6]]]))
    shares = add_shares(per_part, "study")
    assert np.isnan(shares["reproducibility_share"][0, 0])
    assert shares["reproducibility_share"][0, 1] == pytest.approx(0.04 / 0.24)


def test_study_share_is_ratio_of_averages():
    per_part = {
        "call_rate": np.array([[0.5, 0.1]]),
        "rr_variance": np.array([[0.25, 0.09]]),
        "repeatability_variance": np.array([[0.2, 0.01]]),
        "reproducibility_variance": np.array([[0.05, 0.08]]),
    }
    out = study_level(per_part, "study")
    assert out["reproducibility_share"][0] == pytest.approx(0.13 / 0.34)
    assert out["rr_sd"][0] == pytest.approx(np.sqrt(0.17))


def _fake_logit_posterior(study, draws=50, seed=0):
    rng = np.random.default_rng(seed)
    n_cells = len(study.cells)
    shape = (2, draws)
    return xr.Dataset(
        {
            "intercept": (("chain", "draw"), rng.normal(0, 1, shape)),
            "sigma_part": (("chain", "draw"), np.abs(rng.normal(2, 0.2, shape))),
            "part_effect": (("chain", "draw", "part"), rng.normal(0, 2, (*shape, 6))),
            "sigma_appraiser": (("chain", "draw"), np.abs(rng.normal(0.6, 0.1, shape))),
            "appraiser_effect": (("chain", "draw", "appraiser"), rng.normal(0, 0.6, (*shape, 3))),
            "sigma_interaction": (("chain", "draw"), np.abs(rng.normal(0.3, 0.05, shape))),
            "interaction_effect": (
                ("chain", "draw", "cell"), rng.normal(0, 0.3, (*shape, n_cells))
            ),
        },
        coords={"chain": [0, 1], "draw": np.arange(draws), "part": list(study.parts),
                "appraiser": list(study.appraisers)},
    )  # fmt: skip


@pytest.fixture(scope="module")
def small_study():
    n = np.full((6, 3), 2)
    n[0, 2] = 0  # one empty cell
    s = np.minimum(n, np.arange(18).reshape(6, 3) % 3)
    return study_from_cells([f"P{i}" for i in range(6)], ["A", "B", "C"], n, s)


def test_compute_estimands_labels_and_identity(small_study):
    post = _fake_logit_posterior(small_study)
    est = compute_estimands(post, load_spec("crossed-logit"), small_study, seed=1)
    for scope in ("study", "population"):
        t = est[f"{scope}__part__rr_variance"]
        r = est[f"{scope}__part__repeatability_variance"]
        v = est[f"{scope}__part__reproducibility_variance"]
        np.testing.assert_allclose(t, r + v, atol=1e-9)
        assert t.dims == ("chain", "draw", "part")
        assert est[f"{scope}__study__rr_variance"].dims == ("chain", "draw")
    assert est["study__appraiser__call_rate"].dims == ("chain", "draw", "appraiser")
    assert "population__study__appraiser_bias_variance" in est
    assert "study__study__appraiser_bias_variance" not in est  # population scope only


def test_summaries_have_every_documented_field(small_study):
    post = _fake_logit_posterior(small_study)
    est = compute_estimands(post, load_spec("crossed-logit"), small_study, seed=1)
    rows = summarize(est[["study__study__rr_variance", "population__part__call_rate"]], 0.9)
    assert len(rows) == 1 + 6
    row = rows[0]
    draws = est["study__study__rr_variance"].to_numpy().ravel()
    assert row.mean == pytest.approx(draws.mean())
    assert row.median == pytest.approx(np.median(draws))
    assert row.lower <= row.median <= row.upper
    eti = summarize(est[["study__study__rr_variance"]], 0.9, "eti")[0]
    assert eti.lower == pytest.approx(np.quantile(draws, 0.05))
    assert {r.part for r in rows[1:]} == set(small_study.parts)


@pytest.mark.parametrize(
    ("eta", "sigma", "n", "k"),
    [(0.3, 0.5, 3, 1), (-2.0, 1.2, 2, 0), (1.0, 0.05, 3, 3), (0.0, 1.0, 80, 30), (2.5, 2.5, 6, 1)],
)
def test_integrated_cell_likelihood_against_quad(eta, sigma, n, k):
    # Reference: scipy.integrate.quad of Binomial(k | n, expit(eta + c)) N(c; 0, sigma^2).
    expected = integrate.quad(
        lambda c: stats.binom.pmf(k, n, expit(eta + c)) * stats.norm.pdf(c, 0, sigma),
        -12 * sigma, 12 * sigma, epsabs=1e-15, limit=500, points=[0.0],
    )[0]  # fmt: skip
    ours = integrated_cell_log_lik(np.array([[eta]]), np.array([sigma]), np.array([n]),
                                   np.array([k]))  # fmt: skip
    assert ours[0, 0] == pytest.approx(np.log(expected), abs=1e-9)


def test_compiled_kernels_match_plain_numpy():
    # Reference: the same sums written with numpy and scipy.special.logsumexp/log_expit.
    from scipy.special import log_expit, logsumexp

    from bayes_rr.core.kernels import log_integrated_binomial, nested_moments

    rng = np.random.default_rng(11)
    eta = rng.normal(0, 3, (6, 5))
    # beyond the kernels' direct sums: logits past +-300, and a cell whose terms
    # underflow (600 calls at eta = 9), both summed on the log scale instead
    eta[0, 1], eta[1, 2], eta[2, 4] = 400.0, -350.0, 9.0
    scale = rng.uniform(0.1, 2.0, 6)
    u, w = np.polynomial.hermite.hermgauss(15)
    u, w = np.sqrt(2) * u, w / np.sqrt(np.pi)
    n, k = np.array([3.0, 2.0, 80.0, 1.0, 600.0]), np.array([1.0, 2.0, 30.0, 0.0, 300.0])
    x = eta[..., None] + scale[:, None, None] * u
    terms = np.log(w) + k[:, None] * log_expit(x) + (n - k)[:, None] * log_expit(-x)
    np.testing.assert_allclose(
        log_integrated_binomial(eta, scale, n, k, u, np.log(w)), logsumexp(terms, axis=-1),
        rtol=1e-12, atol=1e-13,  # a cell whose log likelihood is 0 to rounding
    )  # fmt: skip
    inner = rng.uniform(0.1, 1.0, 6)
    x = (
        eta[..., None, None]
        + scale[:, None, None, None] * u[:, None]
        + inner[:, None, None, None] * u
    )
    m = expit(x) @ w
    m2 = expit(x) ** 2 @ w
    mean, square, spread = nested_moments(eta, scale, inner, (u, w), (u, w))
    np.testing.assert_allclose(mean, m @ w, rtol=1e-12)
    np.testing.assert_allclose(square, (m * m) @ w, rtol=1e-12)
    np.testing.assert_allclose(spread, (m2 - m * m) @ w, rtol=1e-10, atol=1e-15)


def test_kernels_compile_without_a_disk_cache():
    # A function numba cannot cache (no source file, like a read-only install with no
    # writable cache folder) is compiled in memory instead of raising.
    import numba

    from bayes_rr.core.kernels import _jit

    namespace = {}
    exec("def add_one(x):\n    return x + 1.0\n", namespace)
    with pytest.raises(RuntimeError, match="cannot cache"):
        numba.njit(cache=True)(namespace["add_one"])
    assert _jit(namespace["add_one"])(1.0) == 2.0


# ---------------------------------------------------------------------------
# edge cases: p near 0 or 1, undefined draws, intervals through square roots


@pytest.mark.parametrize(("a", "b"), [(2.0, 3.0), (0.01, 5.0), (50.0, 0.02), (0.5, 0.02)])
def test_beta_draws_follow_the_beta_distribution_without_rounding_to_0_or_1(a, b):
    """Kolmogorov-Smirnov against scipy.stats.beta, on p or on 1 - p (whichever is small;
    numpy's Generator.beta returns exactly 1.0 in about half the draws of Beta(50, 0.02))."""
    from scipy import stats

    from bayes_rr.core.moments import beta_draws

    rng = np.random.default_rng(3)
    p, q = beta_draws(rng, np.full(50_000, a), np.full(50_000, b))
    small, dist = (p, stats.beta(a, b)) if a <= b else (q, stats.beta(b, a))
    assert stats.kstest(small, dist.cdf).pvalue > 1e-3
    # exact zeros only where the true value is below the smallest double (Beta(0.01, 5)
    # puts about 6e-4 of its mass below 1e-308)
    assert np.mean(p * q == 0) <= 1.5 * dist.cdf(1e-300) + 2e-4
    np.testing.assert_allclose(p + q, 1.0, atol=1e-12)


def test_decomposition_stays_defined_where_p_rounds_to_1():
    """eta = 40: expit(eta) is exactly 1.0 in floating point, yet T and R are positive
    and the shares defined when 1 - p is computed as expit(-eta)."""
    from scipy.special import expit

    from bayes_rr.results.estimands import add_shares, decompose_study

    eta = np.array([[[40.0, 41.0, 39.0]]])
    assert np.all(expit(eta) == 1.0)
    per_part = add_shares(decompose_study(expit(eta), expit(-eta)), "study")
    assert per_part["rr_variance"][0, 0] > 0
    assert 0 <= per_part["reproducibility_share"][0, 0] <= 1
    assert per_part["repeatability_share"][0, 0] == pytest.approx(
        1 - per_part["reproducibility_share"][0, 0]
    )
    # without the accurate 1 - p the share is lost: the reason for q
    assert np.isnan(add_shares(decompose_study(expit(eta)), "study")["reproducibility_share"][0, 0])


def test_rows_with_undefined_draws_are_summarised_and_kept_in_the_gate():
    import xarray as xr

    from bayes_rr.results.estimands import summarize

    rng = np.random.default_rng(0)
    values = rng.normal(0.5, 0.1, (4, 500))
    values[0, :5] = np.nan
    ds = xr.Dataset({"study__study__reproducibility_share": (("chain", "draw"), values)})
    (row,) = summarize(ds, 0.9, "eti")
    defined = values[np.isfinite(values)]
    assert row.mean == pytest.approx(defined.mean())
    assert row.lower == pytest.approx(np.quantile(defined, 0.05))
    assert np.isfinite(row.r_hat) and np.isfinite(row.ess_bulk)
    assert "0.25% of draws" in row.note


def test_equal_tailed_intervals_carry_through_the_square_root(fits):
    """The default (equal-tailed) interval of an sd is the square root of its variance's
    interval (up to the interpolation between neighbouring draws)."""
    result = fits["crossed-logit"]
    assert result.interval == "eti"
    rows = {(r.key, r.scope): r for r in result.estimand_rows if r.level == "study"}
    for scope in ("study", "population"):
        for name in ("rr", "repeatability", "reproducibility"):
            var, sd = rows[(f"{name}_variance", scope)], rows[(f"{name}_sd", scope)]
            assert sd.lower == pytest.approx(np.sqrt(var.lower), rel=2e-3, abs=1e-6)
            assert sd.upper == pytest.approx(np.sqrt(var.upper), rel=2e-3, abs=1e-6)
