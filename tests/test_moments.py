"""Moment estimates: hand-computed values and the exact identity T = R + V."""

import numpy as np
import pytest

from bayes_rr.simulation.known_truth import simulate_crossed_logit
from bayes_rr.study.classical import classical_statistics, moment_estimates
from bayes_rr.study.data import study_from_cells


@pytest.fixture
def tiny():
    # P1: A calls reject twice (p=1), B once of two (p=.5); P2: all accept.
    return study_from_cells(["P1", "P2"], ["A", "B"], n=[[2, 2], [2, 2]], s=[[2, 1], [0, 0]])


def test_hand_computed_plug_in(tiny):
    plug, _ = moment_estimates(tiny)
    p1 = plug.per_part.set_index("part").loc["P1"]
    # pi = (1 + .5)/2 = .75; T = .75 * .25; R = mean(0, .25); V = mean(.25^2, .25^2)
    assert p1["call_rate"] == pytest.approx(0.75)
    assert p1["rr_variance"] == pytest.approx(0.1875)
    assert p1["repeatability_variance"] == pytest.approx(0.125)
    assert p1["reproducibility_variance"] == pytest.approx(0.0625)
    assert p1["reproducibility_share"] == pytest.approx(1 / 3)
    p2 = plug.per_part.set_index("part").loc["P2"]
    assert p2["rr_variance"] == 0.0
    assert np.isnan(p2["reproducibility_share"])  # T = 0: missing, never 0/0 silently
    assert plug.study["rr_variance"] == pytest.approx(0.09375)
    assert plug.study["repeatability_variance"] == pytest.approx(0.0625)
    assert plug.study["reproducibility_variance"] == pytest.approx(0.03125)
    # ratio of averages, not average of ratios
    assert plug.study["reproducibility_share"] == pytest.approx(0.03125 / 0.09375)
    assert plug.study["repeat_disagreement"] == pytest.approx(0.125)


def test_hand_computed_corrected(tiny):
    _, corr = moment_estimates(tiny)
    p1 = corr.per_part.set_index("part").loc["P1"]
    # R = mean(0, .25 * 2/1) = .25; T = .1875 + (0/1 + .25/1) / 2^2 = .25; V = 0
    assert p1["repeatability_variance"] == pytest.approx(0.25)
    assert p1["rr_variance"] == pytest.approx(0.25)
    assert p1["reproducibility_variance"] == pytest.approx(0.0, abs=1e-15)


def test_hand_computed_corrected_keeps_negative_and_flags():
    # P1: both appraisers call one reject in two: q = (.5, .5), T_plug = .25,
    # R = .5 * 2 = .5 (mean of .25 * 2/1), T = .25 + (.25 + .25)/4 = .375, V = -.125.
    # P2: nobody rejects: T = R = V = 0.
    study = study_from_cells(["P1", "P2"], ["A", "B"], n=[[2, 2], [2, 2]], s=[[1, 1], [0, 0]])
    _, corr = moment_estimates(study)
    p1 = corr.per_part.set_index("part").loc["P1"]
    assert p1["repeatability_variance"] == pytest.approx(0.5)
    assert p1["rr_variance"] == pytest.approx(0.375)
    assert p1["reproducibility_variance"] == pytest.approx(-0.125)
    assert corr.study["reproducibility_variance"] == pytest.approx(-0.0625)
    assert corr.study["reproducibility_sd"] is None
    assert any("negative" in f for f in corr.flags)


def test_corrected_reproducibility_is_unbiased_simulation_check():
    # Simulation check (no published value): a fixed p matrix, every part the same
    # row of p over three appraisers, binomial calls. The plug-in V is biased up by
    # (J - 1)/J^2 sum_j p_j(1 - p_j)/n = 0.046 here; the corrected V (T corrected too,
    # docs/statistics.md) averages to the true V = mean_j (p_j - pi)^2.
    rng = np.random.default_rng(11)
    p = np.array([0.2, 0.5, 0.7])
    n, parts = 3, 20000
    s = rng.binomial(n, p, size=(parts, 3))
    study = study_from_cells([f"P{i}" for i in range(parts)], ["A", "B", "C"],
                             np.full((parts, 3), n), s)  # fmt: skip
    plug, corr = moment_estimates(study)
    true_v = float(((p - p.mean()) ** 2).mean())
    true_r = float((p * (1 - p)).mean())
    assert corr.study["reproducibility_variance"] == pytest.approx(true_v, abs=0.002)
    assert corr.study["repeatability_variance"] == pytest.approx(true_r, abs=0.002)
    # the plug-in V is off by far more than the Monte Carlo error
    assert abs(plug.study["reproducibility_variance"] - true_v) > 0.02


def test_one_appraiser_leaves_reproducibility_out():
    study = study_from_cells(["P1", "P2"], ["A"], n=[[3], [3]], s=[[1], [2]])
    for est in moment_estimates(study):
        assert est.study["reproducibility_variance"] is None
        assert est.study["reproducibility_share"] is None
        assert est.study["repeatability_variance"] is not None


@pytest.mark.parametrize("seed", range(4))
def test_total_is_repeatability_plus_reproducibility(seed):
    study = simulate_crossed_logit(30, 4, 3, missing_share=0.2, seed=seed).study
    for est in moment_estimates(study):
        table = est.per_part.dropna(subset=["repeatability_variance"])
        np.testing.assert_allclose(
            table["rr_variance"],
            table["repeatability_variance"] + table["reproducibility_variance"],
            atol=1e-15,
        )


def test_corrected_repeatability_is_unbiased_in_expectation():
    # E[p^(1-p^)] = p(1-p)(n-1)/n for a binomial proportion (common practice;
    # textbook identity): averaging the corrected term over many cells
    # recovers p(1-p).
    rng = np.random.default_rng(1)
    p, n, cells = 0.3, 3, 20000
    s = rng.binomial(n, p, size=(cells, 1))
    study = study_from_cells([f"P{i}" for i in range(cells)], ["A"], np.full((cells, 1), n), s)
    plug, corr = moment_estimates(study)
    assert corr.study["repeatability_variance"] == pytest.approx(p * (1 - p), abs=0.004)
    assert plug.study["repeatability_variance"] == pytest.approx(p * (1 - p) * 2 / 3, abs=0.004)


def test_one_appraiser_one_trial_computes_the_rest():
    study = study_from_cells(["P1", "P2", "P3"], ["A"], n=[[1], [1], [1]], s=[[1], [0], [1]])
    result = classical_statistics(study)
    names = " ".join(item["statistic"] for item in result.not_computed)
    assert "reproducibility" in names
    assert "corrected repeatability" in names
    assert "across appraisers" in names
    assert result.plug_in.study["rr_variance"] is not None


@pytest.mark.parametrize(("a", "b"), [(1.0, 0.0), (1.0, 0.3), (0.05, 0.3), (0.01, 2.0), (2.0, 2.0)])
def test_logistic_plus_normal_cdf_matches_quadrature(a, b):
    """P(a L + b U <= x), L standard logistic and U standard normal: against
    scipy.integrate.quad of expit((x - b u) / a) phi(u) to 1e-9, on both branches of
    the kernel (b <= a sums over U, b > a over L)."""
    from scipy import integrate, stats
    from scipy.special import expit

    from bayes_rr.core.kernels import logistic_plus_normal_cdf

    x = np.array([[-3.0, -0.4, 0.0, 0.07, 1.5]])
    got = logistic_plus_normal_cdf(x, np.array([a]), np.array([b]))[0]
    for value, found in zip(x[0], got, strict=True):
        if b == 0:
            want = expit(value / a)
        else:

            def integrand(u, v=value):
                return expit((v - b * u) / a) * stats.norm.pdf(u)

            want = integrate.quad(integrand, -12, 12, points=[value / b], limit=200,
                                  epsabs=1e-13)[0]  # fmt: skip
        assert found == pytest.approx(want, abs=1e-9)
