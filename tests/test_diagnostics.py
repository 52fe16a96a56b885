"""Vectorised r_hat, ESS and HDI against ArviZ (az.rhat, az.ess, az.hdi) as the reference."""

import arviz as az
import numpy as np
import pytest
from scipy import stats

from bayes_rr.core.diagnostics import average_ranks, diagnose, ess_bulk, ess_tail, hdi, rhat


@pytest.fixture(scope="module")
def chains():
    rng = np.random.default_rng(0)
    m, n, k = 4, 400, 24
    x = np.zeros((m, n, k))
    phi = rng.uniform(-0.5, 0.97, k)
    for t in range(1, n):
        x[:, t] = phi * x[:, t - 1] + rng.normal(size=(m, k))
    x[:, :, 3] += np.arange(m)[:, None] * 0.4  # chains that disagree
    x[:, :, 5] = np.exp(x[:, :, 5])  # skewed
    x[:, :, 7] = np.round(x[:, :, 7])  # many ties
    x[:, :, 8] = 1.0  # constant
    return x


def test_rhat_matches_arviz(chains):
    ours = rhat(chains)
    with np.errstate(invalid="ignore"):  # ArviZ divides 0/0 for the constant column
        ref = np.array([az.rhat(chains[:, :, k]) for k in range(chains.shape[2])])
    np.testing.assert_allclose(ours, ref, rtol=1e-10, equal_nan=True)
    assert ours[3] > 1.01  # the disagreeing chains are caught


@pytest.mark.parametrize(("ours", "method"), [(ess_bulk, "bulk"), (ess_tail, "tail")])
def test_ess_matches_arviz(chains, ours, method):
    ref = np.array([az.ess(chains[:, :, k], method=method) for k in range(chains.shape[2])])
    np.testing.assert_allclose(ours(chains), ref, rtol=1e-8)


def test_hdi_matches_arviz(chains):
    low, high = hdi(chains, 0.9)
    for k in (0, 5, 7):
        ref = az.hdi(chains[:, :, k].ravel(), hdi_prob=0.9)
        assert (low[k], high[k]) == pytest.approx(tuple(ref), abs=1e-12)


def test_average_ranks_match_scipy_rankdata():
    # Reference: scipy.stats.rankdata; columns without ties, with many ties, constant.
    data = np.random.default_rng(1).normal(size=(500, 9))
    data[:, 4:] = np.round(data[:, 4:], 1)
    data[:, 2] = 3.0
    data[10, 0] = data[20, 0]  # a single tie in an otherwise continuous column
    data[:, 1] = np.abs(data[:, 1] - np.median(data[:, 1]))  # folded: the middle two tie
    data[:, 3] = np.arange(500) % 200  # 200 tied runs: the rankdata path
    expected = stats.rankdata(data, method="average", axis=0)
    np.testing.assert_array_equal(average_ranks(data), expected)


def test_diagnose_equals_the_separate_functions(chains):
    # the same algorithm; sums in another order move the last digits only
    r, b, t = diagnose(chains)
    np.testing.assert_allclose(r, rhat(chains), rtol=1e-12, equal_nan=True)
    np.testing.assert_allclose(b, ess_bulk(chains), rtol=1e-12)
    np.testing.assert_allclose(t, ess_tail(chains), rtol=1e-12)


def test_one_sort_gives_numpys_median_and_quantiles(chains):
    # Reference: numpy.median and numpy.quantile (default linear rule), for an even and
    # an odd number of draws (the odd one takes the two-sort path).
    from bayes_rr.core.diagnostics import describe_draws

    probs = [0.025, 0.05, 0.5, 0.975]
    for draws in (chains, chains[:, :399]):
        flat = draws.reshape(-1, draws.shape[2])
        described = describe_draws(draws, probs)
        np.testing.assert_array_equal(described["median"], np.median(flat, axis=0))
        np.testing.assert_array_equal(described["quantiles"], np.quantile(flat, probs, axis=0))
        r, b, t = rhat(draws), ess_bulk(draws), ess_tail(draws)
        np.testing.assert_allclose(described["r_hat"], r, rtol=1e-12, equal_nan=True)
        np.testing.assert_allclose(described["ess_bulk"], b, rtol=1e-12)
        np.testing.assert_allclose(described["ess_tail"], t, rtol=1e-12)


def test_rank_scores_are_normal_scores_of_scipy_ranks():
    # Reference: scipy.special.ndtri of Blom's (r - 3/8) / (N + 1/4) with
    # scipy.stats.rankdata's average ranks, of the draws and of |draws - median|.
    from scipy.special import ndtri

    from bayes_rr.core.kernels import rank_scores

    rows = np.random.default_rng(4).normal(size=(5, 300))
    rows[1] = np.round(rows[1], 1)
    rows[2] = 2.0
    rows[3, :150] = rows[3, 150:]  # every value twice
    size = rows.shape[1]
    scores, folded, median, _ = rank_scores(rows, np.array([0.5]))
    for c, row in enumerate(rows):
        blom = ndtri((stats.rankdata(row) - 3 / 8) / (size + 1 / 4))
        np.testing.assert_array_equal(scores[c], blom)
        distance = np.abs(row - np.median(row))
        blom = ndtri((stats.rankdata(distance) - 3 / 8) / (size + 1 / 4))
        np.testing.assert_array_equal(folded[c], blom)
    np.testing.assert_array_equal(median, np.median(rows, axis=1))
