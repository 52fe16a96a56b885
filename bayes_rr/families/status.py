"""Pieces the two status families share (reference-logit and latent-class): the
wrong-call rates of the statistical contract from call probabilities per status, the
parameters per status as arrays, and their hyper-parameters. Never imports PyMC.

The rates:

* ``false_reject_rate``: P(reject call | the part's status is accept);
* ``false_accept_rate``: P(accept call | the part's status is reject);
* ``reference_agreement``: P(the call matches the part's status);

per appraiser (level ``appraiser``) and for the system (level ``system``: the
study's appraisers together, or a new appraiser), in scope ``study`` (the study's
appraisers and the study's parts of that status) and ``population`` (a new part of
that status; at level ``system`` also a new appraiser). With a known reference the
study's parts of a status are known; in the latent class model each part counts
with its posterior probability of being of that status in the draw.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np
import xarray as xr

from bayes_rr.families import forward
from bayes_rr.families.base import (
    CallNodes,
    draws_of,
    optional_draws,
    status_intercept_hypers,
    term_hyper_parameters,
)

if TYPE_CHECKING:
    from bayes_rr.priors.spec import ModelSpec
    from bayes_rr.study.data import StudyData

STATEMENTS = (
    "false_reject_rate",
    "false_accept_rate",
    "appraiser_difference",
    "repeat_disagreement",
)
"""The statement kinds of ``bayes-rr prior`` the status families take."""
PER_STATUS_SCALES = ("sigma_appraiser",)
"""Variables with one prior for both statuses but a value per status."""


def called_mask(study) -> np.ndarray:
    """(part, appraiser): whether the appraiser called the part at least once."""
    mask = np.zeros((len(study.parts), len(study.appraisers)))
    cells = study.cells
    mask[cells["part_index"].to_numpy(), cells["appraiser_index"].to_numpy()] = 1.0
    return mask


def study_rates(
    p_if_accept: np.ndarray,
    p_if_reject: np.ndarray,
    reject_weight: np.ndarray,
    called: np.ndarray | None = None,
) -> dict[str, dict[str, np.ndarray]]:
    """Study-scope rates per appraiser and for the system.

    ``p_if_accept``/``p_if_reject`` (S, part, appraiser): the call probability of each
    part were it of that status; ``reject_weight`` (S, part): the part's probability
    of being a reject part in the draw (0/1 with a known reference); ``called`` (part,
    appraiser): which parts each appraiser called (an appraiser's rate averages over
    those only, docs/statistics.md, wrong-call rates by scope; default: all). The
    system rate is the mean of the appraisers' rates. Returns
    ``{"appraiser": {key: (S, appraiser)}, "system": {key: (S,)}}``.
    """
    mask = 1.0 if called is None else np.asarray(called, dtype=float)[None]
    w1 = reject_weight[:, :, None] * mask
    w0 = (1.0 - reject_weight[:, :, None]) * mask
    with np.errstate(invalid="ignore", divide="ignore"):
        frr = (w0 * p_if_accept).sum(axis=1) / w0.sum(axis=1)
        far = (w1 * (1.0 - p_if_reject)).sum(axis=1) / w1.sum(axis=1)
    with np.errstate(invalid="ignore", divide="ignore"):
        agree = (w0 * (1.0 - p_if_accept) + w1 * p_if_reject).sum(axis=1) / (w0 + w1).sum(axis=1)
    per_appraiser = {"false_reject_rate": frr, "false_accept_rate": far,
                     "reference_agreement": agree}  # fmt: skip
    return {
        "appraiser": per_appraiser,
        "system": {k: v.mean(axis=1) for k, v in per_appraiser.items()},
    }


def population_rates(
    intercept: np.ndarray,
    appraiser_effect: np.ndarray,
    sigma_part: np.ndarray,
    sigma_appraiser: np.ndarray,
    sigma_interaction: np.ndarray,
    reject_share: np.ndarray,
) -> dict[str, dict[str, np.ndarray]]:
    """Population-scope rates: a new part of each status (and, for the system, a new
    appraiser), by Gauss-Hermite quadrature of the logistic-normal mean.

    ``intercept`` (S, 2) per status (accept, reject); ``appraiser_effect`` (S, J, 2);
    ``sigma_part``, ``sigma_interaction`` (S,); ``sigma_appraiser`` (S, 2);
    ``reject_share`` (S,) or scalar: the share of reject parts that weighs the
    agreement (the study's share with a reference, the prevalence without one).
    """
    from bayes_rr.core.moments import logistic_normal_moments

    within = np.sqrt(sigma_part**2 + sigma_interaction**2)
    q = np.broadcast_to(np.asarray(reject_share, dtype=float), intercept.shape[:1])
    out: dict[str, dict[str, np.ndarray]] = {"appraiser": {}, "system": {}}
    rate_if = {}
    for status in (0, 1):
        eta_j = intercept[:, status, None] + appraiser_effect[:, :, status]
        rate_if[("appraiser", status)] = logistic_normal_moments(eta_j, within)[0]
        total = np.sqrt(within**2 + sigma_appraiser[:, status] ** 2)
        rate_if[("system", status)] = logistic_normal_moments(intercept[:, status], total)[0]
    for level in ("appraiser", "system"):
        frr = rate_if[(level, 0)]
        far = 1.0 - rate_if[(level, 1)]
        share = q[:, None] if level == "appraiser" else q
        out[level] = {
            "false_reject_rate": frr,
            "false_accept_rate": far,
            "reference_agreement": (1 - share) * (1 - frr) + share * (1 - far),
        }
    return out


def rate_variables(rates: dict) -> dict:
    """``{scope: {level: {key: draws}}}`` as estimand variables
    ``(scope, level, key) -> (draws, dim or None)``."""
    return {
        (scope, level, key): (values, "appraiser" if level == "appraiser" else None)
        for scope, levels in rates.items()
        for level, keys in levels.items()
        for key, values in keys.items()
    }


@dataclass(frozen=True)
class StatusDraws:
    """Per-draw parameters of a status model, as arrays (S = draws)."""

    intercept: np.ndarray  # (S, 2)
    part_effect: np.ndarray  # (S, part)
    appraiser_effect: np.ndarray  # (S, appraiser, 2)
    sigma_part: np.ndarray  # (S,)
    sigma_appraiser: np.ndarray  # (S, 2)
    sigma_interaction: np.ndarray  # (S,)


def status_draws(posterior: xr.Dataset, study: StudyData) -> StatusDraws:
    intercept = draws_of(posterior, "intercept")
    s = intercept.shape[0]
    n_parts, n_app = len(study.parts), len(study.appraisers)
    return StatusDraws(
        intercept,
        optional_draws(posterior, "part_effect", (s, n_parts)),
        optional_draws(posterior, "appraiser_effect", (s, n_app, 2)),
        optional_draws(posterior, "sigma_part", (s,)),
        optional_draws(posterior, "sigma_appraiser", (s, 2)),
        optional_draws(posterior, "sigma_interaction", (s,)),
    )


def hyper_parameters(spec: ModelSpec):
    return (*status_intercept_hypers(spec), *term_hyper_parameters(spec))


def appraiser_prior_draws(spec: ModelSpec, study: StudyData, rng, draws: int) -> dict:
    return forward.appraiser_by_status(spec, study, rng, draws)


PART_RULE_STEP = 0.2
PART_RULE_HALF_WIDTH = 7.0
"""The rule over a part's effect a = sigma_part u in a likelihood (the latent class model
and the fallible reference): the trapezoid rule on u in [-7, 7], step 0.2 (71 nodes;
beyond 7 the normal mass is 3e-12). A part's calls make its likelihood in u as narrow as
about 0.5 / sigma_part, which Gauss-Hermite rules resolve badly, their nodes being widest
at the centre: against nested scipy.integrate.quad, for 18 calls with a mixed pattern,
24 Gauss-Hermite nodes were off by 0.1 in the log at sigma_part 2 and by 0.4 at 3, 64
nodes by 0.005 at 3; this rule by 1e-5 at 3 and 0.01 at 5 (tests/test_fallible_reference.py,
tests/test_latent_class_quadrature.py). The trapezoid rule converges geometrically here:
the logistic factors' poles lie pi off the real axis whatever the number of calls."""


def part_effect_rule() -> tuple[np.ndarray, np.ndarray]:
    """Nodes u and log weights of :data:`PART_RULE_STEP`'s trapezoid rule for E[f(U)],
    U ~ N(0, 1)."""
    u = np.arange(-PART_RULE_HALF_WIDTH, PART_RULE_HALF_WIDTH + PART_RULE_STEP / 2, PART_RULE_STEP)
    return u, -0.5 * u * u - 0.5 * np.log(2 * np.pi) + np.log(PART_RULE_STEP)


PART_NODES = 32
"""Gauss-Hermite nodes over a production part's effect within its status."""
INTERACTION_NODES = 16
"""Gauss-Hermite nodes over the appraiser-by-part effect of a production part. With the
part nodes, the rates of every strategy agree with adaptive quadrature
(``scipy.integrate``) to 1e-6 for scales up to 3 (tests/test_production.py)."""


def normal_nodes(count: int) -> tuple[np.ndarray, np.ndarray]:
    """Nodes and weights (summing to 1) of the standard normal, Gauss-Hermite."""
    from numpy.polynomial.hermite_e import hermegauss

    x, w = hermegauss(count)
    return x, w / w.sum()


def production_calls(posterior: xr.Dataset, spec, study: StudyData, mix) -> CallNodes:
    """The study's appraisers on production parts of each status (docs/statistics.md,
    "A production part and its calls"): logit p = mu_r + b_jr + u + v."""
    from scipy.special import expit

    d = status_draws(posterior, study)
    u, wu = normal_nodes(PART_NODES) if "sigma_part" in posterior else (np.zeros(1), np.ones(1))
    v, wv = (normal_nodes(INTERACTION_NODES) if "sigma_interaction" in posterior
             else (np.zeros(1), np.ones(1)))  # fmt: skip

    def probabilities(block: slice, status: int) -> np.ndarray:
        mu = d.intercept[block, status][:, None, None, None]
        lean = d.appraiser_effect[block, :, status][:, None, :, None]
        part = d.sigma_part[block][:, None, None, None] * u[None, :, None, None]
        cell = d.sigma_interaction[block][:, None, None, None] * v
        return expit(mu + lean + part + cell)

    return CallNodes(d.intercept.shape[0], (wu, wu), wv, probabilities)
