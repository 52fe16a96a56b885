"""Wrong calls: false reject and false accept rates from posterior draws (estimands.md
families 3 and 4).

A numpy core like :mod:`bayes_rr.estimands` (draws on the leading axis). The rates:

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

import numpy as np
import xarray as xr
from scipy.special import expit, gammaln, log_expit, logsumexp

from bayes_rr.data import StudyData

RATE_KEYS = ("false_reject_rate", "false_accept_rate", "reference_agreement")
RATE_WORDS = {
    "false_reject_rate": "of good parts, {who} rejects {value}",
    "false_accept_rate": "of bad parts, {who} accepts {value}",
    "reference_agreement": "{who} calls {value} of parts as the reference does",
}
IDENTIFICATION_NOTE = (
    "The latent class model tells reject parts from accept parts by the pattern of calls "
    "alone. It is identified when each part gets enough calls (three or more appraisers, "
    "or repeated trials) and rests on one assumption the data cannot check fully: given a "
    "part's class, its calls are independent (no appraiser copies another, no part is "
    "hard for all appraisers beyond what the part term allows)."
)
STANDOUT_PROBABILITY = 0.95
"""An appraiser stands out when the posterior probability that their rate is above every
other appraiser's reaches this level."""


def _draws(posterior: xr.Dataset, name: str) -> np.ndarray:
    values = posterior[name].transpose("chain", "draw", ...).to_numpy()
    return values.reshape((-1, *values.shape[2:]))


def _optional(posterior: xr.Dataset, name: str, shape: tuple[int, ...]) -> np.ndarray:
    return _draws(posterior, name) if name in posterior else np.zeros(shape)


def study_rates(
    p_if_accept: np.ndarray, p_if_reject: np.ndarray, reject_weight: np.ndarray
) -> dict[str, dict[str, np.ndarray]]:
    """Study-scope rates per appraiser and for the system.

    ``p_if_accept``/``p_if_reject`` (S, part, appraiser): the call probability of each
    part were it of that status; ``reject_weight`` (S, part): the part's probability
    of being a reject part in the draw (0/1 with a known reference). Returns
    ``{"appraiser": {key: (S, appraiser)}, "system": {key: (S,)}}``.
    """
    w1 = reject_weight[:, :, None]
    w0 = 1.0 - w1
    with np.errstate(invalid="ignore", divide="ignore"):
        frr = (w0 * p_if_accept).sum(axis=1) / w0.sum(axis=1)
        far = (w1 * (1.0 - p_if_reject)).sum(axis=1) / w1.sum(axis=1)
    agree = (w0 * (1.0 - p_if_accept) + w1 * p_if_reject).mean(axis=1)
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
    from bayes_rr.estimands import logistic_normal_moments

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


# ---------------------------------------------------------------------------
# reference-aware logit


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
    intercept = _draws(posterior, "intercept")
    s = intercept.shape[0]
    n_parts, n_app = len(study.parts), len(study.appraisers)
    return StatusDraws(
        intercept,
        _optional(posterior, "part_effect", (s, n_parts)),
        _optional(posterior, "appraiser_effect", (s, n_app, 2)),
        _optional(posterior, "sigma_part", (s,)),
        _optional(posterior, "sigma_appraiser", (s, 2)),
        _optional(posterior, "sigma_interaction", (s,)),
    )


def reference_logit_probabilities(
    posterior: xr.Dataset, study: StudyData, rng: np.random.Generator
) -> tuple[np.ndarray, np.ndarray, StatusDraws]:
    """(S, part, appraiser) call probabilities of the reference-aware logit, the linear
    predictor without the interaction (for the integrated cell likelihood), and the
    parameters. Empty cells get their interaction effect from its prior given the draw's
    scale (its posterior, since no call informs it)."""
    d = status_draws(posterior, study)
    status = study.reference.to_numpy().astype(int)
    s = d.intercept.shape[0]
    n_parts, n_app = len(study.parts), len(study.appraisers)
    base = d.intercept[:, status][:, :, None] + d.part_effect[:, :, None]
    base = base + np.transpose(d.appraiser_effect[:, :, status], (0, 2, 1))
    c = rng.standard_normal((s, n_parts, n_app)) * d.sigma_interaction[:, None, None]
    if "interaction_effect" in posterior:
        cells = study.cells
        c[:, cells["part_index"].to_numpy(), cells["appraiser_index"].to_numpy()] = _draws(
            posterior, "interaction_effect"
        )
    return expit(base + c), base, d, expit(-(base + c))


def reference_logit_rates(p: np.ndarray, d: StatusDraws, study: StudyData) -> dict:
    """Rates of both scopes: {scope: {level: {key: draws}}}."""
    status = study.reference.to_numpy().astype(float)
    weight = np.broadcast_to(status, p.shape[:2])
    return {
        "study": study_rates(p, p, weight),
        "population": population_rates(
            d.intercept,
            d.appraiser_effect,
            d.sigma_part,
            d.sigma_appraiser,
            d.sigma_interaction,
            float(status.mean()),
        ),
    }


# ---------------------------------------------------------------------------
# latent class


PART_NODES = 24
"""Gauss-Hermite nodes over a part's effect in the latent class model. A part's calls
(a dozen or so) give a smooth likelihood in its effect; 24 nodes integrate it to well
below Monte Carlo error for part scales up to about 3 (the prior allows far less)."""


@dataclass(frozen=True)
class Patterns:
    """The study as (pattern, appraiser) grids of trials ``n`` and rejects ``s``.

    Parts with the same calls have the same likelihood once the class (and the part's
    effect) are integrated out: they are grouped into one pattern with a ``weight``
    (3869 patients of five dentists are 32 patterns); ``part_of`` maps each part to its
    pattern.
    """

    n: np.ndarray  # (K, J)
    s: np.ndarray  # (K, J)
    weight: np.ndarray  # (K,)
    part_of: np.ndarray  # (I,)


def call_patterns(study: StudyData) -> Patterns:
    cells = study.cells
    n = np.zeros((len(study.parts), len(study.appraisers)), dtype=np.int64)
    s = np.zeros_like(n)
    n[cells["part_index"], cells["appraiser_index"]] = cells["n"]
    s[cells["part_index"], cells["appraiser_index"]] = cells["s"]
    rows, part_of, counts = np.unique(
        np.concatenate([n, s], axis=1), axis=0, return_inverse=True, return_counts=True
    )
    j = n.shape[1]
    return Patterns(rows[:, :j], rows[:, j:], counts.astype(float), part_of.ravel())


def part_nodes(has_part: bool) -> tuple[np.ndarray, np.ndarray]:
    """Standard-normal nodes and log weights over a part's effect (one node at 0 without a
    part term)."""
    if not has_part:
        return np.zeros(1), np.zeros(1)
    from bayes_rr.estimands import gauss_hermite

    u, w = gauss_hermite(PART_NODES)
    return u, np.log(w)


def class_log_likelihoods(
    patterns: Patterns,
    intercept: np.ndarray,
    appraiser_effect: np.ndarray,
    sigma_part: np.ndarray | None = None,
) -> tuple[np.ndarray, np.ndarray]:
    """Log likelihood of each pattern's calls given each status, the part's effect
    a ~ N(0, sigma_part^2) integrated out (binomial coefficients included): (S, K, 2);
    and E[p_ij | calls, status] with the same integral, (S, K, J, 2)."""
    n, s = patterns.n[None, :, None, :], patterns.s[None, :, None, :]
    coef = (gammaln(patterns.n + 1) - gammaln(patterns.s + 1)
            - gammaln(patterns.n - patterns.s + 1)).sum(axis=-1)  # fmt: skip
    u, log_w = part_nodes(sigma_part is not None)
    a = (np.zeros((intercept.shape[0], 1)) if sigma_part is None
         else sigma_part[:, None] * u[None, :])  # fmt: skip
    marginal, expected = [], []
    for status in (0, 1):
        # (S, K, Q, J): draw, pattern, node, appraiser
        eta = (intercept[:, status, None, None, None] + a[:, None, :, None]
               + appraiser_effect[:, None, None, :, status])  # fmt: skip
        at_node = (s * log_expit(eta) + (n - s) * log_expit(-eta)).sum(axis=-1) + log_w
        total = logsumexp(at_node, axis=-1)  # (S, K)
        posterior_node = np.exp(at_node - total[..., None])  # (S, K, Q)
        expected.append(np.einsum("skq,skqj->skj", posterior_node, expit(eta)))
        marginal.append(total + coef)
    return np.stack(marginal, axis=-1), np.stack(expected, axis=-1)


def latent_class_posterior(
    log_lik: np.ndarray, prevalence: np.ndarray
) -> tuple[np.ndarray, np.ndarray]:
    """Each pattern's probability of being a reject part (S, K), and its marginal log
    likelihood (S, K), given the draw's parameters."""
    joint = log_lik + np.stack([np.log1p(-prevalence), np.log(prevalence)], axis=-1)[:, None]
    marginal = logsumexp(joint, axis=-1)
    return np.exp(joint[..., 1] - marginal), marginal


@dataclass(frozen=True)
class LatentClassDraws:
    """Per-draw quantities of a latent class fit."""

    params: StatusDraws
    prevalence: np.ndarray  # (S,)
    reject_weight: np.ndarray  # (S, part): P(part is a reject part | calls, draw)
    p_if: tuple[np.ndarray, np.ndarray]  # (S, part, appraiser): E[p | calls, status]
    part_log_lik: np.ndarray  # (S, part): marginal log likelihood of the part's calls


DRAW_BLOCK = 250
"""Draws per block in the latent class quadrature (bounds draws x parts x nodes x
appraisers temporaries to some tens of MB for a typical study)."""


def _blocks(total: int) -> list[slice]:
    return [slice(start, start + DRAW_BLOCK) for start in range(0, total, DRAW_BLOCK)]


def latent_class_draws(posterior: xr.Dataset, study: StudyData) -> LatentClassDraws:
    d = status_draws(posterior, study)
    patterns = call_patterns(study)
    prevalence = _draws(posterior, "prevalence")
    sigma = d.sigma_part if "sigma_part" in posterior else None
    pieces = [
        class_log_likelihoods(
            patterns,
            d.intercept[block],
            d.appraiser_effect[block],
            None if sigma is None else sigma[block],
        )
        for block in _blocks(d.intercept.shape[0])
    ]
    log_lik = np.concatenate([p[0] for p in pieces])
    expected = np.concatenate([p[1] for p in pieces])
    reject_prob, marginal = latent_class_posterior(log_lik, prevalence)
    part_of = patterns.part_of
    return LatentClassDraws(
        d,
        prevalence,
        reject_prob[:, part_of],
        (expected[..., 0][:, part_of], expected[..., 1][:, part_of]),
        marginal[:, part_of],
    )


def latent_class_rates(posterior: xr.Dataset, study: StudyData) -> tuple[dict, np.ndarray]:
    """Estimands of the latent class model, ``(scope, level, key) -> (draws, dim)``: the
    rates of both scopes, the prevalence and each part's reject probability; and the
    per-part log likelihood (S, part) for leave-one-part-out."""
    lc = latent_class_draws(posterior, study)
    d = lc.params
    rates = {
        "study": study_rates(lc.p_if[0], lc.p_if[1], lc.reject_weight),
        "population": population_rates(
            d.intercept,
            d.appraiser_effect,
            d.sigma_part,
            d.sigma_appraiser,
            np.zeros_like(d.sigma_part),
            lc.prevalence,
        ),
    }
    out = rate_variables(rates)
    out[("study", "study", "reject_prevalence")] = (lc.reject_weight.mean(axis=1), None)
    out[("population", "study", "reject_prevalence")] = (lc.prevalence, None)
    out[("study", "part", "reject_probability")] = (lc.reject_weight, "part")
    return out, lc.part_log_lik


def status_cell_probabilities(
    posterior: xr.Dataset, spec, study: StudyData, rng: np.random.Generator
) -> np.ndarray:
    """(S, part, appraiser) call probabilities to replicate a study from: with the
    reference status, or with each part's class drawn from its posterior in the draw."""
    if spec.family == "reference_logit":
        return reference_logit_probabilities(posterior, study, rng)[0]
    lc = latent_class_draws(posterior, study)
    bad = rng.random(lc.reject_weight.shape) < lc.reject_weight
    return np.where(bad[:, :, None], lc.p_if[1], lc.p_if[0])


# ---------------------------------------------------------------------------
# readings


def standouts(estimands: xr.Dataset, probability: float = STANDOUT_PROBABILITY) -> list[dict]:
    """Appraisers whose study-scope rate is above every other appraiser's with posterior
    probability at least ``probability`` (a lower rate is no concern)."""
    from bayes_rr.decisions import beyond_all_others

    out = []
    for key in ("false_reject_rate", "false_accept_rate"):
        name = f"study__appraiser__{key}"
        if name not in estimands or estimands.sizes.get("appraiser", 0) < 2:
            continue
        values = estimands[name].transpose("chain", "draw", "appraiser").to_numpy()
        values = values.reshape(-1, values.shape[-1])
        above, _ = beyond_all_others(values)
        for j, appraiser in enumerate(estimands["appraiser"].to_numpy()):
            if above[j] >= probability:
                out.append({"appraiser": str(appraiser), "key": key, "direction": "higher",
                            "probability": float(above[j])})  # fmt: skip
    return out


def _percent(value: float) -> str:
    digits = 1 if value < 0.1 else 0
    return f"{100 * value:.{digits}f}%"


def _with_interval(row: dict) -> str:
    return f"{_percent(row['mean'])} ({_percent(row['lower'])} to {_percent(row['upper'])})"


def rate_readings(rows: list[dict], found: list[dict], prob: float) -> list[str]:
    """Plain sentences: each appraiser's and the system's rates with their intervals, and
    the appraisers who stand out."""
    out = []
    by = {(r["key"], r["scope"], r["level"], r["appraiser"]): r for r in rows}
    for key, status, verb in (("false_reject_rate", "good", "rejects"),
                              ("false_accept_rate", "bad", "accepts")):  # fmt: skip
        each = [
            (row["appraiser"], _with_interval(row))
            for (k, scope, level, _), row in by.items()
            if (k, scope, level) == (key, "study", "appraiser") and row["mean"] is not None
        ]
        system = by.get((key, "study", "system", None))
        if each:
            items = [f"{each[0][0]} {verb} {each[0][1]}"]
            items += [f"{who} {value}" for who, value in each[1:]]
            listed = items[0] if len(items) == 1 else (
                ", ".join(items[:-1]) + " and " + items[-1])  # fmt: skip
            tail = ""
            if system is not None and system["mean"] is not None:
                tail = f"; the study's appraisers together {_with_interval(system)}"
            out.append(f"Of good parts, {listed}{tail} ({prob:.0%} intervals)."
                       if status == "good" else
                       f"Of bad parts, {listed}{tail} ({prob:.0%} intervals).")  # fmt: skip
        pop = by.get((key, "population", "system", None))
        if pop is not None and pop["mean"] is not None:
            out.append(
                f"A new appraiser from the same population {verb} {_with_interval(pop)} "
                f"of new {status} parts."
            )
    for item in found:
        what = "good parts rejected" if item["key"] == "false_reject_rate" else (
            "bad parts accepted")  # fmt: skip
        out.append(
            f"{item['appraiser']} stands out: a {item['direction']} share of {what} than every "
            f"other appraiser (posterior probability {item['probability']:.2f})."
        )
    return out


def weak_identification(estimands: xr.Dataset, prob: float = 0.95) -> str | None:
    """A sentence when the latent class model is weakly identified: the classes are not
    clearly apart, or the prevalence is barely pinned down."""
    far = estimands.get("population__system__false_accept_rate")
    frr = estimands.get("population__system__false_reject_rate")
    prev = estimands.get("population__study__reject_prevalence")
    if far is None or frr is None or prev is None:
        return None
    separation = (1 - far - frr).to_numpy().ravel()  # call-rate gap between the classes
    lo = float(np.quantile(separation, (1 - prob) / 2))
    prevalence = prev.to_numpy().ravel()
    width = float(np.diff(np.quantile(prevalence, [(1 - prob) / 2, (1 + prob) / 2]))[0])
    if lo < 0.2 or width > 0.5:
        return (
            "The two classes are weakly identified: the data do not clearly separate reject "
            f"parts from accept parts (gap in call rates {lo:.2f} or more, prevalence interval "
            f"{width:.2f} wide), so the rates below rest largely on the priors and on the "
            "model's assumption that calls are independent given a part's class."
        )
    return None


def identification_problem(study: StudyData) -> str | None:
    """Why a two-class latent model cannot be identified from this design, or None.

    Each part gives a pattern of per-appraiser reject counts: (T + 1)^J patterns with
    T trials and J appraisers, so (T + 1)^J - 1 free frequencies must cover the 2J + 1
    parameters of the basic model (two rates per appraiser and the prevalence).
    """
    trials = int(study.cells["n"].max())
    count = len(study.appraisers)
    free = (trials + 1) ** count - 1
    needed = 2 * count + 1
    if free < needed:
        return (
            f"{count} appraiser(s) with up to {trials} call(s) per part give {free} free "
            f"call-pattern frequencies, fewer than the {needed} parameters of a two-class "
            "model: it cannot be identified. Use three or more appraisers, or repeated "
            "trials, or a reference status per part (reference-logit)"
        )
    return None
