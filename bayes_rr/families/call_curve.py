"""Family 5 of estimands.md: calls along a measured reference value.

p_ij = sum over the limits k of F(d_k (x_i - t_jk) / w_j): each appraiser j places each
specification limit k at an effective limit t_jk and calls parts within about w_j of it
inconsistently (d_k = +1 for an upper limit, -1 for a lower one). F is the logistic or
the normal CDF (the spec's ``[curve] link``). Everything is fitted on the reference
values' own scale divided by their standard deviation s in the study, so the default
priors suit any unit: t_jk = L_k + s (beta_k + sigma_limit z_jk) and
w_j = s exp(omega + sigma_width u_j).
"""

from __future__ import annotations

import numpy as np
import pymc as pm
import pytensor.tensor as pt

from bayes_rr.data import StudyData
from bayes_rr.families.common import observed_calls, pymc_prior
from bayes_rr.families.layout import coords, curve_design
from bayes_rr.spec import ModelSpec

P_FLOOR = 1e-12
"""Call probabilities are kept in [P_FLOOR, 1 - P_FLOOR] in the likelihood (two limits'
curves add up; a part far outside either limit would otherwise give log 0)."""


def link_cdf(link: str, value):
    """F of the call curve, on PyTensor tensors."""
    if link == "probit":
        return 0.5 * pt.erfc(-value / np.sqrt(2.0))
    return pm.math.sigmoid(value)


def build(spec: ModelSpec, study: StudyData) -> pm.Model:
    design = curve_design(study, spec.name)
    sides, x, s = design["sides"], design["x"], design["scale"]
    cells = study.cells
    part = cells["part_index"].to_numpy()
    app = cells["appraiser_index"].to_numpy()
    limits = np.array([value for _, value, _ in sides])
    signs = np.array([sign for _, _, sign in sides])
    model_coords = {**coords(study), "side": [name for name, _, _ in sides]}
    with pm.Model(coords=model_coords) as model:
        bias = pymc_prior("bias_mean", spec.intercept_prior("bias_prior"), dims="side")
        t_std = bias[None, :]
        if spec.has("limit"):
            spread = pymc_prior("sigma_limit", spec.term("limit").prior)
            z = pm.Normal("limit_z", 0.0, 1.0, dims=("appraiser", "side"))
            t_std = t_std + spread * z
        else:
            t_std = pt.repeat(t_std, len(study.appraisers), axis=0)
        pm.Deterministic("effective_limit", limits[None, :] + s * t_std,
                         dims=("appraiser", "side"))  # fmt: skip
        log_width = pymc_prior("log_width_mean", spec.intercept_prior("log_width_prior"))
        w_std = pt.exp(log_width) * pt.ones(len(study.appraisers))
        if spec.has("width"):
            width_spread = pymc_prior("sigma_width", spec.term("width").prior)
            u = pm.Normal("width_z", 0.0, 1.0, dims="appraiser")
            w_std = pt.exp(log_width + width_spread * u)
        pm.Deterministic("transition_width", s * w_std, dims="appraiser")
        # standardised distance of each cell's part from each limit
        distance = (x[part][:, None] - limits[None, :]) / s
        p = 0.0
        for k in range(len(sides)):
            p = p + link_cdf(spec.link, signs[k] * (distance[:, k] - t_std[app, k]) / w_std[app])
        pm.Binomial("s", n=cells["n"].to_numpy(), p=pt.clip(p, P_FLOOR, 1 - P_FLOOR),
                    observed=observed_calls(study), dims="cell")  # fmt: skip
    return model
