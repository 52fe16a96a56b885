"""The logit model with each part's known reference status (family 3 of the
statistical contract).

logit p_ij = mu_r(i) + a_i + b_j,r(i) + c_ij: a typical appraiser's call rate on good
parts (mu_accept) and on bad parts (mu_reject), parts differing within their status
(a_i), each appraiser leaning differently on good and on bad parts (b_j,accept and
b_j,reject, correlated), and appraiser-by-part disagreement (c_ij).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np
import xarray as xr
from scipy.special import expit, log_expit

from bayes_rr.core.errors import DataError
from bayes_rr.core.moments import (
    decompose_population_logit,
    integrated_cell_log_lik,
    log_binom_coef,
    split_reproducibility_logit,
)
from bayes_rr.families import forward
from bayes_rr.families.base import (
    CallNodes,
    Family,
    LatentDraws,
    cell_index,
    cell_memory,
    draws_of,
)
from bayes_rr.families.layout import call_grids
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
    INTERACTION_TERM,
    PART_TERM,
    STATUS_APPRAISER_TERM,
    STATUS_INTERCEPTS,
    FamilyInfo,
)

if TYPE_CHECKING:
    import pymc as pm

    from bayes_rr.priors.spec import ModelSpec
    from bayes_rr.study.data import StudyData

INFO = FamilyInfo(
    "reference_logit",
    "reference-aware logit: logit p_ij = mu_r(i) + a_i + b_j,r(i) + c_ij with the part's "
    "known reference status r(i) (docs/statistics.md family 3)",
    {t.name: t for t in (PART_TERM, STATUS_APPRAISER_TERM, INTERACTION_TERM)},
    intercepts=STATUS_INTERCEPTS,
    needs=("reference",),
    reference_accuracy=True,
)


def reference_status(study: StudyData, spec: ModelSpec):
    """The parts' reference status (0 accept, 1 reject); both must occur."""
    partial = getattr(study, "partial_status", None)
    if study.reference is None and partial is not None:
        raise DataError(
            f"{study.source}: the model {spec.name!r} needs each part's reference status; "
            f"{int(partial.notna().sum())} of {len(study.parts)} parts have one: use "
            "latent-class, which takes those and infers the rest (the default for such data)"
        )
    if study.reference is None:
        raise DataError(
            f"{study.source}: the model {spec.name!r} needs each part's reference status "
            "(a 'reference' column, or --reference-col); without one use latent-class"
        )
    status = study.reference.to_numpy().astype(int)
    if status.min() == status.max():
        which = "reject" if status[0] else "accept"
        raise DataError(
            f"{study.source}: every part has reference status {which!r}; the model "
            f"{spec.name!r} needs parts of both statuses to estimate both error rates"
        )
    return status


def build(spec: ModelSpec, study: StudyData) -> pm.Model:
    """s_ij ~ Binomial(n_ij, expit(mu_r(i) + a_i + b_j,r(i) + c_ij)); with a fallible
    reference the true status is summed out per part (:func:`_fallible_reference`)."""
    import pymc as pm

    from bayes_rr.families.pymc_parts import (
        appraiser_by_status,
        by_status,
        coords,
        group_effect,
        observed_calls,
        pymc_prior,
        resolve_parameterization,
        status_intercepts,
    )

    status = reference_status(study, spec)
    cells = study.cells
    part = cells["part_index"].to_numpy()
    app = cells["appraiser_index"].to_numpy()
    with pm.Model(coords=coords(study)) as model:
        mu = status_intercepts(spec)
        if spec.reference_accuracy is not None:
            _fallible_reference(spec, study, mu)
            return model
        eta = by_status(mu[0], mu[1], status[part])
        if spec.has("part"):
            term = spec.term("part")
            scale = pymc_prior("sigma_part", term.prior)
            effect = group_effect("part_effect", scale, "part",
                                  resolve_parameterization(term, study))  # fmt: skip
            eta = eta + effect[part]
        if spec.has("appraiser"):
            accept, reject = appraiser_by_status(spec.term("appraiser"))
            eta = eta + by_status(accept[app], reject[app], status[part])
        if spec.has("interaction"):
            term = spec.term("interaction")
            scale = pymc_prior("sigma_interaction", term.prior)
            eta = eta + group_effect("interaction_effect", scale, "cell",
                                     resolve_parameterization(term, study))  # fmt: skip
        pm.Binomial("s", n=cells["n"].to_numpy(), logit_p=eta, observed=observed_calls(study),
                    dims="cell")  # fmt: skip
    return model


REFERENCE_STATEMENTS = ("reference_false_reject_rate", "reference_false_accept_rate")
"""Statements of 'bayes-rr prior' about the reference's own error rates."""
REFERENCE_RATE_VARIABLES = {"false_reject": "reference_false_reject",
                            "false_accept": "reference_false_accept"}  # fmt: skip


INTERACTION_NODES = 10
"""Gauss-Hermite nodes over a cell's appraiser-by-part effect: its scale is small (prior
half-normal(0.5)) and a cell holds a few calls, a smooth integrand (off by 0.003 in
the log at scale 1.5 with 18 calls, 2e-5 at scale 1 with 9)."""


@dataclass(frozen=True)
class ReferencePatterns:
    """Parts grouped by their calls and their reference's call: with the part's effect,
    the cells' effects and the true status integrated out, parts alike in both have one
    likelihood (as in the latent class model). (K, J) grids of trials and rejects, the
    reference's call (K,), the number of parts (K,), and each part's pattern (I,)."""

    n: np.ndarray
    s: np.ndarray
    said_bad: np.ndarray
    weight: np.ndarray
    part_of: np.ndarray


def reference_patterns(study: StudyData) -> ReferencePatterns:
    n, s = call_grids(study)
    said = study.reference.to_numpy().astype(np.int64)[:, None]
    rows, part_of, counts = np.unique(np.concatenate([n, s, said], axis=1), axis=0,
                                      return_inverse=True, return_counts=True)  # fmt: skip
    j = n.shape[1]
    return ReferencePatterns(rows[:, :j], rows[:, j : 2 * j], rows[:, 2 * j].astype(bool),
                             counts.astype(float), part_of.ravel())  # fmt: skip


def effect_nodes(spec: ModelSpec) -> tuple[tuple[np.ndarray, np.ndarray], ...]:
    """(nodes, log weights) of the standard normal over the part's effect (trapezoid) and
    the cell's effect (Gauss-Hermite), a single node at 0 for a term the spec leaves
    out."""
    from bayes_rr.core.moments import gauss_hermite

    none = (np.zeros(1), np.zeros(1))
    part = none
    if spec.has("part"):
        part = part_effect_rule()
    cell = none
    if spec.has("interaction"):
        v, w = gauss_hermite(INTERACTION_NODES)
        cell = (np.asarray(v), np.log(w))
    return part, cell


def _fallible_reference(spec: ModelSpec, study: StudyData, mu) -> None:
    """log L = sum_k w_k log sum_c P(c) P(r_k | c) L_k(c): the reference is one more rater with
    the stated error rates, the part's true status c summed out, and L_k(c) the
    likelihood of the pattern's calls with the part's effect a ~ N(0, sigma_part) and
    each cell's effect ~ N(0, sigma_interaction) integrated by quadrature (see
    ``PART_RULE_STEP`` in families/status.py and ``INTERACTION_NODES``;
    docs/statistics.md, family 3 with a fallible reference). Sampled effects instead
    left each doubtful part two modes (a good part called strictly, a bad part called
    leniently): r_hat 1.11 and 116 s for 60 x 3 x 3 simulated. A fixed rate of 0 makes
    the other status impossible for the parts it decides: the sum has one term there."""
    import pymc as pm
    import pytensor.tensor as pt

    from bayes_rr.families.pymc_parts import appraiser_by_status, pymc_prior

    accuracy = spec.reference_accuracy
    patterns = reference_patterns(study)
    (u, log_wu), (v, log_wv) = effect_nodes(spec)
    theta = pymc_prior("prevalence", accuracy.prevalence)
    rates = {}
    for side, rate in accuracy.rates():
        rates[side] = (pymc_prior(REFERENCE_RATE_VARIABLES[side], rate)
                       if not isinstance(rate, float) else rate)  # fmt: skip
    effects = (0.0, 0.0)
    if spec.has("appraiser"):
        effects = appraiser_by_status(spec.term("appraiser"))
    a = 0.0
    if spec.has("part"):
        a = pymc_prior("sigma_part", spec.term("part").prior) * u[:, None, None, None]
    c = 0.0  # (cell node,)
    if spec.has("interaction"):
        c = pymc_prior("sigma_interaction", spec.term("interaction").prior) * v
    # A cell's integral depends on its calls only through (n, s): it is computed once per
    # appraiser and distinct (n, s) pair and gathered into the patterns' (a few pairs
    # against dozens of patterns: several times fewer terms per gradient)
    pairs, pair_of = np.unique(np.stack([patterns.n, patterns.s], axis=-1).reshape(-1, 2),
                               axis=0, return_inverse=True)  # fmt: skip
    pair_of = pair_of.reshape(patterns.n.shape)  # (K, J)
    n, k = pairs[:, 0][None, None, :, None], pairs[:, 1][None, None, :, None]
    appraiser_of = np.broadcast_to(np.arange(patterns.n.shape[1]), pair_of.shape)
    per_status = []
    for status, prior_of_status in ((0, pt.log1p(-theta)), (1, pt.log(theta))):
        # (part node, appraiser, (n, s) pair, cell node)
        b = effects[status][None, :, None, None] if spec.has("appraiser") else 0.0
        eta = mu[status] + b + a + c
        cell = -k * pt.softplus(-eta) - (n - k) * pt.softplus(eta)
        table = pt.logsumexp(cell + log_wv, axis=-1)  # a cell's effect integrated
        by_pattern = table[:, appraiser_of, pair_of].sum(axis=-1)  # (part node, pattern)
        part = pt.logsumexp(by_pattern + log_wu[:, None], axis=0)  # the part's effect
        reference = log_reference_given(status, patterns.said_bad, rates, pt)
        per_status.append(part + prior_of_status + reference)
    pm.Potential("calls", (patterns.weight * pt.logsumexp(pt.stack(per_status), axis=0)).sum())


def log_reference_given(status: int, said_bad: np.ndarray, rates: dict, xp=np):
    """log P(reference's call | true status) per part: ``rates`` fixed numbers, PyMC
    variables (``xp`` pytensor.tensor) or (S,) draws (``xp`` numpy; (S, part) out)."""
    # a good part is wrong when the reference said bad; a bad one when it said good
    rate = rates["false_reject"] if status == 0 else rates["false_accept"]
    wrong = said_bad if status == 0 else ~said_bad
    if isinstance(rate, float):
        with np.errstate(divide="ignore"):
            return np.where(wrong, np.log(rate), np.log1p(-rate))
    if xp is np:
        with np.errstate(divide="ignore"):
            return np.where(wrong[None, :], np.log(rate)[:, None], np.log1p(-rate)[:, None])
    return xp.switch(wrong, xp.log(rate), xp.log1p(-rate))


def probabilities(
    posterior: xr.Dataset, study: StudyData, rng: np.random.Generator
) -> tuple[np.ndarray, np.ndarray, StatusDraws, np.ndarray]:
    """(S, part, appraiser) call probabilities of the reference-aware logit, the linear
    predictor without the interaction (for the integrated cell likelihood), the
    parameters, and the accept probabilities (computed apart, so a rate near 1 keeps its
    digits). Empty cells get their interaction effect from its prior given the draw's
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
        c[:, cells["part_index"].to_numpy(), cells["appraiser_index"].to_numpy()] = draws_of(
            posterior, "interaction_effect"
        )
    return expit(base + c), base, d, expit(-(base + c))


def rates(p: np.ndarray, d: StatusDraws, study: StudyData) -> dict:
    """Rates of both scopes: {scope: {level: {key: draws}}}."""
    status = study.reference.to_numpy().astype(float)
    weight = np.broadcast_to(status, p.shape[:2])
    return {
        "study": study_rates(p, p, weight, called_mask(study)),
        "population": population_rates(
            d.intercept,
            d.appraiser_effect,
            d.sigma_part,
            d.sigma_appraiser,
            d.sigma_interaction,
            float(status.mean()),
        ),
    }


def _population_by_status(
    eta_part: np.ndarray, status: np.ndarray, sigma_b: np.ndarray, sigma_c: np.ndarray,
    split: bool,
) -> dict[str, np.ndarray]:  # fmt: skip
    """Population decomposition per part when the appraiser scale depends on the part's
    status (``sigma_b`` (S, 2)): parts of each status are integrated with their scale."""
    out: dict[str, np.ndarray] = {}
    for r in (0, 1):
        sel = np.flatnonzero(status == r)
        if sel.size == 0:
            continue
        pieces = decompose_population_logit(
            eta_part[:, sel], np.sqrt(sigma_b[:, r] ** 2 + sigma_c**2)
        )
        if split:
            pieces.update(split_reproducibility_logit(eta_part[:, sel], sigma_b[:, r], sigma_c))
        for key, values in pieces.items():
            out.setdefault(key, np.empty(eta_part.shape))[:, sel] = values
    return out


def latent(posterior: xr.Dataset, spec, study: StudyData, rng) -> LatentDraws:
    if spec.reference_accuracy is not None:
        return _latent_fallible(posterior, spec, study, rng)
    p, base, d, q = probabilities(posterior, study, rng)
    status = study.reference.to_numpy().astype(int)
    eta_part = d.intercept[:, status] + d.part_effect
    split = "sigma_appraiser" in posterior and "sigma_interaction" in posterior
    population = _population_by_status(
        eta_part, status, d.sigma_appraiser, d.sigma_interaction, split
    )
    cells = study.cells
    part, app = cells["part_index"].to_numpy(), cells["appraiser_index"].to_numpy()
    n, k = cells["n"].to_numpy(), cells["s"].to_numpy()
    if "interaction_effect" in posterior:
        log_lik = integrated_cell_log_lik(base[:, part, app], d.sigma_interaction, n, k)
    else:
        eta_cell = base[:, part, app]
        log_lik = log_binom_coef(n, k) + k * log_expit(eta_cell) + (n - k) * log_expit(-eta_cell)
    extra = rate_variables(rates(p, d, study))
    return LatentDraws(p, population, log_lik, extra, q_study=q)


def reference_error_draws(posterior: xr.Dataset, spec, draws: int) -> dict[str, np.ndarray]:
    """Each stated reference error rate as (S,) draws (a fixed rate repeated)."""
    out = {}
    for side, rate in spec.reference_accuracy.rates():
        out[side] = (np.full(draws, rate) if isinstance(rate, float)
                     else draws_of(posterior, REFERENCE_RATE_VARIABLES[side]))  # fmt: skip
    return out


@dataclass(frozen=True)
class FallibleDraws:
    """Per-draw quantities of a fit with a fallible reference."""

    p_if: tuple[np.ndarray, np.ndarray]  # (S, part, appraiser): p drawn were it good / bad
    bad_probability: np.ndarray  # (S, part): P(part bad | calls, reference, draw)
    bad: np.ndarray  # (S, part): the part's true status drawn from that probability
    part_log_lik: np.ndarray  # (S, part): log P(part's calls and reference call | draw)
    params: StatusDraws
    prevalence: np.ndarray  # (S,)
    errors: dict[str, np.ndarray]  # side -> (S,)


FLOATS_PER_BLOCK = 4_000_000
"""Bounds each temporary of the quadrature (draws x patterns x part nodes x appraisers x
cell nodes) to 32 MB, however large the study."""


def _draw_index(weights: np.ndarray, rng: np.random.Generator) -> np.ndarray:
    """One index per row of ``weights`` (..., Q), drawn with those probabilities."""
    cumulative = np.cumsum(weights, axis=-1)
    u = rng.random((*weights.shape[:-1], 1)) * cumulative[..., -1:]
    return np.minimum((cumulative < u).sum(axis=-1), weights.shape[-1] - 1)


def _pattern_block(d: StatusDraws, patterns: ReferencePatterns, rules, rows: slice, rng):
    """For the draws ``rows`` and each status: each pattern's log likelihood with the
    part's and the cells' effects integrated (binomial coefficients in), (B, K); and each
    part's call probabilities (B, I, J) at its effects drawn from their posterior given
    its calls and the status.

    The draw is over the quadrature's nodes with their posterior weights: the discrete
    distribution that has the quadrature's posterior moments. Drawing (not averaging)
    keeps the spread that the parts' unknown effects add to a study-scope rate: with the
    conditional means instead, the system rates' sds came out 0.022 and 0.029 where the
    exact-reference fit's sampled effects give 0.030 and 0.043 (30 x 3 x 2 simulated).
    """
    from scipy.special import logsumexp

    (u, log_wu), (v, log_wv) = rules
    n, k = patterns.n[None, :, None, :, None], patterns.s[None, :, None, :, None]
    coef = log_binom_coef(patterns.n, patterns.s).sum(axis=-1)
    a = d.sigma_part[rows, None, None, None, None] * u[None, None, :, None, None]
    c = d.sigma_interaction[rows, None, None, None, None] * v
    part_of = patterns.part_of
    marginal, drawn = [], []
    for status in (0, 1):
        # (draw, pattern, part node, appraiser, cell node)
        eta = (d.intercept[rows, status, None, None, None, None]
               + d.appraiser_effect[rows, None, None, :, status, None] + a + c)  # fmt: skip
        cell = k * log_expit(eta) + (n - k) * log_expit(-eta) + log_wv
        cell_total = logsumexp(cell, axis=-1)  # (B, K, Q, J)
        at_node = cell_total.sum(axis=-1) + log_wu  # (B, K, Q)
        total = logsumexp(at_node, axis=-1)
        marginal.append(total + coef)
        # each part's own draw: its pattern's node weights, then its cells' given the node
        b_index = np.arange(eta.shape[0])[:, None]
        node = _draw_index(np.exp(at_node - total[..., None])[:, part_of], rng)  # (B, I)
        k_index = part_of[None, :]
        cell_weight = np.exp(cell[b_index, k_index, node] - cell_total[b_index, k_index, node,
                                                                         :, None])  # fmt: skip
        cell_node = _draw_index(cell_weight, rng)  # (B, I, J)
        at = np.broadcast_to(eta, cell.shape)[b_index, k_index, node]  # (B, I, J, V)
        drawn.append(expit(np.take_along_axis(at, cell_node[..., None], axis=-1)[..., 0]))
    return marginal, drawn


def fallible_draws(posterior: xr.Dataset, spec, study: StudyData, rng) -> FallibleDraws:
    """The true status summed out as in the model: per part and draw, the log likelihood
    of its calls and its reference's call under each status (effects integrated), the
    status's posterior probability, the marginal; and the status and the call
    probabilities drawn from their posterior."""
    from scipy.special import logsumexp

    d = status_draws(posterior, study)
    patterns = reference_patterns(study)
    rules = effect_nodes(spec)
    total = d.intercept.shape[0]
    per_draw = patterns.n.size * rules[0][0].size * rules[1][0].size
    block = max(1, FLOATS_PER_BLOCK // per_draw)
    pieces = [_pattern_block(d, patterns, rules, slice(start, start + block), rng)
              for start in range(0, total, block)]  # fmt: skip
    marginal = [np.concatenate([p[0][status] for p in pieces]) for status in (0, 1)]
    p_if = tuple(np.concatenate([p[1][status] for p in pieces]) for status in (0, 1))
    prevalence = draws_of(posterior, "prevalence")
    errors = reference_error_draws(posterior, spec, total)
    with np.errstate(divide="ignore"):
        status_prior = (np.log1p(-prevalence)[:, None], np.log(prevalence)[:, None])
    joint = np.stack([marginal[status] + status_prior[status]
                      + log_reference_given(status, patterns.said_bad, errors)
                      for status in (0, 1)], axis=-1)  # fmt: skip
    pattern_marginal = logsumexp(joint, axis=-1)
    part_of = patterns.part_of
    bad_probability = np.exp(joint[..., 1] - pattern_marginal)[:, part_of]
    bad = rng.random(bad_probability.shape) < bad_probability
    return FallibleDraws(p_if, bad_probability, bad, pattern_marginal[:, part_of], d,
                         prevalence, errors)  # fmt: skip


def _latent_fallible(posterior: xr.Dataset, spec, study: StudyData, rng) -> LatentDraws:
    """Rates against the true status, which each draw draws per part from its posterior
    (and the part's effects with it): the study-scope rates are then the contract's own
    averages over the parts of each status, with the spread that not knowing the
    statuses adds. The population rates weigh the statuses by the prevalence."""
    fd = fallible_draws(posterior, spec, study, rng)
    d = fd.params
    bad = fd.bad.astype(float)
    found = {
        "study": study_rates(fd.p_if[0], fd.p_if[1], bad, called_mask(study)),
        "population": population_rates(d.intercept, d.appraiser_effect, d.sigma_part,
                                       d.sigma_appraiser, d.sigma_interaction, fd.prevalence),
    }  # fmt: skip
    extra = rate_variables(found)
    said_bad = study.reference.to_numpy().astype(float)[None, :]
    extra[("study", "study", "reject_prevalence")] = (bad.mean(axis=1), None)
    extra[("population", "study", "reject_prevalence")] = (fd.prevalence, None)
    extra[("study", "part", "reject_probability")] = (fd.bad_probability, "part")
    wrong = said_bad * (1 - fd.bad_probability) + (1 - said_bad) * fd.bad_probability
    extra[("study", "part", "reference_wrong_probability")] = (wrong, "part")
    for side, rate in spec.reference_accuracy.rates():
        if not isinstance(rate, float):
            extra[("population", "study", f"reference_{side}_rate")] = (fd.errors[side], None)
    p = np.where(fd.bad[:, :, None], fd.p_if[1], fd.p_if[0])
    return LatentDraws(p, {}, fd.part_log_lik, extra, log_lik_dim="part")


def prior_draws(spec: ModelSpec, study: StudyData, rng: np.random.Generator, draws: int):
    intercepts = forward.status_intercepts(spec, rng, draws, ordered=False)
    out = {"intercept": (("status",), intercepts)}
    out.update(forward.group_effects(spec, study, rng, draws, ("part",)))
    out.update(forward.appraiser_by_status(spec, study, rng, draws))
    out.update(forward.group_effects(spec, study, rng, draws, ("interaction",)))
    accuracy = spec.reference_accuracy
    if accuracy is not None:
        out["prevalence"] = ((), forward.draw(accuracy.prevalence, rng, (draws,)))
        for side, rate in accuracy.rates():
            if not isinstance(rate, float):
                out[REFERENCE_RATE_VARIABLES[side]] = ((), forward.draw(rate, rng, (draws,)))
    return out


def cell_probabilities(posterior: xr.Dataset, spec, study: StudyData, rng) -> np.ndarray:
    """The same parts with their reference status (with a fallible reference: their
    status drawn from its posterior in the draw), effects from the draw."""
    part, app = cell_index(study)
    if spec.reference_accuracy is None:
        return probabilities(posterior, study, rng)[0][:, part, app]
    fd = fallible_draws(posterior, spec, study, rng)
    return np.where(fd.bad[:, :, None], fd.p_if[1], fd.p_if[0])[:, part, app]


def hyper_parameters(spec: ModelSpec):
    """The status families' hyper-parameters, and with a fallible reference the
    prevalence and each stated reference error rate."""
    from bayes_rr.families.base import HyperParameter

    out = list(status_hyper_parameters(spec))
    accuracy = spec.reference_accuracy
    if accuracy is not None:
        out.append(HyperParameter("prevalence", ("reference_accuracy", "prevalence_prior"),
                                  accuracy.prevalence))  # fmt: skip
        for side, rate in accuracy.rates():
            if not isinstance(rate, float):
                location = ("reference_accuracy", f"{side}_prior")
                out.append(HyperParameter(REFERENCE_RATE_VARIABLES[side], location, rate))
    return tuple(out)


def stratified_calls(posterior: xr.Dataset, spec, study: StudyData, mix, rng) -> CallNodes:
    """Production as the study's own parts, reweighted to production's strata
    (docs/statistics.md, "Strata"): part i weighs share(s(i)) / (parts of s(i)); its
    calls are the model's p_ij in each draw (an uncalled cell's interaction effect
    from its prior given the draw's scale)."""
    if getattr(spec, "reference_accuracy", None) is not None:
        raise DataError(
            f"{mix.source}: production strata reweight the study's parts by their reference "
            "status, which a fallible reference does not give; state production's share of "
            "bad parts without strata"
        )
    p = probabilities(posterior, study, rng)[0]  # (S, part, appraiser)
    status = study.reference.to_numpy().astype(int)
    stratum = study.stratum.to_numpy()
    shares = mix.stratum_shares()
    counts = {name: int((stratum == name).sum()) for name in shares}
    weight = np.array([shares[s] / counts[s] for s in stratum])
    parts = [np.flatnonzero((status == r) & (weight > 0)) for r in (0, 1)]
    for r, which in enumerate(parts):
        if which.size == 0:
            kind = "bad" if r else "good"
            raise DataError(
                f"{mix.source}: no {kind} part in the strata with a share of production; "
                f"a stratum with {kind} parts needs a share above 0"
            )
    part_weight = tuple(weight[which] / weight[which].sum() for which in parts)

    def calls(block: slice, r: int) -> np.ndarray:
        return p[block][:, parts[r], :, None]

    bad_share = float(weight[parts[1]].sum() / weight.sum())
    return CallNodes(p.shape[0], part_weight, np.ones(1), calls, bad_share=bad_share)


FAMILY = Family(
    info=INFO,
    build=build,
    prior_draws=prior_draws,
    latent=latent,
    cell_probabilities=cell_probabilities,
    hyper_parameters=hyper_parameters,
    memory_per_draw=cell_memory,
    per_status_scales=PER_STATUS_SCALES,
    appraiser_rows=True,
    statements=(*STATEMENTS, *REFERENCE_STATEMENTS),
    simulated=True,
    simulated_parts="reference",
    default_plan_target="study__system__false_accept_rate",
    production_calls=production_calls,
    stratified_calls=stratified_calls,
)
