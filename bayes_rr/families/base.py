"""The one interface every model family answers, and the pieces its answers share.

The steps after sampling never branch on a family's name: they ask the family
(:class:`Family`) for its defaults, its model, its prior draws, its call
probabilities and estimands, its replicated calls and its hyper-parameters. This
module never imports PyMC.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, field
from typing import TYPE_CHECKING

import numpy as np
import xarray as xr

from bayes_rr.families.terms import UNCONSTRAINED, FamilyInfo

if TYPE_CHECKING:
    from bayes_rr.core.distributions import Prior
    from bayes_rr.priors.spec import ModelSpec
    from bayes_rr.study.data import StudyData


@dataclass(frozen=True)
class LatentDraws:
    """Per-draw latent quantities of a fit, the input of every estimand.

    ``p_study`` is None for a family without call probabilities per cell (latent
    class: the class of a part is summed out); ``extra`` holds family-specific
    estimands, ``(scope, level, key) -> (draws, dim or None)``; ``log_lik_dim`` is the
    unit of the log likelihood (``cell``, or ``part`` when the likelihood does not
    factor over a part's cells).
    """

    p_study: np.ndarray | None  # (S, part, appraiser)
    population: dict[str, np.ndarray]  # per-part population decomposition, (S, part)
    cell_log_lik: np.ndarray  # (S, cell or part): log P(calls | parameters), for LOO
    extra: dict = field(default_factory=dict)
    log_lik_dim: str = "cell"
    q_study: np.ndarray | None = None
    """1 - p_study computed without cancellation (expit(-eta), or from gamma variates),
    so p(1 - p) stays positive where p rounds to 1; None: 1 - p_study is used."""
    part_log_lik: np.ndarray | None = None
    """(S, part) log likelihood of each part's calls with the part's own latent quantity
    integrated out, for comparing by PSIS-LOO with a model whose unit is a part (latent
    class); None when the family does not give it."""


@dataclass(frozen=True)
class HyperParameter:
    """A posterior variable whose prior the spec states.

    ``status`` names the one element of a ``status`` dimension the prior is for
    (status families state one intercept prior per status); ``None`` means the prior
    applies to every element of the variable.
    """

    variable: str
    location: tuple[str, ...]
    prior: Prior
    status: str | None = None

    @property
    def label(self) -> str:
        return self.variable if self.status is None else f"{self.variable}[{self.status}]"

    @property
    def scale(self) -> str:
        return UNCONSTRAINED[self.prior.support]


@dataclass(frozen=True)
class CallNodes:
    """Call probabilities of the study's appraisers on production parts, at quadrature
    nodes (docs/statistics.md, "A production part and its calls").

    ``probabilities(block, status)`` gives, for the posterior draws ``block`` (a slice)
    and parts of ``status`` (0 good, 1 bad), the array (draws, part node, appraiser,
    inner node): part nodes over a part's own variation within its status
    (``part_weight[status]``, summing to 1), inner nodes over the appraiser-by-part
    variation (``inner_weight``, summing to 1). Repeat calls of one appraiser are
    independent given the inner node; different appraisers' calls are independent given
    the part node. ``bad_share`` is set when the family's production input fixes it (a
    call curve's production distribution of the measured value).
    """

    draws: int
    part_weight: tuple[np.ndarray, np.ndarray]
    inner_weight: np.ndarray
    probabilities: Callable[[slice, int], np.ndarray]
    bad_share: float | None = None


Variables = dict[str, tuple[tuple[str, ...], np.ndarray]]
"""Forward prior draws: name -> (dims after the draw axis, values (draws, ...))."""


@dataclass(frozen=True)
class Family:
    """A model family: everything the steps before and after sampling ask of it.

    ``build(spec, study)`` returns the PyMC model (PyMC is imported when it is
    called); ``prior_draws(spec, study, rng, draws)`` draws the parameters forward in
    numpy with the builder's names and dims; ``latent(posterior, spec, study, rng)``
    turns posterior draws into call probabilities and family-specific estimands;
    ``cell_probabilities(posterior, spec, study, rng)`` gives the (S, cell) call
    probabilities the predictive check replicates calls from;
    ``hyper_parameters(spec)`` lists which variable carries which stated prior.
    """

    info: FamilyInfo
    build: Callable
    prior_draws: Callable[..., Variables]
    latent: Callable[..., LatentDraws]
    cell_probabilities: Callable[..., np.ndarray]
    hyper_parameters: Callable[[ModelSpec], tuple[HyperParameter, ...]]
    memory_per_draw: Callable[[int, int, int], int]
    """Floats a draw needs at the fit's peak, from (parts, appraisers, cells)."""
    per_status_scales: tuple[str, ...] = ()
    """Variables with one stated prior but a value per status (separate earlier-study
    factors per status)."""
    appraiser_rows: bool = False
    """Whether the study-scope call rate and repeatability of each appraiser are results
    (appraisers identified across parts)."""
    statements: tuple[str, ...] = ()
    """The statement kinds of ``bayes-rr prior`` that this family takes."""
    partial_reference: bool = False
    """Whether the family takes a reference given for some parts only (the others'
    status inferred)."""
    full_reference: bool = False
    """Whether the family takes a reference status for every part without needing it
    (a reference column is then not an ignored option)."""
    dependence_check: bool = False
    """Whether the predictive check's dependence statistics speak against the family's
    assumption (calls independent given a part's class)."""
    simulated: bool = False
    """Whether studies can be simulated from the model (plan, calibrate)."""
    build_sampled: Callable | None = None
    """``build_sampled(spec, study, integrate)``: a model with the same posterior that the
    sampler runs instead of ``build``'s (reparameterized, some effects integrated out);
    None: the sampler runs ``build``'s."""
    complete: Callable | None = None
    """``complete(posterior, spec, study, rng) -> (posterior, rule check)``: the draws of
    ``build``'s variables from those of ``build_sampled``'s."""
    sampled_form: Callable | None = None
    """``sampled_form(spec, study, integrate) -> str``: what ``build_sampled`` samples."""
    simulated_parts: str = "drawn"
    """What a simulated study's parts are and what ``--part-mix`` sets: ``drawn`` (from
    the prior's population; the mix picks borderline parts from a pool), ``reference``
    (a reference status per part; the mix is the share of reject parts), ``class`` (a
    hidden status per part; the mix, when given, fixes the share of reject parts) or
    ``values`` (a measured value per part and a limit; the mix is the share of parts
    beyond the limit) or ``positions`` (a latent position per part from the population
    that fixes the model's scale; no mix)."""
    simulate_calls: Callable[..., tuple[xr.Dataset, np.ndarray]] | None = None
    """``(spec, layout, truth, rng, reject_share)`` -> (truth completed with the study's
    own effects, reject counts (sims, cells)), for a family whose calls are not an
    observed variable of its PyMC model; None: PyMC draws the calls forward."""
    default_plan_target: str = "study__study__reproducibility_variance"
    production_calls: Callable[..., CallNodes] | None = None
    """``(posterior, spec, study, mix)`` -> :class:`CallNodes`: the family's calls on
    production parts; None for a family without wrong-call rates."""
    production_needs_reference: bool = False
    """Whether production figures need some parts with a reference status (the latent
    trait model places the limit on its scale from them)."""
    stratified_calls: Callable[..., CallNodes] | None = None
    """``(posterior, spec, study, mix, rng)`` -> :class:`CallNodes` over the study's own
    parts, weighted to production's strata (a family with each part's known status);
    None: strata cannot be reweighted."""
    guard_band_scale: Callable[..., float] | None = None
    """``(spec, study)`` -> the scale a guard band is searched on, for a family whose
    ``production_calls`` takes ``guard`` (a gauge limit moved inward); None: no guard
    band."""
    model_notes: tuple[str, ...] = ()
    """Sentences the report's model section adds about this family's assumptions."""
    cautions: tuple[str, ...] = ()
    """Items the report's cautions add for this family."""
    mode_advice: tuple[str, ...] = (
        "a more informative prior on that quantity, or a model without the term behind "
        "it, usually leaves one mode",
    )
    """What helps this family when its chains settle in separate modes."""
    identification_note: str | None = None
    weak_identification: Callable[[xr.Dataset, float], str | None] | None = None

    @property
    def name(self) -> str:
        return self.info.name

    @property
    def takes_production(self) -> bool:
        """Whether the family turns a production file into production-scope results."""
        return self.production_calls is not None

    def find_hyper_parameter(
        self, spec: ModelSpec, variable: str, status: str | None
    ) -> HyperParameter | None:
        """The hyper-parameter a factor about ``variable`` (and ``status``) refers to: a
        factor per status of a variable with one prior but a value per status refers to
        that one prior."""
        per_status = variable in self.per_status_scales
        for hyper in self.hyper_parameters(spec):
            if hyper.variable != variable:
                continue
            if hyper.status == status:
                return hyper
            if hyper.status is None and status in ("accept", "reject") and per_status:
                return hyper
        return None


# ---------------------------------------------------------------------------
# pieces the families share


def draws_of(posterior: xr.Dataset, name: str) -> np.ndarray:
    """(S, ...) array of a posterior variable with chain and draw stacked."""
    values = posterior[name].transpose("chain", "draw", ...).to_numpy()
    return values.reshape((-1, *values.shape[2:]))


def optional_draws(posterior: xr.Dataset, name: str, shape: tuple[int, ...]) -> np.ndarray:
    """Like :func:`draws_of`, zeros of ``shape`` for a variable the model lacks."""
    return draws_of(posterior, name) if name in posterior else np.zeros(shape)


def term_hyper_parameters(spec: ModelSpec, scale_variables: dict[str, str] | None = None):
    """The hyper-parameters of the spec's terms (group scales and fixed coefficients)."""
    names = scale_variables or {}
    out = []
    for term in spec.terms:
        if term.kind == "group":
            variable = names.get(term.name, f"sigma_{term.name}")
            out.append(HyperParameter(variable, ("terms", term.name, "scale_prior"), term.prior))
        else:
            out.append(
                HyperParameter("reference_effect", ("terms", term.name, "prior"), term.prior)
            )
    return out


def single_intercept(spec: ModelSpec) -> HyperParameter:
    return HyperParameter("intercept", ("intercept", "prior"), spec.intercept)


def status_intercept_hypers(spec: ModelSpec) -> list[HyperParameter]:
    accept, reject = spec.status_intercepts
    return [
        HyperParameter("intercept", ("intercept", "accept_prior"), accept, "accept"),
        HyperParameter("intercept", ("intercept", "reject_prior"), reject, "reject"),
    ]


def cell_index(study: StudyData) -> tuple[np.ndarray, np.ndarray]:
    """Part and appraiser index of each observed cell."""
    cells = study.cells
    return cells["part_index"].to_numpy(), cells["appraiser_index"].to_numpy()


def cell_memory(parts: int, appraisers: int, cells: int) -> int:
    """Per draw: the parameters and their deterministic copies (about twice parts +
    appraisers + cells), every per-part estimand in both scopes (about 20 per part), the
    latent call probabilities and their temporaries (about 8 per part and appraiser) and
    the cell log likelihood."""
    return 2 * (parts + appraisers + cells) + 20 * parts + 8 * parts * appraisers + cells


def part_linear_predictor(posterior: xr.Dataset, study: StudyData) -> np.ndarray:
    """(S, part) logit of the call rate of each part for a typical appraiser, in the
    families with one intercept: intercept + part effect (+ reference effect times the
    reference status)."""
    intercept = draws_of(posterior, "intercept")
    s = intercept.shape[0]
    shift = np.zeros((s, len(study.parts)))
    if "reference_effect" in posterior and study.reference is not None:
        beta = draws_of(posterior, "reference_effect")
        shift = beta[:, None] * study.reference.to_numpy(dtype=float)[None, :]
    return intercept[:, None] + optional_draws(posterior, "part_effect", shift.shape) + shift
