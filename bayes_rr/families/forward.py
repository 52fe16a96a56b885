"""Numpy pieces of the families' forward prior draws (the prior predictive check without
PyMC): each draws what the PyMC piece of the same name in ``pymc_parts`` defines, with
the same variable names and dims. Never imports PyMC.
"""

from __future__ import annotations

from typing import TYPE_CHECKING

import numpy as np

from bayes_rr.core.errors import SpecError
from bayes_rr.families.layout import APPRAISER_CORRELATION_ETA

if TYPE_CHECKING:
    from bayes_rr.core.distributions import Prior
    from bayes_rr.priors.spec import ModelSpec
    from bayes_rr.study.data import StudyData

EFFECT_DIMS = {"part": "part", "appraiser": "appraiser", "interaction": "cell"}
ORDERED_TRIES = 200
"""Rounds of redrawing out-of-order intercepts before the prior is declared unusable."""


def draw(prior: Prior, rng: np.random.Generator, shape: tuple[int, ...]) -> np.ndarray:
    return np.asarray(prior.scipy().rvs(size=shape, random_state=rng), dtype=float)


def sizes(study: StudyData) -> dict[str, int]:
    return {
        "part": len(study.parts),
        "appraiser": len(study.appraisers),
        "cell": len(study.cells),
        "status": 2,
    }


def group_effects(
    spec: ModelSpec, study: StudyData, rng: np.random.Generator, draws: int, names: tuple[str, ...]
) -> dict[str, tuple[tuple[str, ...], np.ndarray]]:
    """sigma_<term> and <term>_effect for the group terms ``names`` the spec has."""
    size = sizes(study)
    out: dict[str, tuple[tuple[str, ...], np.ndarray]] = {}
    for name in names:
        term = spec.term(name)
        if term is None or term.kind != "group":
            continue
        scale = draw(term.prior, rng, (draws,))
        dim = EFFECT_DIMS[name]
        effect = rng.standard_normal((draws, size[dim])) * scale[:, None]
        out[f"sigma_{name}"] = ((), scale)
        out[f"{name}_effect"] = ((dim,), effect)
    return out


def reference_effect(spec: ModelSpec, study: StudyData, rng, draws: int) -> dict:
    term = spec.term("reference")
    if term is None or study.reference is None:
        return {}
    return {"reference_effect": ((), draw(term.prior, rng, (draws,)))}


def status_intercepts(spec: ModelSpec, rng, draws: int, *, ordered: bool) -> np.ndarray:
    accept, reject = spec.status_intercepts  # type: ignore[misc]
    out = np.stack([draw(accept, rng, (draws,)), draw(reject, rng, (draws,))], axis=1)
    if not ordered:
        return out
    for _ in range(ORDERED_TRIES):
        bad = np.flatnonzero(out[:, 0] >= out[:, 1])
        if bad.size == 0:
            return out
        out[bad, 0] = draw(accept, rng, (bad.size,))
        out[bad, 1] = draw(reject, rng, (bad.size,))
    raise SpecError(
        f"{spec.source}: the intercept priors {accept.text()} (accept) and {reject.text()} "
        "(reject) almost never put the reject intercept above the accept one; the latent "
        "class family needs priors that allow that order (move the reject prior's mu up)"
    )


def appraiser_by_status(spec: ModelSpec, study: StudyData, rng, draws: int) -> dict:
    term = spec.term("appraiser")
    if term is None:
        return {}
    scales = draw(term.prior, rng, (draws, 2))
    rho = 2.0 * rng.beta(APPRAISER_CORRELATION_ETA, APPRAISER_CORRELATION_ETA, draws) - 1.0
    return {
        "sigma_appraiser": (("status",), scales),
        "appraiser_correlation": ((), rho),
        "appraiser_effect": (
            ("appraiser", "status"),
            correlated_appraiser_effects(scales, rho, len(study.appraisers), rng),
        ),
    }


def correlated_appraiser_effects(
    scales: np.ndarray, rho: np.ndarray, appraisers: int, rng: np.random.Generator
) -> np.ndarray:
    """(draws, appraiser, status) effects of new appraisers given each draw's two scales
    (draws, 2) and correlation (draws,), as ``pymc_parts.appraiser_by_status`` builds
    them."""
    z = rng.standard_normal((scales.shape[0], appraisers, 2))
    accept = scales[:, :1] * z[:, :, 0]
    reject = scales[:, 1:] * (rho[:, None] * z[:, :, 0] + np.sqrt(1 - rho**2)[:, None] * z[:, :, 1])
    return np.stack([accept, reject], axis=2)


def appraiser_curve_scales(
    spec: ModelSpec, rng, draws: int, appraisers: int
) -> tuple[dict, np.ndarray]:
    """Forward draws of ``pymc_parts.appraiser_curve_scales``: the variables drawn and the
    scales (draws, appraiser)."""
    log_width = draw(spec.intercept_prior("log_width_prior"), rng, (draws,))
    w_log = np.broadcast_to(log_width[:, None], (draws, appraisers))
    out = {"log_width_mean": ((), log_width)}
    if spec.has("width"):
        spread = draw(spec.term("width").prior, rng, (draws,))
        w_log = w_log + spread[:, None] * rng.standard_normal((draws, appraisers))
        out["sigma_width"] = ((), spread)
    return out, np.exp(w_log)
