"""The hyper-parameters of each family: which posterior variable carries which prior of
the spec, on which unconstrained scale, and their log prior density at posterior draws.

One table serves three steps: the log prior that power-scaling sensitivity scales
(:mod:`bayes_rr.priors.sensitivity`), the earlier-study prior built from a fit's draws
(:mod:`bayes_rr.priors.earlier`), and the checks that such a prior suits a new spec. This
module never imports PyMC.
"""

from __future__ import annotations

from typing import TYPE_CHECKING

import numpy as np
from scipy import stats
from scipy.special import expit, logit

from bayes_rr.core.distributions import Prior
from bayes_rr.families import family_of
from bayes_rr.families.base import HyperParameter
from bayes_rr.families.terms import UNCONSTRAINED  # noqa: F401 (re-exported)

if TYPE_CHECKING:
    from bayes_rr.priors.spec import ModelSpec


def hyper_parameters(spec: ModelSpec) -> tuple[HyperParameter, ...]:
    """Every hyper-parameter of ``spec`` with the spec location of its prior."""
    return tuple(family_of(spec).hyper_parameters(spec))


def find(spec: ModelSpec, variable: str, status: str | None) -> HyperParameter | None:
    """The hyper-parameter a factor about ``variable`` (and ``status``) refers to."""
    return family_of(spec).find_hyper_parameter(spec, variable, status)


def elements(spec: ModelSpec, hyper: HyperParameter) -> tuple[str | None, ...]:
    """The statuses an earlier study gives separate factors for (``(None,)``: one factor,
    pooled over the variable's elements)."""
    if hyper.status is None and hyper.variable in family_of(spec).per_status_scales:
        return ("accept", "reject")
    return (hyper.status,)


def draws_of(posterior, variable: str, status: str | None = None) -> np.ndarray | None:
    """(chain, draw, ...) draws of ``variable`` (one ``status`` of it, if given) from an
    xarray posterior, or None when the fit has no such variable (a term the data could
    not carry)."""
    if variable not in posterior:
        return None
    values = posterior[variable]
    if status is not None:
        values = values.sel(status=status)
    return np.asarray(values.to_numpy(), dtype=float)


def _identity(values):
    return np.asarray(values, dtype=float)


TRANSFORMS = {"identity": (_identity, _identity), "log": (np.log, np.exp), "logit": (logit, expit)}
"""scale -> (to the unconstrained scale, back)."""


def to_unconstrained(values: np.ndarray, scale: str) -> np.ndarray:
    return TRANSFORMS[scale][0](values)


def from_unconstrained(values: np.ndarray, scale: str) -> np.ndarray:
    return TRANSFORMS[scale][1](values)


def log_jacobian(u: np.ndarray, scale: str) -> np.ndarray:
    """log |d theta / d u| of the map from the unconstrained ``u`` to theta."""
    if scale == "log":
        return u
    if scale == "logit":
        return -np.logaddexp(0.0, u) - np.logaddexp(0.0, -u)
    return np.zeros_like(u)


def log_density(prior: Prior, values: np.ndarray) -> np.ndarray:
    """log prior density at ``values`` (constrained scale), up to nothing: normalised."""
    k = prior.kwargs
    name = prior.distribution
    if name == "half_normal":
        return stats.halfnorm.logpdf(values, scale=k["sigma"])
    if name == "half_student_t":
        return np.log(2.0) + stats.t.logpdf(values, k["nu"], scale=k["sigma"])
    if name == "lognormal":
        return stats.lognorm.logpdf(values, k["sigma"], scale=np.exp(k["mu"]))
    if name == "logit_normal":
        u = logit(values)
        return stats.norm.logpdf(u, k["mu"], k["sigma"]) - np.log(values) - np.log1p(-values)
    return prior.scipy().logpdf(values)


def _correlation_log_prior(posterior) -> np.ndarray | None:
    from bayes_rr.families.layout import APPRAISER_CORRELATION_ETA

    rho = draws_of(posterior, "appraiser_correlation")
    if rho is None:
        return None
    eta = APPRAISER_CORRELATION_ETA
    return stats.beta.logpdf((np.clip(rho, -1, 1) + 1) / 2, eta, eta)


FLAT = {"beta": {"alpha": 1.0, "beta": 1.0}}
"""Stated priors whose density is constant: raising them to a power changes nothing, so
power-scaling cannot see their influence."""


def flat_priors(spec: ModelSpec) -> list[str]:
    """The hyper-parameters whose stated prior is flat (power-scaling is blind to them)."""
    out = []
    for hyper in hyper_parameters(spec):
        params = dict(hyper.prior.params)
        flat = FLAT.get(hyper.prior.distribution)
        if hyper.prior.distribution == "uniform" or (
            flat is not None and all(params.get(k) == v for k, v in flat.items())
        ):
            out.append(f"{hyper.label} ({hyper.prior.text()})")
    return sorted(set(out))


def log_prior(posterior, spec: ModelSpec, *, earlier: bool = True) -> np.ndarray:
    """(chain, draw) log density of every stated hyper-prior at the posterior draws,
    including the earlier-study factors of the spec when ``earlier``.

    The LKJ prior on the correlation of an appraiser's effects on good and bad parts
    (status families) is included: for two effects it is (rho + 1) / 2 ~ Beta(eta,
    eta). Group effects given their scales are not stated priors and are left out:
    power-scaling the top-level priors of a hierarchical model is the recommended use
    (Kallioinen et al. 2023, section 5).
    """
    total = _correlation_log_prior(posterior)
    for hyper in hyper_parameters(spec):
        values = draws_of(posterior, hyper.variable, hyper.status)
        if values is None:
            continue
        term = log_density(hyper.prior, values)
        term = term.reshape(term.shape[0], term.shape[1], -1).sum(axis=-1)
        total = term if total is None else total + term
    if earlier and spec.earlier is not None:
        for factor in spec.earlier.factors:
            values = draws_of(posterior, factor.parameter, factor.status)
            if values is None:
                continue
            u = to_unconstrained(values, factor.scale)
            term = spec.earlier.weight * stats.norm.logpdf(u, factor.mu, factor.sigma)
            term = term.reshape(term.shape[0], term.shape[1], -1).sum(axis=-1)
            total = term if total is None else total + term
    if total is None:
        raise ValueError(f"the posterior holds none of the hyper-parameters of {spec.name!r}")
    return total
