"""Proportion intervals against published tables and scipy/statsmodels."""

import pytest
from scipy import stats
from statsmodels.stats.proportion import confint_proportions_2indep

from bayes_rr.core.intervals import (
    agresti_caffo,
    clopper_pearson,
    jeffreys,
    newcombe_hybrid,
    wilson,
)

# Newcombe (1998), Statistics in Medicine 17:857-872, Table I (transcribed, see
# docs/statistics.md (outside reference values)): x, n, Wilson, Clopper-Pearson, all to 4 dp.
NEWCOMBE_TABLE_I = [
    (81, 263, (0.2553, 0.3662), (0.2527, 0.3676)),
    (15, 148, (0.0624, 0.1605), (0.0578, 0.1617)),
    (0, 20, (0.0, 0.1611), (0.0, 0.1684)),
]


@pytest.mark.parametrize(("x", "n", "wilson_ci", "cp_ci"), NEWCOMBE_TABLE_I)
def test_single_proportion_newcombe_1998_table_1(x, n, wilson_ci, cp_ci):
    w = wilson(x, n)
    c = clopper_pearson(x, n)
    assert (w.lower, w.upper) == pytest.approx(wilson_ci, abs=6e-5)
    assert (c.lower, c.upper) == pytest.approx(cp_ci, abs=6e-5)


@pytest.mark.parametrize(("x", "n"), [(81, 263), (0, 20), (20, 20), (3, 7), (1, 1000)])
@pytest.mark.parametrize("prob", [0.9, 0.95, 0.99])
def test_clopper_pearson_matches_scipy_binomtest(x, n, prob):
    # Reference: scipy.stats.binomtest(...).proportion_ci(method="exact")
    ref = stats.binomtest(x, n).proportion_ci(confidence_level=prob, method="exact")
    ours = clopper_pearson(x, n, prob)
    assert ours.lower == pytest.approx(ref.low, abs=1e-10)
    assert ours.upper == pytest.approx(ref.high, abs=1e-10)
    assert ours.prob == prob and "Clopper" in ours.method


@pytest.mark.parametrize(("x", "n"), [(81, 263), (0, 20), (3, 7)])
def test_wilson_matches_scipy_binomtest(x, n):
    # Reference: scipy.stats.binomtest(...).proportion_ci(method="wilson")
    ref = stats.binomtest(x, n).proportion_ci(method="wilson")
    ours = wilson(x, n)
    assert (ours.lower, ours.upper) == pytest.approx((ref.low, ref.high), abs=1e-10)


def test_jeffreys_check_values():
    # docs/statistics.md (outside reference values) [C]: Jeffreys equal-tailed Beta(x+1/2, n-x+1/2).
    a = jeffreys(81, 263)
    assert (a.lower, a.upper) == pytest.approx((0.2545, 0.3656), abs=6e-5)
    b = jeffreys(18, 20)
    assert (b.lower, b.upper) == pytest.approx((0.716147, 0.978628), abs=1e-6)


# Newcombe (1998), Statistics in Medicine 17:873-890, Table II (method 10, hybrid
# score, transcribed [2]) and Agresti-Caffo ([C], matches a transcription).
NEWCOMBE_TABLE_II = [
    (56, 70, 48, 80, (0.0524, 0.3339), (0.0525, 0.3358)),
    (9, 10, 3, 10, (0.1705, 0.8090), (0.1600, 0.8400)),
    (6, 7, 2, 7, (0.0582, 0.8062), (0.0338, 0.8551)),
    (5, 56, 0, 29, (-0.0381, 0.1926), (-0.0289, 0.1712)),
    (0, 10, 0, 20, (-0.1611, 0.2775), (-0.1411, 0.2168)),
    (10, 10, 0, 20, (0.6791, 1.0), (0.6922, 1.0)),
]


@pytest.mark.parametrize(("x1", "n1", "x2", "n2", "hybrid", "ac"), NEWCOMBE_TABLE_II)
def test_difference_newcombe_1998_table_2(x1, n1, x2, n2, hybrid, ac):
    h = newcombe_hybrid(x1, n1, x2, n2)
    a = agresti_caffo(x1, n1, x2, n2)
    assert (h.lower, h.upper) == pytest.approx(hybrid, abs=6e-5)
    assert (a.lower, a.upper) == pytest.approx(ac, abs=6e-5)
    assert -1.0 <= a.lower <= a.upper <= 1.0


@pytest.mark.parametrize(("x1", "n1", "x2", "n2"), [r[:4] for r in NEWCOMBE_TABLE_II])
def test_hybrid_matches_statsmodels_newcomb(x1, n1, x2, n2):
    # Reference: statsmodels confint_proportions_2indep(method="newcomb").
    low, upp = confint_proportions_2indep(x1, n1, x2, n2, method="newcomb", compare="diff")
    h = newcombe_hybrid(x1, n1, x2, n2)
    assert (h.lower, h.upper) == pytest.approx((low, upp), abs=1e-8)


def test_agresti_caffo_is_clipped_where_statsmodels_is_not():
    # statsmodels' "agresti-caffo" gives an upper limit of 1.0502 for 10/10 - 0/20
    # (docs/statistics.md (outside reference values)); a difference of proportions cannot exceed 1.
    _, upp = confint_proportions_2indep(10, 10, 0, 20, method="agresti-caffo", compare="diff")
    assert upp > 1.0
    assert agresti_caffo(10, 10, 0, 20).upper == 1.0


def test_bad_counts_raise():
    with pytest.raises(ValueError, match="0 <= x <= n"):
        wilson(5, 3)
    with pytest.raises(ValueError, match="strictly between"):
        wilson(1, 3, prob=1.0)
