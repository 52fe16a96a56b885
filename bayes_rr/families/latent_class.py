"""Two latent classes of parts, no reference needed (family 4 of the statistical
contract).

Each part is a reject part with probability theta (``prevalence``); given its class r,
logit p_ij = mu_r + a_i + b_j,r, with mu_reject > mu_accept (an ordered pair, so the
labels cannot switch). The class is summed out of the likelihood per part, and so is the
part's effect (Gauss-Hermite quadrature): nothing discrete is sampled, and no part's
effect can be caught between the two modes "good part called strictly" and "bad part
called leniently". Parts with the same calls then share one likelihood term, weighted
by their number.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np
import xarray as xr
from scipy.special import expit, gammaln, log_expit, logsumexp

from bayes_rr.core.errors import DataError
from bayes_rr.families import forward
from bayes_rr.families.base import Family, LatentDraws, cell_index, draws_of
from bayes_rr.families.layout import call_grids, reference_statuses
from bayes_rr.families.status import (
    PER_STATUS_SCALES,
    STATEMENTS,
    StatusDraws,
    called_mask,
    part_effect_rule,
    population_rates,
    production_calls,
    rate_variables,
    status_draws,
    study_rates,
)
from bayes_rr.families.status import hyper_parameters as status_hyper_parameters
from bayes_rr.families.terms import (
    PART_TERM,
    STATUS_APPRAISER_TERM,
    STATUS_INTERCEPTS,
    FamilyInfo,
    prior,
)

if TYPE_CHECKING:
    import pymc as pm

    from bayes_rr.priors.spec import ModelSpec
    from bayes_rr.study.data import StudyData

PREVALENCE_PRIOR = prior("beta", alpha=1.0, beta=1.0)
PREVALENCE_WHY = (
    "beta(1, 1) on the share of reject parts among the study's parts: uniform, since "
    "studies pick their share of bad parts on purpose."
)
INFO = FamilyInfo(
    "latent_class",
    "latent class: each part's status r(i) unknown, P(reject part) = theta, summed out "
    "of the likelihood; logit p_ij = mu_r + a_i + b_j,r with mu_reject > mu_accept "
    "(docs/statistics.md family 4)",
    {t.name: t for t in (PART_TERM, STATUS_APPRAISER_TERM)},
    intercepts=STATUS_INTERCEPTS,
    prevalence_prior=PREVALENCE_PRIOR,
)

IDENTIFICATION_NOTE = (
    "The latent class model tells reject parts from accept parts by the pattern of calls "
    "alone. It is identified when each part gets enough calls (three or more appraisers, "
    "or repeated trials) and rests on one assumption the data cannot check fully: given a "
    "part's class, its calls are independent (no appraiser copies another, no part is "
    "hard for all appraisers beyond what the part term allows)."
)


def build(spec: ModelSpec, study: StudyData) -> pm.Model:
    """log L = sum_k w_k log[(1 - theta) L_k(accept) + theta L_k(reject)], where L_k(r)
    integrates the part's effect a ~ N(0, sigma_part) by the trapezoid rule of
    :func:`part_nodes`."""
    import pymc as pm
    import pytensor.tensor as pt

    from bayes_rr.families.pymc_parts import (
        appraiser_by_status,
        coords,
        pymc_prior,
        status_intercepts,
    )

    problem = identification_problem(study)
    if problem:
        raise DataError(f"{study.source}: {problem}")
    patterns = call_patterns(study)
    u, log_w = part_nodes(spec.has("part"))
    n, s = patterns.n[None], patterns.s[None]  # (1, K, J) against nodes (Q, 1, 1)
    with pm.Model(coords=coords(study)) as model:
        mu = status_intercepts(spec, ordered=True)
        theta = pymc_prior("prevalence", spec.prevalence)
        effects = (0.0, 0.0)
        if spec.has("appraiser"):
            effects = appraiser_by_status(spec.term("appraiser"))
        a = 0.0
        if spec.has("part"):
            a = pymc_prior("sigma_part", spec.term("part").prior) * u[:, None, None]
        log_lik = []
        for status in (0, 1):
            eta = mu[status] + effects[status] + a  # (Q, K, J)
            # log expit(eta) = -log(1 + e^-eta), stable for any eta
            calls = (-s * pt.softplus(-eta) - (n - s) * pt.softplus(eta)).sum(axis=-1)
            log_lik.append(pt.logsumexp(calls + log_w[:, None], axis=0))
        accept = pt.log1p(-theta) + log_lik[0]
        reject = pm.math.log(theta) + log_lik[1]
        # a part whose status the reference gives takes that class's term; the others sum
        # the class out (a partial reference: docs/statistics.md, the models)
        unknown, known_accept, known_reject = status_masks(patterns)
        per_pattern = (unknown * pt.logaddexp(accept, reject) + known_accept * accept
                       + known_reject * reject)  # fmt: skip
        pm.Potential("calls", (np.asarray(patterns.weight) * per_pattern).sum())
    return model


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
    status: np.ndarray | None = None
    """(K,): the reference status of the pattern's parts where a partial reference gives
    it (0 accept, 1 reject) and -1 where unknown; None without a partial reference."""


UNKNOWN = -1


def known_status(study: StudyData) -> np.ndarray | None:
    """Each part's status from a partial reference (-1 unknown), or None."""
    partial = getattr(study, "partial_status", None)
    if partial is None:
        return None
    values = partial.reindex(list(study.parts)).to_numpy(dtype=float)
    return np.where(np.isnan(values), UNKNOWN, values).astype(np.int64)


def call_patterns(study: StudyData) -> Patterns:
    n, s = call_grids(study)
    status = known_status(study)
    # parts with a known status are their own patterns' members only with that status
    key = np.concatenate([n, s] + ([] if status is None else [status[:, None]]), axis=1)
    rows, part_of, counts = np.unique(key, axis=0, return_inverse=True, return_counts=True)
    j = n.shape[1]
    known = None if status is None else rows[:, 2 * j]
    return Patterns(rows[:, :j], rows[:, j : 2 * j], counts.astype(float), part_of.ravel(), known)


def status_masks(patterns: Patterns) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """0/1 weights (K,) of the terms a pattern's log likelihood takes: the class summed
    out (status unknown), the accept class alone, the reject class alone."""
    k = patterns.n.shape[0]
    if patterns.status is None:
        return np.ones(k), np.zeros(k), np.zeros(k)
    st = patterns.status
    return (st == UNKNOWN).astype(float), (st == 0).astype(float), (st == 1).astype(float)


def part_nodes(has_part: bool) -> tuple[np.ndarray, np.ndarray]:
    """Standard-normal nodes and log weights over a part's effect (one node at 0 without a
    part term): the trapezoid rule of :data:`~bayes_rr.families.status.PART_RULE_STEP`.

    It replaced 24 Gauss-Hermite nodes, with which the study's log likelihood was off by
    up to 0.3 and 1.1 at the largest part scales the posterior visited (3.2 and 3.7, two
    simulated studies of 9 and 12 calls a part; 0.04 and 0.3 at the median of those
    draws); the trapezoid rule, by 1e-7 and 2e-5 there.
    """
    if not has_part:
        return np.zeros(1), np.zeros(1)
    return part_effect_rule()


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
    log_lik: np.ndarray, prevalence: np.ndarray, status: np.ndarray | None = None
) -> tuple[np.ndarray, np.ndarray]:
    """Each pattern's probability of being a reject part (S, K), and its marginal log
    likelihood (S, K), given the draw's parameters; a pattern of known ``status`` (0 or 1;
    -1 unknown) is that class, with that class's log likelihood."""
    joint = log_lik + np.stack([np.log1p(-prevalence), np.log(prevalence)], axis=-1)[:, None]
    marginal = logsumexp(joint, axis=-1)
    reject = np.exp(joint[..., 1] - marginal)
    if status is not None:
        known = status != UNKNOWN
        reject = np.where(known, status.astype(float), reject)
        chosen = np.where(status == 1, joint[..., 1], joint[..., 0])
        marginal = np.where(known, chosen, marginal)
    return reject, marginal


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


def class_draws(posterior: xr.Dataset, study: StudyData) -> LatentClassDraws:
    d = status_draws(posterior, study)
    patterns = call_patterns(study)
    prevalence = draws_of(posterior, "prevalence")
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
    reject_prob, marginal = latent_class_posterior(log_lik, prevalence, patterns.status)
    part_of = patterns.part_of
    return LatentClassDraws(
        d,
        prevalence,
        reject_prob[:, part_of],
        (expected[..., 0][:, part_of], expected[..., 1][:, part_of]),
        marginal[:, part_of],
    )


def rates(posterior: xr.Dataset, study: StudyData) -> tuple[dict, np.ndarray]:
    """Estimands of the latent class model, ``(scope, level, key) -> (draws, dim)``: the
    rates of both scopes, the prevalence and each part's reject probability; and the
    per-part log likelihood (S, part) for leave-one-part-out."""
    lc = class_draws(posterior, study)
    d = lc.params
    rates = {
        "study": study_rates(lc.p_if[0], lc.p_if[1], lc.reject_weight, called_mask(study)),
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


def pattern_frequencies(study: StudyData) -> tuple[int, int, int]:
    """Trials (at most), appraisers, and the free frequencies of a part's call pattern:
    (T + 1)^J patterns of per-appraiser reject counts sum to one."""
    trials = int(study.cells["n"].max())
    count = len(study.appraisers)
    return trials, count, (trials + 1) ** count - 1


def identification_problem(study: StudyData) -> str | None:
    """Why a two-class latent model cannot be identified from this design, or None.

    Each part gives a pattern of per-appraiser reject counts: (T + 1)^J patterns with
    T trials and J appraisers, so (T + 1)^J - 1 free frequencies must cover the 2J + 1
    parameters of the basic model (two rates per appraiser and the prevalence).
    """
    trials, count, free = pattern_frequencies(study)
    needed = 2 * count + 1
    if free < needed:
        return (
            f"{count} appraiser(s) with up to {trials} call(s) per part give {free} free "
            f"call-pattern frequencies, fewer than the {needed} parameters of a two-class "
            "model: it cannot be identified. Use three or more appraisers, or repeated "
            "trials, or a reference status per part (reference-logit)"
        )
    return None


def latent(posterior: xr.Dataset, spec, study: StudyData, rng) -> LatentDraws:
    extra, part_log_lik = rates(posterior, study)
    return LatentDraws(None, {}, part_log_lik, extra, log_lik_dim="part")


def prior_draws(spec: ModelSpec, study: StudyData, rng: np.random.Generator, draws: int):
    intercepts = forward.status_intercepts(spec, rng, draws, ordered=True)
    out = {"intercept": (("status",), intercepts)}
    out["prevalence"] = ((), forward.draw(spec.prevalence, rng, (draws,)))
    out.update(forward.appraiser_by_status(spec, study, rng, draws))
    if spec.has("part"):
        out["sigma_part"] = ((), forward.draw(spec.term("part").prior, rng, (draws,)))
    return out


def cell_probabilities(posterior: xr.Dataset, spec, study: StudyData, rng) -> np.ndarray:
    """Each part's class drawn from its posterior in the draw, then its call rates."""
    lc = class_draws(posterior, study)
    bad = rng.random(lc.reject_weight.shape) < lc.reject_weight
    p = np.where(bad[:, :, None], lc.p_if[1], lc.p_if[0])
    part, app = cell_index(study)
    return p[:, part, app]


def simulate_calls(
    spec: ModelSpec,
    layout: StudyData,
    truth: xr.Dataset,
    rng: np.random.Generator,
    reject_share: float | None = None,
) -> tuple[xr.Dataset, np.ndarray]:
    """Studies drawn from the model: each part's class (Bernoulli(prevalence), or a fixed
    ``reject_share`` of reject parts), its effect a ~ N(0, sigma_part), then the calls.

    ``truth`` holds one draw per study (chain 1) of the hyper-parameters, with or without
    the appraisers' effects: without them (an earlier fit's hyper-parameters, new
    appraisers), they are drawn here from the population the draw describes. Returns the
    truth with the appraisers' effects and the reject counts (studies, cells).
    """
    sims = truth.sizes["draw"]
    appraisers = len(layout.appraisers)
    intercept = truth["intercept"].to_numpy().reshape(sims, 2)
    if spec.has("appraiser") and "appraiser_effect" not in truth:
        scales = truth["sigma_appraiser"].to_numpy().reshape(sims, 2)
        rho = truth["appraiser_correlation"].to_numpy().reshape(sims)
        effects = forward.correlated_appraiser_effects(scales, rho, appraisers, rng)
        truth = truth.assign(appraiser_effect=(("chain", "draw", "appraiser", "status"),
                                               effects[None]))  # fmt: skip
        truth = truth.assign_coords(appraiser=list(layout.appraisers))
    effect = (truth["appraiser_effect"].transpose("chain", "draw", "appraiser", "status")
              .to_numpy().reshape(sims, appraisers, 2) if "appraiser_effect" in truth
              else np.zeros((sims, appraisers, 2)))  # fmt: skip
    parts = len(layout.parts)
    if reject_share is None:
        prevalence = truth["prevalence"].to_numpy().reshape(sims)
        bad = (rng.random((sims, parts)) < prevalence[:, None]).astype(int)
    else:
        bad = np.broadcast_to(reference_statuses(parts, reject_share), (sims, parts))
    sigma = (truth["sigma_part"].to_numpy().reshape(sims) if "sigma_part" in truth
             else np.zeros(sims))  # fmt: skip
    part_effect = rng.standard_normal((sims, parts)) * sigma[:, None]
    part, app = cell_index(layout)
    rows = np.arange(sims)[:, None]
    status = bad[:, part]  # (sims, cells)
    eta = (intercept[rows, status] + part_effect[:, part]
           + effect[rows, app[None, :], status])  # fmt: skip
    trials = layout.cells["n"].to_numpy()
    calls = rng.binomial(trials[None, :], expit(eta))
    return truth, calls


def hyper_parameters(spec: ModelSpec):
    from bayes_rr.families.base import HyperParameter

    prevalence = HyperParameter("prevalence", ("prevalence", "prior"), spec.prevalence)
    return (*status_hyper_parameters(spec), prevalence)


def memory_per_draw(parts: int, appraisers: int, cells: int) -> int:
    """No per-part decomposition: a part's reject probability and log likelihood, and
    two call probabilities per part and appraiser."""
    return 2 * (parts + appraisers) + 3 * parts + 4 * parts * appraisers


FAMILY = Family(
    info=INFO,
    build=build,
    prior_draws=prior_draws,
    latent=latent,
    cell_probabilities=cell_probabilities,
    hyper_parameters=hyper_parameters,
    memory_per_draw=memory_per_draw,
    per_status_scales=PER_STATUS_SCALES,
    statements=STATEMENTS,
    mode_advice=(
        "fit without the part term (copy models/latent-class.toml and remove "
        "[terms.part]): the part scale and the prevalence trade off against each other",
        "or state a prior on the prevalence, or on one appraiser's accuracy ('bayes-rr "
        "prior' takes false reject and false accept rates)",
    ),
    identification_note=IDENTIFICATION_NOTE,
    weak_identification=weak_identification,
    production_calls=production_calls,
    partial_reference=True,
    dependence_check=True,
    simulated=True,
    simulated_parts="class",
    default_plan_target="study__system__false_accept_rate",
    simulate_calls=simulate_calls,
)
