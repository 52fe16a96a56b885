"""False reject and false accept rates (docs/statistics.md families 3 and 4).

Outside references: the dental data of Espeland and Handelman (1989), with the
two-class maximum-likelihood fit printed in the randomLCA vignette (values in
docs/statistics.md, outside reference values); an EM fit of our own as a second,
independent reference; scipy.integrate.quad for the logistic-normal rates; direct enumeration
for the class likelihoods; simulated studies with known rates.
"""

import numpy as np
import pytest
from scipy import integrate, stats
from scipy.special import expit

from bayes_rr.families.latent_class import (
    call_patterns,
    class_log_likelihoods,
    identification_problem,
    latent_class_posterior,
)
from bayes_rr.families.status import population_rates, study_rates
from bayes_rr.results.wrong_calls import rate_readings
from bayes_rr.study.data import study_from_cells

# Espeland & Handelman (1989): five dentists, 3869 patients; counts of the 32 call
# patterns in binary order (dentist 1 most significant), read in randomLCA's data file
# `dentistry` [S] (docs/statistics.md (outside reference values)).
DENTAL_COUNTS = [1880, 789, 43, 75, 23, 63, 8, 22, 188, 191, 17, 67, 15, 85, 8, 56,
                 22, 26, 6, 14, 1, 20, 2, 17, 2, 20, 6, 27, 3, 72, 1, 100]  # fmt: skip
# Two-class maximum-likelihood fit printed in the randomLCA vignette [S]:
DENTAL_SENSITIVITY = np.array([0.4033508, 0.7128814, 0.5981284, 0.4888448, 0.9154706])
DENTAL_FALSE_POSITIVE = np.array([0.01061849, 0.10198791, 0.01359123, 0.03156301, 0.30527875])
DENTAL_PREVALENCE = 0.196066  # computed: an EM fit reproducing the table (docs/statistics.md)


def dental_calls() -> np.ndarray:
    bits = np.array([[(k >> (4 - j)) & 1 for j in range(5)] for k in range(32)])
    return np.repeat(bits, DENTAL_COUNTS, axis=0)


def dental_study():
    s = dental_calls()
    return study_from_cells([f"T{i}" for i in range(len(s))], [f"D{j + 1}" for j in range(5)],
                            np.ones_like(s), s)  # fmt: skip


def em_two_classes(y: np.ndarray, iterations: int = 5000) -> tuple[np.ndarray, np.ndarray, float]:
    """Our own EM for the two-class latent class model with conditional independence:
    returns (P(call 1 | class 1), P(call 1 | class 0), P(class 1)), class 1 being the
    class with the higher call rates."""
    p1, p0, theta = np.full(y.shape[1], 0.7), np.full(y.shape[1], 0.1), 0.3
    for _ in range(iterations):
        l1 = theta * np.prod(p1**y * (1 - p1) ** (1 - y), axis=1)
        l0 = (1 - theta) * np.prod(p0**y * (1 - p0) ** (1 - y), axis=1)
        w = l1 / (l1 + l0)
        theta = w.mean()
        p1 = (w[:, None] * y).sum(axis=0) / w.sum()
        p0 = ((1 - w)[:, None] * y).sum(axis=0) / (1 - w).sum()
    return p1, p0, float(theta)


def test_data_totals_match_the_source():
    counts = np.array(DENTAL_COUNTS)
    assert counts.sum() == 3869 and counts[0] == 1880 and counts[-1] == 100


def test_our_em_reproduces_the_published_fit():
    p1, p0, theta = em_two_classes(dental_calls())
    # the printed values have seven digits; EM's last digits converge slowly
    np.testing.assert_allclose(p1, DENTAL_SENSITIVITY, atol=1e-5)
    np.testing.assert_allclose(p0, DENTAL_FALSE_POSITIVE, atol=1e-5)
    assert theta == pytest.approx(DENTAL_PREVALENCE, abs=1e-5)


def test_call_patterns_group_parts_with_the_same_calls():
    patterns = call_patterns(dental_study())
    assert len(patterns.weight) == 32 and patterns.weight.sum() == 3869
    assert sorted(patterns.weight.astype(int)) == sorted(DENTAL_COUNTS)
    # each part maps to the pattern of its own calls
    assert np.array_equal(patterns.s[patterns.part_of], dental_calls())


@pytest.fixture
def small_grid():
    rng = np.random.default_rng(3)
    n = rng.integers(0, 4, (6, 3))
    s = rng.binomial(n, 0.4)
    study = study_from_cells([f"P{i}" for i in range(6)], ["A", "B", "C"], n, s)
    return study, n, s, rng.normal(0, 0.5, (1, 3, 2))


def test_class_likelihoods_without_a_part_effect_against_enumeration(small_grid):
    # Reference: the binomial pmf (scipy.stats.binom) summed directly, one part at a time.
    study, n, s, effect = small_grid
    patterns = call_patterns(study)
    intercept = np.array([[-1.0, 1.5]])
    ours, _ = class_log_likelihoods(patterns, intercept, effect)
    ours = ours[0][patterns.part_of]
    for i in range(6):
        for r in (0, 1):
            p = expit(intercept[0, r] + effect[0, :, r])
            assert ours[i, r] == pytest.approx(stats.binom.logpmf(s[i], n[i], p).sum(), abs=1e-10)
    weight, marginal = latent_class_posterior(ours[None], np.array([0.3]))
    joint = np.exp(ours) * np.array([0.7, 0.3])
    np.testing.assert_allclose(weight[0], joint[:, 1] / joint.sum(axis=1), rtol=1e-12)
    np.testing.assert_allclose(marginal[0], np.log(joint.sum(axis=1)), rtol=1e-12)


def test_class_likelihoods_integrate_the_part_effect(small_grid):
    # Reference: scipy.integrate.quad of prod_j Binomial(s_ij | n_ij, expit(mu_r + b_jr + a))
    # times N(a; 0, sigma^2), and of the call probability weighted the same way.
    study, n, s, effect = small_grid
    patterns = call_patterns(study)
    intercept, sigma = np.array([[-1.0, 1.5]]), 0.8
    ours, expected = class_log_likelihoods(patterns, intercept, effect, np.array([sigma]))
    for i in range(6):
        k = patterns.part_of[i]
        for r in (0, 1):

            def lik(a, i=i, r=r):
                p = expit(intercept[0, r] + effect[0, :, r] + a)
                return np.exp(stats.binom.logpmf(s[i], n[i], p).sum()) * stats.norm.pdf(a, 0, sigma)

            total = integrate.quad(lik, -10, 10, epsabs=1e-14)[0]
            assert ours[0, k, r] == pytest.approx(np.log(total), abs=1e-6)
            first = integrate.quad(
                lambda a, i=i, r=r: lik(a) * expit(intercept[0, r] + effect[0, 0, r] + a),
                -10, 10, epsabs=1e-14,
            )[0]  # fmt: skip
            assert expected[0, k, 0, r] == pytest.approx(first / total, abs=1e-6)


def test_study_rates_on_hand_set_draws():
    # Two good parts, one bad part, two appraisers; one draw.
    p = np.array([[[0.1, 0.3], [0.2, 0.0], [0.9, 0.6]]])
    weight = np.array([[0.0, 0.0, 1.0]])
    rates = study_rates(p, p, weight)
    np.testing.assert_allclose(rates["appraiser"]["false_reject_rate"][0], [0.15, 0.15])
    np.testing.assert_allclose(rates["appraiser"]["false_accept_rate"][0], [0.1, 0.4])
    agree = [(0.9 + 0.8 + 0.9) / 3, (0.7 + 1.0 + 0.6) / 3]
    np.testing.assert_allclose(rates["appraiser"]["reference_agreement"][0], agree)
    assert rates["system"]["false_accept_rate"][0] == pytest.approx(0.25)


def test_population_rates_against_numerical_integration():
    # Reference: scipy.integrate.quad of expit(mu + z) N(z; 0, s^2).
    intercept = np.array([[-2.0, 1.5]])
    effect = np.array([[[0.3, -0.2], [-0.4, 0.5]]])
    sp, sc, sa = np.array([0.8]), np.array([0.3]), np.array([[0.6, 0.9]])
    rates = population_rates(intercept, effect, sp, sa, sc, 0.4)

    def mean(mu, scale):
        return integrate.quad(lambda z: expit(mu + z) * stats.norm.pdf(z, 0, scale), -12 * scale,
                              12 * scale, epsabs=1e-12)[0]  # fmt: skip

    within = np.hypot(0.8, 0.3)
    assert rates["appraiser"]["false_reject_rate"][0, 1] == pytest.approx(
        mean(-2.4, within), abs=1e-6
    )
    assert rates["appraiser"]["false_accept_rate"][0, 0] == pytest.approx(
        1 - mean(1.3, within), abs=1e-6
    )
    total = np.sqrt(within**2 + 0.9**2)
    assert rates["system"]["false_accept_rate"][0] == pytest.approx(1 - mean(1.5, total), abs=1e-6)
    frr, far = rates["system"]["false_reject_rate"][0], rates["system"]["false_accept_rate"][0]
    assert rates["system"]["reference_agreement"][0] == pytest.approx(
        0.6 * (1 - frr) + 0.4 * (1 - far)
    )


@pytest.mark.parametrize(
    ("appraisers", "trials", "identified"),
    [(1, 1, False), (1, 2, False), (1, 3, True), (2, 1, False), (2, 2, True), (3, 1, True)],
)
def test_identification_by_counting_patterns(appraisers, trials, identified):
    n = np.full((5, appraisers), trials)
    study = study_from_cells([f"P{i}" for i in range(5)], [f"A{j}" for j in range(appraisers)],
                             n, np.zeros_like(n))  # fmt: skip
    assert (identification_problem(study) is None) is identified


def test_readings_name_each_appraiser_with_an_interval():
    rows = [
        {"key": "false_reject_rate", "scope": "study", "level": "appraiser", "appraiser": a,
         "mean": m, "lower": m / 2, "upper": m * 1.5}
        for a, m in (("Ann", 0.05), ("Ben", 0.31))
    ] + [{"key": "false_reject_rate", "scope": "study", "level": "system", "appraiser": None,
          "mean": 0.18, "lower": 0.1, "upper": 0.26}]  # fmt: skip
    found = [{"appraiser": "Ben", "key": "false_reject_rate", "direction": "higher",
              "probability": 0.99}]  # fmt: skip
    text = " ".join(rate_readings(rows, found, 0.95))
    assert "Of good parts, Ann rejects 5.0% (2.5% to 7.5%) and Ben 31% (16% to 46%)" in text
    assert "Ben stands out" in text


def test_standouts_name_an_appraiser_with_a_clearly_higher_rate():
    import xarray as xr

    from bayes_rr.results.wrong_calls import standouts

    rng = np.random.default_rng(0)
    draws = rng.normal([0.05, 0.06, 0.30], 0.02, size=(2, 500, 3)).clip(0, 1)
    ds = xr.Dataset({"study__appraiser__false_reject_rate": (("chain", "draw", "appraiser"),
                                                            draws)},
                    coords={"appraiser": ["Ann", "Bo", "Cy"]})  # fmt: skip
    found = standouts(ds)
    assert [(f["appraiser"], f["direction"]) for f in found] == [("Cy", "higher")]
    alike = rng.normal(0.1, 0.02, size=(2, 500, 3))
    ds["study__appraiser__false_reject_rate"] = (("chain", "draw", "appraiser"), alike)
    assert standouts(ds) == []
