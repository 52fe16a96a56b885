"""A continuous latent property of each part, no measured value needed (family 6 of
docs/statistics.md).

Each part has a position z_i on the scale of the judged property (a scratch's length, a
colour's depth), z_i ~ N(0, 1) over the population of parts: that population fixes the
scale's origin and unit. Appraiser j rejects with probability F((z_i - t_j) / w_j): a
threshold t_j and a curve scale w_j, hierarchical over appraisers,
t_j = beta + sigma_threshold u_j and w_j = exp(omega + sigma_width v_j). It is the
call-curve model with the measured value unknown, and the two-parameter item response
model with appraisers as items and repeated calls. Unlike the latent class model it
expects borderline parts to draw mixed calls from everyone.

Reproducibility on the latent scale is the spread of the thresholds; repeatability is
the width of each curve. Their ratio (``spread_to_width``) says which dominates, in a
unit the data fix whatever the property's own unit is.
"""

from __future__ import annotations

from dataclasses import dataclass
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
from bayes_rr.families.call_curve import LINKS, WIDTH_TERM
from bayes_rr.families.curves import link_cdf, ten_ninety_factor
from bayes_rr.families.latent_class import UNKNOWN, known_status, pattern_frequencies
from bayes_rr.families.layout import coords
from bayes_rr.families.status import called_mask, rate_variables, study_rates
from bayes_rr.families.terms import FamilyInfo, TermInfo, prior

if TYPE_CHECKING:
    import pymc as pm

    from bayes_rr.priors.spec import ModelSpec
    from bayes_rr.study.data import StudyData

THRESHOLD_TERM = TermInfo(
    "threshold",
    "group",
    prior("half_normal", sigma=0.5),
    "half_normal(0.5) on the spread of the appraisers' thresholds, in sds of the parts' "
    "positions: appraisers rarely place their threshold a whole part-population sd apart.",
)
TRAIT_INTERCEPTS = {
    "threshold_prior": prior("normal", mu=0.0, sigma=1.0),
    "log_width_prior": prior("normal", mu=-1.5, sigma=1.0),
}
TRAIT_INTERCEPTS_WHY = (
    "normal(0, 1) on the typical appraiser's threshold in sds of the parts' positions "
    "(parts are chosen on both sides of it: it lies within the parts' range); "
    "normal(-1.5, 1) on the log of the typical curve scale w (median 0.22 sd, 95% range "
    "0.03 to 1.6 sd; the transition width, 10% to 90% reject, is 4.39 w for the logistic)."
)
INFO = FamilyInfo(
    "latent_trait",
    "latent trait: each part's position z_i ~ N(0, 1) on the judged property's scale, "
    "p_ij = F((z_i - t_j)/w_j) with a threshold t_j and curve scale w_j per appraiser "
    "(docs/statistics.md family 6)",
    {t.name: t for t in (THRESHOLD_TERM, WIDTH_TERM)},
    intercepts=TRAIT_INTERCEPTS,
    links=LINKS,
)
P_FLOOR = 1e-12

IDENTIFICATION_NOTE = (
    "The latent trait model places parts and appraisers on one scale whose origin and unit "
    "are the population of parts (positions z ~ N(0, 1)). It is identified from the "
    "pattern of calls when each part gets enough calls (three or more appraisers, or "
    "repeated trials); its thresholds and widths are in sds of the parts' positions, "
    "not in the property's own unit, which the calls cannot give."
)


def identification_problem(study: StudyData) -> str | None:
    """Why the design cannot identify a threshold and a width per appraiser, or None.

    A part's calls form one of (T + 1)^J patterns (T trials, J appraisers); their
    (T + 1)^J - 1 free frequencies must cover the 2J thresholds and widths (the parts'
    population is fixed).
    """
    trials, count, free = pattern_frequencies(study)
    needed = 2 * count
    if free < needed:
        return (
            f"{count} appraiser(s) with up to {trials} call(s) per part give {free} free "
            f"call-pattern frequencies, fewer than the {needed} thresholds and widths of a "
            "latent trait model: it cannot be identified. Use three or more appraisers, or "
            "repeated trials"
        )
    return None


def build(spec: ModelSpec, study: StudyData) -> pm.Model:
    """z_i ~ N(0, 1); s_ij ~ Binomial(n_ij, F((z_i - t_j) / w_j))."""
    import pymc as pm
    import pytensor.tensor as pt

    from bayes_rr.families.call_curve import link_cdf as pt_link_cdf
    from bayes_rr.families.pymc_parts import appraiser_curve_scales, observed_calls, pymc_prior

    problem = identification_problem(study)
    if problem:
        raise DataError(f"{study.source}: {problem}")
    part, app = cell_index(study)
    n_app = len(study.appraisers)
    with pm.Model(coords=coords(study)) as model:
        threshold = pymc_prior("threshold_mean", spec.intercept_prior("threshold_prior"))
        t = threshold * pt.ones(n_app)
        if spec.has("threshold"):
            spread = pymc_prior("sigma_threshold", spec.term("threshold").prior)
            t = threshold + spread * pm.Normal("threshold_z", 0.0, 1.0, dims="appraiser")
        t = pm.Deterministic("threshold", t, dims="appraiser")
        # The calls tell only z_i - t_j: shifting every position and threshold together
        # leaves them unchanged, a ridge the sampler crossed slowly when z was sampled
        # directly (bulk ESS 141 of 2,000 draws of the typical threshold, 40 x 4 x 3
        # simulated). Positions are sampled as offsets from the appraisers' mean
        # threshold, so the calls pin the offsets and the shift meets only the priors.
        # Same model: z_i = mean(t) + offset_i ~ N(0, 1).
        centre = t.mean()
        status = reference_status(study)
        if status is None:
            offset = pm.Normal("part_offset", -centre, 1.0, dims="part")
            z = pm.Deterministic("part_position", centre + offset, dims="part")
        else:
            z = _positions_with_status(model, centre, study, status)
        w = pm.Deterministic("curve_scale", appraiser_curve_scales(spec, n_app), dims="appraiser")
        p = pt_link_cdf(spec.link, (z[part] - t[app]) / w[app])
        pm.Binomial("s", n=study.cells["n"].to_numpy(), p=pt.clip(p, P_FLOOR, 1 - P_FLOOR),
                    observed=observed_calls(study), dims="cell")  # fmt: skip
    return model


LIMIT_PRIOR = prior("normal", mu=0.0, sigma=1.5)
LIMIT_WHY = (
    "normal(0, 1.5) on the limit between good and bad parts on the latent scale, in sds "
    "of the parts' positions (share of bad parts in the population 1 - Phi(limit): "
    "anything from about 0.002 to 0.998), when some parts have a reference status."
)
SUBSETS = {0: "part_good", 1: "part_bad", UNKNOWN: "part_unknown"}


def reference_status(study: StudyData) -> np.ndarray | None:
    """Each part's status (0 good, 1 bad, -1 unknown) from a reference column, full or
    partial, or None without one."""
    if study.reference is not None:
        return study.reference.reindex(list(study.parts)).to_numpy(dtype=np.int64)
    return known_status(study)


def _positions_with_status(model, centre, study: StudyData, status: np.ndarray):
    """Positions when some parts have a reference status: a bad part lies above the
    limit c on the latent scale and a good one below (the reference is taken as exact).

    z_i = c + softplus(r_i) for a bad part, c - softplus(r_i) for a good one, with the
    density N(z_i; 0, 1) times the Jacobian sigmoid(r_i): the parts' N(0, 1) restricted
    to their side, so the statuses inform c (P(bad) = 1 - Phi(c)). The limit is sampled
    as an offset from the appraisers' mean threshold, as the unknown parts' positions
    are (c ~ N(0, 1.5) either way).
    """
    import pymc as pm
    import pytensor.tensor as pt

    with model:
        mu, sigma = LIMIT_PRIOR.kwargs["mu"], LIMIT_PRIOR.kwargs["sigma"]
        limit_offset = pm.Normal("latent_limit_offset", mu - centre, sigma)
        limit = pm.Deterministic("latent_limit", centre + limit_offset)
        z = pt.zeros(len(study.parts))
        unknown = np.flatnonzero(status == UNKNOWN)
        if unknown.size:
            model.add_coord("part_unknown", [study.parts[i] for i in unknown])
            offset = pm.Normal("part_offset", -centre, 1.0, dims="part_unknown")
            z = pt.set_subtensor(z[unknown], centre + offset)
        for side, sign in ((1, 1.0), (0, -1.0)):
            index = np.flatnonzero(status == side)
            if not index.size:
                continue
            model.add_coord(SUBSETS[side], [study.parts[i] for i in index])
            raw = pm.Flat(f"position_{SUBSETS[side]}", dims=SUBSETS[side])
            position = limit + sign * pt.softplus(raw)
            pm.Potential(f"side_{SUBSETS[side]}",
                         (-0.5 * position**2 + -pt.softplus(-raw)).sum())  # fmt: skip
            z = pt.set_subtensor(z[index], position)
        return pm.Deterministic("part_position", z, dims="part")


def prior_draws(spec: ModelSpec, study: StudyData, rng: np.random.Generator, draws: int):
    n_part, n_app = len(study.parts), len(study.appraisers)
    out = {"part_position": (("part",), rng.standard_normal((draws, n_part)))}
    threshold = forward.draw(spec.intercept_prior("threshold_prior"), rng, (draws,))
    t = np.broadcast_to(threshold[:, None], (draws, n_app))
    out["threshold_mean"] = ((), threshold)
    if spec.has("threshold"):
        spread = forward.draw(spec.term("threshold").prior, rng, (draws,))
        t = t + spread[:, None] * rng.standard_normal((draws, n_app))
        out["sigma_threshold"] = ((), spread)
    out["threshold"] = (("appraiser",), np.array(t))
    drawn, scales = forward.appraiser_curve_scales(spec, rng, draws, n_app)
    out.update(drawn)
    out["curve_scale"] = (("appraiser",), scales)
    if reference_status(study) is not None:
        out["latent_limit"] = ((), forward.draw(LIMIT_PRIOR, rng, (draws,)))
    return out


def call_probabilities(posterior: xr.Dataset, link: str) -> np.ndarray:
    """(S, part, appraiser) reject probabilities at each part's position."""
    z = draws_of(posterior, "part_position")
    t = draws_of(posterior, "threshold")
    w = draws_of(posterior, "curve_scale")
    return link_cdf(link, (z[:, :, None] - t[:, None, :]) / w[:, None, :])


def latent(posterior: xr.Dataset, spec, study: StudyData, rng=None) -> LatentDraws:
    """Call probabilities of the study's parts, the thresholds and widths of each
    appraiser and of the population, and each part's position."""
    p = call_probabilities(posterior, spec.link)
    cells = study.cells
    part, app = cells["part_index"].to_numpy(), cells["appraiser_index"].to_numpy()
    n, k = cells["n"].to_numpy(), cells["s"].to_numpy()
    p_cell = np.clip(p[:, part, app], P_FLOOR, 1 - P_FLOOR)
    log_lik = log_binom_coef(n, k) + k * np.log(p_cell) + (n - k) * np.log1p(-p_cell)
    t = draws_of(posterior, "threshold")
    w = ten_ninety_factor(spec.link) * draws_of(posterior, "curve_scale")
    typical = ten_ninety_factor(spec.link) * np.exp(draws_of(posterior, "log_width_mean"))
    spread = optional_draws(posterior, "sigma_threshold", typical.shape)
    extra = {
        ("study", "appraiser", "threshold"): (t, "appraiser"),
        ("study", "appraiser", "transition_width"): (w, "appraiser"),
        ("study", "system", "threshold_spread"): (t.std(axis=1), None),
        ("study", "system", "transition_width"): (w.mean(axis=1), None),
        ("study", "part", "part_position"): (draws_of(posterior, "part_position"), "part"),
        ("population", "system", "threshold"): (draws_of(posterior, "threshold_mean"), None),
        ("population", "system", "threshold_spread"): (spread, None),
        ("population", "system", "transition_width"): (typical, None),
        ("population", "system", "spread_to_width"): (spread / typical, None),
    }
    if "latent_limit" in posterior:
        extra.update(_wrong_calls(posterior, p, study, spec.link))
    return LatentDraws(p, {}, log_lik, extra,
                       part_log_lik=part_log_likelihood(posterior, spec.link, study))  # fmt: skip


def _wrong_calls(posterior: xr.Dataset, p: np.ndarray, study: StudyData, link: str) -> dict:
    """With a reference for some parts: each part is bad when its position lies above the
    latent limit (per draw; a part with a reference lies on its side), and the study-scope
    rates follow as for the other wrong-call models."""
    from scipy.special import ndtr

    limit = draws_of(posterior, "latent_limit")
    bad = (draws_of(posterior, "part_position") > limit[:, None]).astype(float)
    rates = study_rates(p, p, bad, called_mask(study))
    out = {("study", level, key): (values, "appraiser" if level == "appraiser" else None)
           for level, keys in rates.items() for key, values in keys.items()}  # fmt: skip
    out[("study", "system", "latent_limit")] = (limit, None)
    out[("study", "study", "reject_prevalence")] = (bad.mean(axis=1), None)
    out[("population", "study", "reject_prevalence")] = (1.0 - ndtr(limit), None)
    out.update(rate_variables({"population": population_rates(posterior, link)}))
    return out


SIDE_NODES = 400
"""Equal-probability slices of the parts' population on each side of the latent limit
(a node at each slice's midpoint in probability): a part of a status is drawn from
N(0, 1) restricted to its side, and these nodes integrate a call probability over it to
within 2e-5 for curve scales 0.03 to 1 (measured; the tests hold 5e-5 against
scipy.integrate.quad)."""
NEW_APPRAISER_NODES = 100
"""Side nodes for a new appraiser, whose curve (averaged over thresholds and widths) is
smoother than any one appraiser's: error below 2e-5 against 20,000 nodes, measured for
threshold sds 0.02-0.5 and curve scales 0.03-1."""
WIDTH_NODES = 8
"""Gauss-Hermite nodes over a new appraiser's log curve scale (as exact as 16 and 40,
measured, for width sds up to 0.5)."""


def side_positions(limit: np.ndarray, count: int = SIDE_NODES) -> tuple[np.ndarray, np.ndarray]:
    """(S, count) positions of good parts (below the limit) and of bad ones (above): the
    midpoints, in probability, of ``count`` equal slices of N(0, 1) on each side; each
    node weighs 1 / count."""
    from scipy.special import ndtr, ndtri

    u = (np.arange(count) + 0.5) / count
    limit = np.asarray(limit, dtype=float)[:, None]
    good = ndtri(u * ndtr(limit))
    bad = -ndtri(u * ndtr(-limit))  # z > c is -z < -c: no loss of digits when c is large
    return good, bad


@dataclass(frozen=True)
class AppraiserPopulation:
    """Per-draw parameters of the appraisers' population (S = draws): thresholds
    t ~ N(beta, sigma_threshold^2), log curve scales ~ N(omega, sigma_width^2); a
    spread the spec leaves out is 0 (None for the width)."""

    beta: np.ndarray
    sigma_threshold: np.ndarray
    omega: np.ndarray
    sigma_width: np.ndarray | None

    @classmethod
    def of(cls, posterior: xr.Dataset) -> AppraiserPopulation:
        omega = draws_of(posterior, "log_width_mean")
        width = draws_of(posterior, "sigma_width") if "sigma_width" in posterior else None
        spread = optional_draws(posterior, "sigma_threshold", omega.shape)
        return cls(draws_of(posterior, "threshold_mean"), spread, omega, width)


def new_appraiser_probability(
    z: np.ndarray, population: AppraiserPopulation, link: str, rows: slice = slice(None)
) -> np.ndarray:
    """E[F((z - t) / w)] over a new appraiser drawn from ``population``, at positions
    ``z`` (S, K) of the draws ``rows``.

    The threshold is integrated in closed form for the normal link
    (Phi((z - beta) / sqrt(w^2 + sigma_t^2))) and as P(w L + sigma_t U <= z - beta) for
    the logistic one (L logistic, U normal: :func:`~bayes_rr.core.kernels.
    logistic_plus_normal_cdf`); the log width by Gauss-Hermite."""
    from scipy.special import ndtr

    from bayes_rr.core.kernels import logistic_plus_normal_cdf
    from bayes_rr.families.status import normal_nodes

    offset = z - population.beta[rows, None]
    sigma_t = population.sigma_threshold[rows]
    omega = population.omega[rows]
    if population.sigma_width is None:
        v, weight, sigma_w = np.zeros(1), np.ones(1), np.zeros_like(omega)
    else:
        (v, weight), sigma_w = normal_nodes(WIDTH_NODES), population.sigma_width[rows]
    total = np.zeros(z.shape)
    for node, share in zip(v, weight, strict=True):
        w = np.exp(omega + sigma_w * node)
        if link == "probit":
            p = ndtr(offset / np.sqrt(w**2 + sigma_t**2)[:, None])
        else:
            p = logistic_plus_normal_cdf(offset, w, sigma_t)
        total += share * p
    return total


def population_rates(posterior: xr.Dataset, link: str) -> dict[str, dict[str, np.ndarray]]:
    """Population-scope rates with a latent limit c: a new part of each status (its
    position from N(0, 1) on its side of c), called by each study appraiser (level
    ``appraiser``) or by a new appraiser (level ``system``); the agreement weighs the
    statuses by the population's bad share 1 - Phi(c)."""
    from scipy.special import ndtr

    limit = draws_of(posterior, "latent_limit")
    t = draws_of(posterior, "threshold")
    w = draws_of(posterior, "curve_scale")
    population = AppraiserPopulation.of(posterior)
    # one call is a reject with this probability, by level and status (0 good, 1 bad)
    study_appraisers = np.empty((2, *t.shape))
    new_appraiser = np.empty((2, limit.size))
    for start in range(0, limit.size, SIDE_BLOCK):
        rows = slice(start, start + SIDE_BLOCK)
        sides = side_positions(limit[rows])
        coarse = side_positions(limit[rows], NEW_APPRAISER_NODES)
        for status in (0, 1):
            z = sides[status]
            p = link_cdf(link, (z[:, :, None] - t[rows, None, :]) / w[rows, None, :])
            study_appraisers[status, rows] = p.mean(axis=1)
            new_appraiser[status, rows] = new_appraiser_probability(
                coarse[status], population, link, rows).mean(axis=1)  # fmt: skip
    bad_share = 1.0 - ndtr(limit)

    def rates(reject: np.ndarray, share: np.ndarray) -> dict[str, np.ndarray]:
        frr, far = reject[0], 1.0 - reject[1]
        agreement = (1 - share) * (1 - frr) + share * (1 - far)
        return {"false_reject_rate": frr, "false_accept_rate": far,
                "reference_agreement": agreement}  # fmt: skip

    return {"appraiser": rates(study_appraisers, bad_share[:, None]),
            "system": rates(new_appraiser, bad_share)}  # fmt: skip


SIDE_BLOCK = 200
"""Posterior draws per block of the side integrals (bounds draws x nodes x appraisers)."""


def production_calls(posterior: xr.Dataset, spec, study: StudyData, mix) -> CallNodes:
    """The study's appraisers on production parts: a production part of a status lies on
    its side of the latent limit, spread as the study's part population is there
    (N(0, 1) restricted to the side); the line's bad share comes from the production
    file, since the study's parts were chosen, not sampled from the line."""
    if "latent_limit" not in posterior:
        raise DataError(
            f"{mix.source}: the latent trait model gives production figures only when some "
            "parts have a reference status (it places the limit on the latent scale); add a "
            "reference column, or leave the production file out"
        )
    limit = draws_of(posterior, "latent_limit")
    t = draws_of(posterior, "threshold")
    w = draws_of(posterior, "curve_scale")
    weight = np.full(SIDE_NODES, 1.0 / SIDE_NODES)

    def probabilities(block: slice, status: int) -> np.ndarray:
        z = side_positions(limit[block])[status]
        p = link_cdf(spec.link, (z[:, :, None] - t[block, None, :]) / w[block, None, :])
        return p[..., None]  # one inner node: no appraiser-by-part term

    return CallNodes(limit.size, (weight, weight), np.ones(1), probabilities)


POSITION_GRID = np.linspace(-7.0, 7.0, 701)
"""Nodes of the trapezoid rule over a part's position z ~ N(0, 1) (spacing 0.02): a part's
likelihood in z is a product of curves as steep as the narrowest width, which a
Gauss-Hermite rule of modest size integrates badly; the grid keeps the error below
1e-6 in the log for curve scales down to about 0.02 (checked against
scipy.integrate.quad in the tests)."""
FLOATS_PER_BLOCK = 20_000_000


def part_log_likelihood(posterior: xr.Dataset, link: str, study: StudyData) -> np.ndarray:
    """(S, part) log P(part i's calls | thresholds, widths), its position integrated over
    N(0, 1): the unit a latent class fit's likelihood has (binomial coefficients in)."""
    from scipy.special import logsumexp

    t = draws_of(posterior, "threshold")
    w = draws_of(posterior, "curve_scale")
    cells = study.cells
    shape = (len(study.parts), len(study.appraisers))
    n, s = np.zeros(shape), np.zeros(shape)
    part, app = cells["part_index"].to_numpy(), cells["appraiser_index"].to_numpy()
    n[part, app] = cells["n"].to_numpy()
    s[part, app] = cells["s"].to_numpy()
    coef = np.bincount(part, log_binom_coef(cells["n"].to_numpy(), cells["s"].to_numpy()),
                       minlength=shape[0])  # fmt: skip
    z = POSITION_GRID
    step = z[1] - z[0]
    log_weight = -0.5 * z**2 - 0.5 * np.log(2 * np.pi) + np.log(step)
    log_weight[[0, -1]] += np.log(0.5)
    block = max(1, FLOATS_PER_BLOCK // (shape[0] * z.size))
    out = np.empty((t.shape[0], shape[0]))
    for start in range(0, t.shape[0], block):
        rows = slice(start, start + block)
        arg = (z[None, :, None] - t[rows, None, :]) / w[rows, None, :]  # (B, K, J)
        p = np.clip(link_cdf(link, arg), P_FLOOR, 1 - P_FLOOR)
        at_node = (np.einsum("ij,bkj->bik", s, np.log(p))
                   + np.einsum("ij,bkj->bik", n - s, np.log1p(-p)))  # fmt: skip
        out[rows] = logsumexp(at_node + log_weight, axis=-1) + coef
    return out


def cell_probabilities(posterior: xr.Dataset, spec, study: StudyData, rng) -> np.ndarray:
    part, app = cell_index(study)
    return call_probabilities(posterior, spec.link)[:, part, app]


def hyper_parameters(spec: ModelSpec):
    """The intercepts' and the terms' stated priors, and the latent limit's (a fit of a
    study with a reference has it; without one it is absent and skipped)."""
    intercepts = [
        HyperParameter(variable, ("intercept", key), spec.intercept_prior(key))
        for variable, key in (
            ("threshold_mean", "threshold_prior"),
            ("log_width_mean", "log_width_prior"),
        )
    ]
    limit = HyperParameter("latent_limit", ("latent_limit", "prior"), LIMIT_PRIOR)
    return (*intercepts, *term_hyper_parameters(spec), limit)


FAMILY = Family(
    info=INFO,
    build=build,
    prior_draws=prior_draws,
    latent=latent,
    cell_probabilities=cell_probabilities,
    hyper_parameters=hyper_parameters,
    memory_per_draw=cell_memory,
    appraiser_rows=True,
    identification_note=IDENTIFICATION_NOTE,
    simulated=True,
    simulated_parts="positions",
    partial_reference=True,
    full_reference=True,
    production_calls=production_calls,
    production_needs_reference=True,
    default_plan_target="study__study__reproducibility_variance",
    mode_advice=(
        "a more informative prior on the typical threshold or width, or a model without "
        "the width term (one width for every appraiser), usually leaves one mode",
    ),
)
