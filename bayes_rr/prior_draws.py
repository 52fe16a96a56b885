"""Draws from a spec's prior, in numpy: the prior predictive check without PyMC.

Each family's parameters are drawn forward, with the names, dimensions and
parameterisation the family builders give them (``bayes_rr.families``), so that the
estimands read prior draws exactly as they read posterior draws. The tests compare
these draws with ``pymc.sample_prior_predictive`` of the built model, variable by
variable. This module never imports PyMC.

One deliberate difference: the latent class family orders its two intercepts
(reject above accept). The prior density it samples is the normal pair restricted to
that order; PyMC's forward draws ignore the order, so here draws out of order are
rejected and drawn again.
"""

from __future__ import annotations

import numpy as np
import xarray as xr

from bayes_rr.data import StudyData
from bayes_rr.errors import SpecError
from bayes_rr.families.layout import APPRAISER_CORRELATION_ETA, coords, curve_design
from bayes_rr.priors import Prior
from bayes_rr.spec import ModelSpec

EFFECT_DIMS = {"part": "part", "appraiser": "appraiser", "interaction": "cell"}
ORDERED_TRIES = 200
"""Rounds of redrawing out-of-order intercepts before the prior is declared unusable."""


def _draw(prior: Prior, rng: np.random.Generator, shape: tuple[int, ...]) -> np.ndarray:
    return np.asarray(prior.scipy().rvs(size=shape, random_state=rng), dtype=float)


def _sizes(study: StudyData) -> dict[str, int]:
    return {
        "part": len(study.parts),
        "appraiser": len(study.appraisers),
        "cell": len(study.cells),
        "status": 2,
    }


def _group_effects(
    spec: ModelSpec, study: StudyData, rng: np.random.Generator, draws: int, names: tuple[str, ...]
) -> dict[str, tuple[tuple[str, ...], np.ndarray]]:
    """sigma_<term> and <term>_effect for the group terms ``names`` the spec has."""
    sizes = _sizes(study)
    out: dict[str, tuple[tuple[str, ...], np.ndarray]] = {}
    for name in names:
        term = spec.term(name)
        if term is None or term.kind != "group":
            continue
        scale = _draw(term.prior, rng, (draws,))
        dim = EFFECT_DIMS[name]
        effect = rng.standard_normal((draws, sizes[dim])) * scale[:, None]
        out[f"sigma_{name}"] = ((), scale)
        out[f"{name}_effect"] = ((dim,), effect)
    return out


def _reference_effect(spec: ModelSpec, study: StudyData, rng, draws: int) -> dict:
    term = spec.term("reference")
    if term is None or study.reference is None:
        return {}
    return {"reference_effect": ((), _draw(term.prior, rng, (draws,)))}


def _status_intercepts(spec: ModelSpec, rng, draws: int, *, ordered: bool) -> np.ndarray:
    accept, reject = spec.status_intercepts  # type: ignore[misc]
    out = np.stack([_draw(accept, rng, (draws,)), _draw(reject, rng, (draws,))], axis=1)
    if not ordered:
        return out
    for _ in range(ORDERED_TRIES):
        bad = np.flatnonzero(out[:, 0] >= out[:, 1])
        if bad.size == 0:
            return out
        out[bad, 0] = _draw(accept, rng, (bad.size,))
        out[bad, 1] = _draw(reject, rng, (bad.size,))
    raise SpecError(
        f"{spec.source}: the intercept priors {accept.text()} (accept) and {reject.text()} "
        "(reject) almost never put the reject intercept above the accept one; the latent "
        "class family needs priors that allow that order (move the reject prior's mu up)"
    )


def _appraiser_by_status(spec: ModelSpec, study: StudyData, rng, draws: int) -> dict:
    term = spec.term("appraiser")
    if term is None:
        return {}
    n_app = len(study.appraisers)
    scales = _draw(term.prior, rng, (draws, 2))
    rho = 2.0 * rng.beta(APPRAISER_CORRELATION_ETA, APPRAISER_CORRELATION_ETA, draws) - 1.0
    z = rng.standard_normal((draws, n_app, 2))
    accept = scales[:, :1] * z[:, :, 0]
    reject = scales[:, 1:] * (rho[:, None] * z[:, :, 0] + np.sqrt(1 - rho**2)[:, None] * z[:, :, 1])
    return {
        "sigma_appraiser": (("status",), scales),
        "appraiser_correlation": ((), rho),
        "appraiser_effect": (("appraiser", "status"), np.stack([accept, reject], axis=2)),
    }


def _logit(spec, study, rng, draws):
    out = {"intercept": ((), _draw(spec.intercept, rng, (draws,)))}
    out.update(_group_effects(spec, study, rng, draws, ("part", "appraiser", "interaction")))
    out.update(_reference_effect(spec, study, rng, draws))
    return out


def _beta_binomial(spec, study, rng, draws):
    out = {"intercept": ((), _draw(spec.intercept, rng, (draws,)))}
    out.update(_group_effects(spec, study, rng, draws, ("part",)))
    out.update(_reference_effect(spec, study, rng, draws))
    if spec.concentration.sharing == "per_part":
        out["rho"] = (("part",), _draw(spec.concentration.prior, rng, (draws, len(study.parts))))
    else:
        out["rho"] = ((), _draw(spec.concentration.prior, rng, (draws,)))
    return out


def _reference_logit(spec, study, rng, draws):
    out = {"intercept": (("status",), _status_intercepts(spec, rng, draws, ordered=False))}
    out.update(_group_effects(spec, study, rng, draws, ("part",)))
    out.update(_appraiser_by_status(spec, study, rng, draws))
    out.update(_group_effects(spec, study, rng, draws, ("interaction",)))
    return out


def _latent_class(spec, study, rng, draws):
    out = {"intercept": (("status",), _status_intercepts(spec, rng, draws, ordered=True))}
    out["prevalence"] = ((), _draw(spec.prevalence, rng, (draws,)))
    out.update(_appraiser_by_status(spec, study, rng, draws))
    if spec.has("part"):
        out["sigma_part"] = ((), _draw(spec.term("part").prior, rng, (draws,)))
    return out


def _call_curve(spec, study, rng, draws):
    design = curve_design(study, spec.name)
    limits = np.array([value for _, value, _ in design["sides"]])
    s = design["scale"]
    n_app, n_side = len(study.appraisers), limits.size
    bias = _draw(spec.intercept_prior("bias_prior"), rng, (draws, n_side))
    t_std = np.broadcast_to(bias[:, None, :], (draws, n_app, n_side))
    out = {"bias_mean": (("side",), bias)}
    if spec.has("limit"):
        spread = _draw(spec.term("limit").prior, rng, (draws,))
        t_std = t_std + spread[:, None, None] * rng.standard_normal((draws, n_app, n_side))
        out["sigma_limit"] = ((), spread)
    out["effective_limit"] = (("appraiser", "side"), limits + s * t_std)
    log_width = _draw(spec.intercept_prior("log_width_prior"), rng, (draws,))
    w_log = np.broadcast_to(log_width[:, None], (draws, n_app))
    if spec.has("width"):
        spread = _draw(spec.term("width").prior, rng, (draws,))
        w_log = w_log + spread[:, None] * rng.standard_normal((draws, n_app))
        out["sigma_width"] = ((), spread)
    out["log_width_mean"] = ((), log_width)
    out["transition_width"] = (("appraiser",), s * np.exp(w_log))
    return out


FAMILIES = {
    "logit": _logit,
    "beta_binomial": _beta_binomial,
    "reference_logit": _reference_logit,
    "latent_class": _latent_class,
    "call_curve": _call_curve,
}


def draw_prior(spec: ModelSpec, study: StudyData, draws: int, seed: int) -> xr.Dataset:
    """``draws`` draws of the stated priors of ``spec`` on ``study``'s design, one chain.

    The earlier-study factors of a spec are not drawn here (``checks.prior_predictive``
    resamples these draws with the factors as weights).
    """
    if spec.family not in FAMILIES:
        raise SpecError(f"{spec.source}: no prior draws for family {spec.family!r}")
    rng = np.random.default_rng([seed, 11])
    variables = FAMILIES[spec.family](spec, study, rng, draws)
    names = coords(study)
    data_vars = {}
    for name, (dims, values) in variables.items():
        data_vars[name] = (("chain", "draw", *dims), np.asarray(values)[None])
    ds = xr.Dataset(data_vars, coords={"chain": [0], "draw": np.arange(draws)})
    used = {d for dims, _ in variables.values() for d in dims}
    extra = {d: names[d] for d in used if d in names}
    if "side" in used:
        extra["side"] = [name for name, _, _ in curve_design(study, spec.name)["sides"]]
    return ds.assign_coords(extra)
