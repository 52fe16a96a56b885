"""PyMC pieces shared by the family builders (imported only while a model is built):
priors as PyMC variables, group effects, the choice of parameterization."""

from __future__ import annotations

from typing import TYPE_CHECKING

import numpy as np
import pymc as pm

from bayes_rr.core.distributions import Prior
from bayes_rr.families.layout import (  # noqa: F401 (re-exported)
    APPRAISER_CORRELATION_ETA,
    STATUSES,
    coords,
)
from bayes_rr.families.terms import AUTO_MANY_LEVELS, AUTO_MANY_LEVELS_MIN_CALLS, AUTO_MIN_LEVELS

if TYPE_CHECKING:
    from bayes_rr.priors.spec import ModelSpec, TermSpec
    from bayes_rr.study.data import StudyData

PYMC_DISTRIBUTIONS = {
    "normal": pm.Normal,
    "student_t": pm.StudentT,
    "half_normal": pm.HalfNormal,
    "half_student_t": pm.HalfStudentT,
    "exponential": pm.Exponential,
    "gamma": pm.Gamma,
    "beta": pm.Beta,
    "lognormal": pm.LogNormal,
    "logit_normal": pm.LogitNormal,
}


def pymc_prior(name: str, prior: Prior, **kwargs) -> pm.Distribution:
    """The PyMC random variable for ``prior`` (the spec layer validated its parameters)."""
    return PYMC_DISTRIBUTIONS[prior.distribution](name, **prior.kwargs, **kwargs)


def pymc_prior_dist(prior: Prior, **kwargs):
    """The unnamed PyMC distribution of ``prior`` (e.g. the sd_dist of a covariance)."""
    return PYMC_DISTRIBUTIONS[prior.distribution].dist(**prior.kwargs, **kwargs)


def calls_per_level(study: StudyData, term: str) -> np.ndarray:
    """Number of calls behind each level of a group term."""
    cells = study.cells
    if term == "part":
        return cells.groupby("part_index")["n"].sum().to_numpy()
    if term == "appraiser":
        return cells.groupby("appraiser_index")["n"].sum().to_numpy()
    return cells["n"].to_numpy()


def resolve_parameterization(term: TermSpec, study: StudyData) -> str:
    """``centered`` or ``noncentered`` for a group term (``auto`` decided from the data)."""
    if term.parameterization != "auto":
        return term.parameterization
    calls = calls_per_level(study, term.name)
    informative = calls.min() >= term.auto_min_calls and calls.size >= AUTO_MIN_LEVELS
    many = (calls.size >= AUTO_MANY_LEVELS
            and calls.min() >= min(term.auto_min_calls, AUTO_MANY_LEVELS_MIN_CALLS))  # fmt: skip
    return "centered" if informative or many else "noncentered"


def parameterizations(spec: ModelSpec, study: StudyData) -> dict[str, str]:
    """Resolved parameterization of every group term (recorded with each fit)."""
    return {t.name: resolve_parameterization(t, study) for t in spec.terms if t.kind == "group"}


def group_effect(name: str, scale, dims: str, parameterization: str):
    """Zero-mean normal effects with standard deviation ``scale``, centered or not."""
    if parameterization == "centered":
        return pm.Normal(name, mu=0.0, sigma=scale, dims=dims)
    raw = pm.Normal(f"{name}_z", mu=0.0, sigma=1.0, dims=dims)
    return pm.Deterministic(name, raw * scale, dims=dims)


OBSERVED_CALLS = "observed_calls"
"""Name of the shared variable that holds the reject counts per cell: a compiled model
takes another study of the same design by replacing it (``with_data``), no compile."""


def observed_calls(study: StudyData):
    """The reject counts as model data, so that they can be replaced after compiling."""
    return pm.Data(OBSERVED_CALLS, study.cells["s"].to_numpy(), dims="cell")


def status_intercepts(spec: ModelSpec, *, ordered: bool = False):
    """Intercepts (accept, reject) with dims ``status``; ``ordered`` keeps reject > accept
    (the latent class family's guard against label switching)."""
    accept, reject = spec.status_intercepts  # type: ignore[misc]
    if accept.distribution == reject.distribution == "normal" and ordered:
        mus = [accept.kwargs["mu"], reject.kwargs["mu"]]
        sigmas = [accept.kwargs["sigma"], reject.kwargs["sigma"]]
        return pm.Normal(
            "intercept",
            mu=mus,
            sigma=sigmas,
            dims="status",
            transform=pm.distributions.transforms.ordered,
            initval=[min(mus[0], mus[1] - 1.0), max(mus[1], mus[0] + 1.0)],
        )
    if ordered:
        raise ValueError("ordered status intercepts need normal priors")
    low = pymc_prior("intercept_accept", accept)
    high = pymc_prior("intercept_reject", reject)
    return pm.Deterministic("intercept", pm.math.stack([low, high]), dims="status")


def appraiser_by_status(term: TermSpec) -> tuple:
    """(appraiser, status) effects, correlated within an appraiser, noncentered.

    b_j,accept = s_0 z_j0 and b_j,reject = s_1 (rho z_j0 + sqrt(1 - rho^2) z_j1), with
    the scales s from the term's prior and the correlation rho from an LKJ(eta) prior,
    which for two effects is (rho + 1)/2 ~ Beta(eta, eta). (Written out rather than with
    a Cholesky factor: the same model, easier geometry for the sampler with few
    appraisers, and no matrix product to compile.) Returns the (accept, reject) effect
    vectors; ``appraiser_effect`` (appraiser, status) is recorded as a deterministic.
    """
    scales = pymc_prior("sigma_appraiser", term.prior, dims="status")
    half = pm.Beta("appraiser_correlation_unit", APPRAISER_CORRELATION_ETA,
                   APPRAISER_CORRELATION_ETA)  # fmt: skip
    rho = pm.Deterministic("appraiser_correlation", 2.0 * half - 1.0)
    z = pm.Normal("appraiser_effect_z", 0.0, 1.0, dims=("appraiser", "status"))
    accept = scales[0] * z[:, 0]
    reject = scales[1] * (rho * z[:, 0] + pm.math.sqrt(1.0 - rho**2) * z[:, 1])
    pm.Deterministic(
        "appraiser_effect", pm.math.stack([accept, reject], axis=1), dims=("appraiser", "status")
    )
    return accept, reject


def by_status(accept, reject, status: np.ndarray):
    """Per element: ``accept`` where ``status`` is 0, ``reject`` where it is 1 (a constant
    0/1 array); elementwise arithmetic, cheaper to compile than 2-D fancy indexing."""
    weight = np.asarray(status, dtype=float)
    return accept * (1.0 - weight) + reject * weight


def reference_term(spec: ModelSpec, study: StudyData, part_index: np.ndarray):
    """beta * r_i per cell when the spec has a reference term and the data a reference."""
    term = spec.term("reference")
    if term is None or study.reference is None:
        return 0.0
    beta = pymc_prior("reference_effect", term.prior)
    return beta * study.reference.to_numpy(dtype=float)[part_index]


def add_earlier_study(model: pm.Model, spec: ModelSpec) -> None:
    """Multiply the stated priors by the earlier study's factors, each raised to the
    study's weight: ``weight * log N(u; mu, sigma)`` on the unconstrained scale ``u``."""
    transforms = {
        "identity": lambda x: x,
        "log": pm.math.log,
        "logit": pm.math.logit,
    }
    weight = spec.earlier.weight
    with model:
        for factor in spec.earlier.factors:
            if factor.parameter not in model.named_vars:
                continue  # a term the new data cannot carry (e.g. no reference column)
            value = model[factor.parameter]
            if factor.status is not None:
                value = value[STATUSES.index(factor.status)]
            u = transforms[factor.scale](value)
            label = factor.parameter if factor.status is None else (
                f"{factor.parameter}_{factor.status}")  # fmt: skip
            pm.Potential(
                f"earlier_{label}", (weight * -0.5 * ((u - factor.mu) / factor.sigma) ** 2).sum()
            )


def appraiser_curve_scales(spec: ModelSpec, appraisers: int):
    """exp(omega + sigma_width v_j) per appraiser, in the curve's own units (call curve,
    latent trait): ``log_width_mean``, and ``sigma_width`` with ``width_z`` when the spec
    has the width term."""
    import pytensor.tensor as pt

    log_width = pymc_prior("log_width_mean", spec.intercept_prior("log_width_prior"))
    if not spec.has("width"):
        return pt.exp(log_width) * pt.ones(appraisers)
    spread = pymc_prior("sigma_width", spec.term("width").prior)
    u = pm.Normal("width_z", 0.0, 1.0, dims="appraiser")
    return pt.exp(log_width + spread * u)
