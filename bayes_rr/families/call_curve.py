"""Calls along a measured reference value (family 5 of the statistical contract).

p_ij = sum over the limits k of F(d_k (x_i - t_jk) / w_j): each appraiser j places each
specification limit k at an effective limit t_jk and calls parts within about w_j of it
inconsistently (d_k = +1 for an upper limit, -1 for a lower one). F is the logistic or
the normal CDF (the spec's ``[curve] link``). Everything is fitted on the reference
values' own scale divided by their standard deviation s in the study, so the default
priors suit any unit: t_jk = L_k + s (beta_k + sigma_limit z_jk) and
w_j = s exp(omega + sigma_width u_j).
"""

from __future__ import annotations

from typing import TYPE_CHECKING

import numpy as np
import xarray as xr

from bayes_rr.core.errors import DataError
from bayes_rr.core.moments import log_binom_coef
from bayes_rr.families import forward
from bayes_rr.families.base import (
    CallNodes,
    Family,
    HyperParameter,
    LatentDraws,
    cell_index,
    cell_memory,
    draws_of,
    optional_draws,
    term_hyper_parameters,
)
from bayes_rr.families.curves import (
    Production,
    curve_probabilities,
    known_status,
    production_nodes,
    ten_ninety_factor,
)
from bayes_rr.families.layout import coords, curve_design
from bayes_rr.families.status import called_mask, study_rates
from bayes_rr.families.terms import FamilyInfo, TermInfo, prior

if TYPE_CHECKING:
    import pymc as pm

    from bayes_rr.priors.spec import ModelSpec
    from bayes_rr.study.data import StudyData

# Call curve: everything on the scale of the reference values standardised by their
# standard deviation in the study (so the defaults suit any unit).
LIMIT_TERM = TermInfo(
    "limit",
    "group",
    prior("half_normal", sigma=0.25),
    "half_normal(0.25) on the spread of appraisers' effective limits, in standard "
    "deviations of the study's reference values: appraisers rarely place the limit more "
    "than half the parts' spread apart.",
)
WIDTH_TERM = TermInfo(
    "width",
    "group",
    prior("half_normal", sigma=0.5),
    "half_normal(0.5) on the spread of appraisers' log transition widths: one appraiser's "
    "zone of inconsistent calls may be a few times another's.",
)
CURVE_INTERCEPTS = {
    "bias_prior": prior("normal", mu=0.0, sigma=0.5),
    "log_width_prior": prior("normal", mu=-2.0, sigma=1.0),
}
CURVE_INTERCEPTS_WHY = (
    "normal(0, 0.5) on the typical appraiser's bias (effective limit minus the limit) in "
    "standard deviations of the reference values; normal(-2, 1) on the log of the typical "
    "curve scale w in the same units (median 0.14 sd, 95% range 0.02 to 0.95 sd; the "
    "transition width, 10% to 90% reject, is 4.39 w for the logistic)."
)
LINKS = ("logistic", "probit")

INFO = FamilyInfo(
    "call_curve",
    "call curve: p_ij = F((x_i - t_j)/w_j) for a measured reference value x_i and a "
    "specification limit, with each appraiser's effective limit t_j and transition "
    "width w_j (docs/statistics.md family 5)",
    {t.name: t for t in (LIMIT_TERM, WIDTH_TERM)},
    intercepts=CURVE_INTERCEPTS,
    links=LINKS,
    needs=("reference_value",),
)
SCALE_VARIABLES = {"limit": "sigma_limit", "width": "sigma_width"}

CURVE_SCALE = "curve_scale"
"""The posterior variable of each appraiser's w_j, the scale of F's argument (fits
written before it had its own name called it ``transition_width``)."""


def curve_scale_draws(posterior: xr.Dataset) -> np.ndarray:
    """(S, appraiser) draws of w_j, from a fit of any version."""
    return draws_of(posterior, CURVE_SCALE if CURVE_SCALE in posterior else "transition_width")


P_FLOOR = 1e-12
"""Call probabilities are kept in [P_FLOOR, 1 - P_FLOOR] in the likelihood (two limits'
curves add up; a part far outside either limit would otherwise give log 0)."""


def link_cdf(link: str, value):
    """F of the call curve, on PyTensor tensors."""
    import pymc as pm
    import pytensor.tensor as pt

    if link == "probit":
        return 0.5 * pt.erfc(-value / np.sqrt(2.0))
    return pm.math.sigmoid(value)


def build(spec: ModelSpec, study: StudyData) -> pm.Model:
    import pymc as pm
    import pytensor.tensor as pt

    from bayes_rr.families.pymc_parts import appraiser_curve_scales, observed_calls, pymc_prior

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
        w_std = appraiser_curve_scales(spec, len(study.appraisers))
        pm.Deterministic(CURVE_SCALE, s * w_std, dims="appraiser")
        # standardised distance of each cell's part from each limit
        distance = (x[part][:, None] - limits[None, :]) / s
        p = 0.0
        for k in range(len(sides)):
            p = p + link_cdf(spec.link, signs[k] * (distance[:, k] - t_std[app, k]) / w_std[app])
        pm.Binomial("s", n=cells["n"].to_numpy(), p=pt.clip(p, P_FLOOR, 1 - P_FLOOR),
                    observed=observed_calls(study), dims="cell")  # fmt: skip
    return model


def prior_draws(spec: ModelSpec, study: StudyData, rng: np.random.Generator, draws: int):
    design = curve_design(study, spec.name)
    limits = np.array([value for _, value, _ in design["sides"]])
    s = design["scale"]
    n_app, n_side = len(study.appraisers), limits.size
    bias = forward.draw(spec.intercept_prior("bias_prior"), rng, (draws, n_side))
    t_std = np.broadcast_to(bias[:, None, :], (draws, n_app, n_side))
    out = {"bias_mean": (("side",), bias)}
    if spec.has("limit"):
        spread = forward.draw(spec.term("limit").prior, rng, (draws,))
        t_std = t_std + spread[:, None, None] * rng.standard_normal((draws, n_app, n_side))
        out["sigma_limit"] = ((), spread)
    out["effective_limit"] = (("appraiser", "side"), limits + s * t_std)
    drawn, scales = forward.appraiser_curve_scales(spec, rng, draws, n_app)
    out.update(drawn)
    out[CURVE_SCALE] = (("appraiser",), s * scales)
    return out


def latent(posterior: xr.Dataset, spec, study: StudyData, rng=None) -> LatentDraws:
    """Call curves: call probabilities of the study's parts, the limits and widths per
    appraiser and for the population, and the study-scope false reject and false accept
    rates of the study's parts (whose status the measured value gives)."""
    design = curve_design(study, spec.name)
    limits = np.array([value for _, value, _ in design["sides"]])
    signs = np.array([sign for _, _, sign in design["sides"]])
    scale = design["scale"]
    limit = draws_of(posterior, "effective_limit")  # (S, appraiser, side)
    width = curve_scale_draws(posterior)  # (S, appraiser)
    ten_ninety = ten_ninety_factor(spec.link)
    p = curve_probabilities(limit, width, design["x"], signs, spec.link)
    cells = study.cells
    part, app = cells["part_index"].to_numpy(), cells["appraiser_index"].to_numpy()
    n, k = cells["n"].to_numpy(), cells["s"].to_numpy()
    p_cell = np.clip(p[:, part, app], 1e-12, 1 - 1e-12)
    log_lik = log_binom_coef(n, k) + k * np.log(p_cell) + (n - k) * np.log1p(-p_cell)
    bias_mean = draws_of(posterior, "bias_mean")  # (S, side), standardised
    spread = optional_draws(posterior, "sigma_limit", bias_mean.shape[:1])
    log_width = draws_of(posterior, "log_width_mean")
    side = ("appraiser", "side")
    extra = {
        ("study", "appraiser", "effective_limit"): (limit, side),
        ("study", "appraiser", "bias"): (limit - limits, side),
        ("study", "appraiser", "transition_width"): (ten_ninety * width, "appraiser"),
        ("study", "system", "bias"): ((limit - limits).mean(axis=1), "side"),
        ("study", "system", "limit_spread"): (limit.std(axis=1), "side"),
        ("study", "system", "transition_width"): (ten_ninety * width.mean(axis=1), None),
        ("population", "system", "effective_limit"): (limits + scale * bias_mean, "side"),
        ("population", "system", "bias"): (scale * bias_mean, "side"),
        ("population", "system", "limit_spread"): (scale * spread, None),
        ("population", "system", "transition_width"): (
            ten_ninety * scale * np.exp(log_width),
            None,
        ),
    }
    extra.update(_study_wrong_calls(p, design["x"], limits, signs, called_mask(study)))
    return LatentDraws(p, {}, log_lik, extra)


def _study_wrong_calls(p, x, limits, signs, called=None) -> dict:
    """Study-scope false reject / false accept rates of the study's parts, whose status
    the measured value and the limit give (docs/statistics.md, scopes); a rate whose
    status no study part has is left out."""
    bad = known_status(x, limits, signs)
    rates = study_rates(p, p, np.broadcast_to(bad, p.shape[:2]), called)
    keep = {"reference_agreement"}
    if (bad == 0).any():
        keep.add("false_reject_rate")
    if (bad == 1).any():
        keep.add("false_accept_rate")
    return {
        ("study", level, key): (values, "appraiser" if level == "appraiser" else None)
        for level, keys in rates.items()
        for key, values in keys.items()
        if key in keep
    }


def production_calls(
    posterior: xr.Dataset, spec, study: StudyData, mix, guard: float = 0.0
) -> CallNodes:
    """The study's appraisers on production parts: nodes over the production distribution
    of the measured value, split at the limits into good and bad parts. ``guard`` moves
    the gauge's limits inward by that much (a guard band), and each appraiser's effective
    limits with them; the parts' status still follows the specification limits."""
    if not mix.has_measured:
        raise DataError(
            f"{mix.source}: the call-curve model needs the distribution of the measured value "
            "in production (mean and sd, or values), not a bad share"
        )
    design = curve_design(study, spec.name)
    limits = np.array([value for _, value, _ in design["sides"]])
    signs = np.array([sign for _, _, sign in design["sides"]])
    production = Production(mix.mean, mix.sd, mix.values)
    limit = draws_of(posterior, "effective_limit") - guard * signs
    width = curve_scale_draws(posterior)
    try:
        return production_nodes(limit, width, limits, signs, spec.link, production)
    except ValueError:
        raise DataError(
            f"{mix.source}: under this distribution every production part is on one side of "
            "the limit; check its mean, sd or values against the limit"
        ) from None


def cell_probabilities(posterior: xr.Dataset, spec, study: StudyData, rng) -> np.ndarray:
    part, app = cell_index(study)
    return latent(posterior, spec, study).p_study[:, part, app]


def hyper_parameters(spec: ModelSpec):
    intercepts = [
        HyperParameter(variable, ("intercept", key), spec.intercept_prior(key))
        for variable, key in (("bias_mean", "bias_prior"), ("log_width_mean", "log_width_prior"))
    ]
    return (*intercepts, *term_hyper_parameters(spec, SCALE_VARIABLES))


def guard_scale(spec, study: StudyData) -> float:
    """The measured values' spread in the study: the scale a guard band is searched on."""
    return curve_design(study, spec.name)["scale"]


FAMILY = Family(
    info=INFO,
    build=build,
    prior_draws=prior_draws,
    latent=latent,
    cell_probabilities=cell_probabilities,
    hyper_parameters=hyper_parameters,
    memory_per_draw=cell_memory,
    appraiser_rows=True,
    production_calls=production_calls,
    guard_band_scale=guard_scale,
    simulated=True,
    simulated_parts="values",
    default_plan_target="study__system__false_accept_rate",
)
