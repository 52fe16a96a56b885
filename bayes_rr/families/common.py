"""Pieces shared by the family builders: priors as PyMC variables, group effects,
the choice of parameterization."""

from __future__ import annotations

import numpy as np
import pymc as pm

from bayes_rr.data import StudyData
from bayes_rr.family_table import AUTO_MIN_LEVELS
from bayes_rr.priors import Prior
from bayes_rr.spec import ModelSpec, TermSpec


def pymc_prior(name: str, prior: Prior, **kwargs) -> pm.Distribution:
    """The PyMC random variable for ``prior``."""
    k = prior.kwargs
    dist = prior.distribution
    if dist == "normal":
        return pm.Normal(name, mu=k["mu"], sigma=k["sigma"], **kwargs)
    if dist == "student_t":
        return pm.StudentT(name, nu=k["nu"], mu=k["mu"], sigma=k["sigma"], **kwargs)
    if dist == "half_normal":
        return pm.HalfNormal(name, sigma=k["sigma"], **kwargs)
    if dist == "half_student_t":
        return pm.HalfStudentT(name, nu=k["nu"], sigma=k["sigma"], **kwargs)
    if dist == "exponential":
        return pm.Exponential(name, lam=k["lam"], **kwargs)
    if dist == "gamma":
        return pm.Gamma(name, alpha=k["alpha"], beta=k["beta"], **kwargs)
    if dist == "beta":
        return pm.Beta(name, alpha=k["alpha"], beta=k["beta"], **kwargs)
    raise ValueError(f"unknown distribution {dist!r}")  # the spec layer validated it


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
    return "centered" if informative else "noncentered"


def parameterizations(spec: ModelSpec, study: StudyData) -> dict[str, str]:
    """Resolved parameterization of every group term (recorded with each fit)."""
    return {t.name: resolve_parameterization(t, study) for t in spec.terms if t.kind == "group"}


def group_effect(name: str, scale, dims: str, parameterization: str):
    """Zero-mean normal effects with standard deviation ``scale``, centered or not."""
    if parameterization == "centered":
        return pm.Normal(name, mu=0.0, sigma=scale, dims=dims)
    raw = pm.Normal(f"{name}_z", mu=0.0, sigma=1.0, dims=dims)
    return pm.Deterministic(name, raw * scale, dims=dims)


def coords(study: StudyData) -> dict[str, list[str]]:
    cells = study.cells
    return {
        "part": list(study.parts),
        "appraiser": list(study.appraisers),
        "cell": [f"{p} | {a}" for p, a in zip(cells["part"], cells["appraiser"], strict=True)],
    }


def reference_term(spec: ModelSpec, study: StudyData, part_index: np.ndarray):
    """beta * r_i per cell when the spec has a reference term and the data a reference."""
    term = spec.term("reference")
    if term is None or study.reference is None:
        return 0.0
    beta = pymc_prior("reference_effect", term.prior)
    return beta * study.reference.to_numpy(dtype=float)[part_index]
