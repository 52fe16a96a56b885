"""Prior distributions as plain data, with what they imply on the call-rate scale.

A prior is named by a distribution from ``DISTRIBUTIONS`` and its parameters.
This module never imports PyMC; the families turn priors into PyMC
distributions.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Literal

from scipy import stats
from scipy.special import expit

Support = Literal["real", "positive", "unit"]

# name -> (support, required parameters, optional parameters with defaults)
DISTRIBUTIONS: dict[str, tuple[Support, tuple[str, ...], dict[str, float]]] = {
    "normal": ("real", ("sigma",), {"mu": 0.0}),
    "student_t": ("real", ("nu", "sigma"), {"mu": 0.0}),
    "half_normal": ("positive", ("sigma",), {}),
    "half_student_t": ("positive", ("nu", "sigma"), {}),
    "exponential": ("positive", ("lam",), {}),
    "gamma": ("positive", ("alpha", "beta"), {}),
    "beta": ("unit", ("alpha", "beta"), {}),
    # normal on the unconstrained scale (log, logit): how an earlier study's posterior
    # of a scale or a share is carried into a new spec
    "lognormal": ("positive", ("mu", "sigma"), {}),
    "logit_normal": ("unit", ("mu", "sigma"), {}),
}
POSITIVE_PARAMETERS = {"sigma", "nu", "lam", "alpha", "beta"}

# Plausible ranges of prior parameters. The priors of intercepts and group scales
# live on the logit scale, where a scale below 1e-3 pins a parameter to a point and
# one above 1e2 piles every call rate at 0 and 1; numbers outside these ranges are
# almost always typos (1e300, 1e-300) and break the sampler's arithmetic.
PARAMETER_RANGES: dict[str, tuple[float, float]] = {
    "sigma": (1e-3, 1e2),
    "mu": (-1e2, 1e2),
    "lam": (1e-2, 1e3),
    "nu": (0.5, 1e3),
    "alpha": (1e-3, 1e4),
    "beta": (1e-3, 1e4),
}


@dataclass(frozen=True)
class Prior:
    """A prior distribution: ``distribution`` from :data:`DISTRIBUTIONS` and its parameters."""

    distribution: str
    params: tuple[tuple[str, float], ...]

    @property
    def kwargs(self) -> dict[str, float]:
        return dict(self.params)

    @property
    def support(self) -> Support:
        return DISTRIBUTIONS[self.distribution][0]

    def scipy(self):
        """The same distribution as a frozen scipy.stats object (for implied-prior summaries)."""
        k = self.kwargs
        name = self.distribution
        if name == "normal":
            return stats.norm(k["mu"], k["sigma"])
        if name == "student_t":
            return stats.t(k["nu"], k["mu"], k["sigma"])
        if name == "half_normal":
            return stats.halfnorm(0, k["sigma"])
        if name == "half_student_t":
            return _FoldedT(k["nu"], k["sigma"])
        if name == "exponential":
            return stats.expon(scale=1 / k["lam"])
        if name == "gamma":
            return stats.gamma(k["alpha"], scale=1 / k["beta"])
        if name == "lognormal":
            return stats.lognorm(k["sigma"], scale=math.exp(k["mu"]))
        if name == "logit_normal":
            return _LogitNormal(k["mu"], k["sigma"])
        return stats.beta(k["alpha"], k["beta"])

    def text(self) -> str:
        args = ", ".join(f"{k}={v:g}" for k, v in self.params)
        return f"{self.distribution}({args})"


class _FoldedT:
    """Minimal frozen |t(nu, 0, sigma)| with ppf and rvs (scipy has no half-t)."""

    def __init__(self, nu: float, sigma: float) -> None:
        self.base = stats.t(nu, 0, sigma)

    def ppf(self, q):
        return self.base.ppf(0.5 + q / 2)

    def rvs(self, size=None, random_state=None):
        return abs(self.base.rvs(size=size, random_state=random_state))


class _LogitNormal:
    """Minimal frozen logit-normal with ppf and rvs (scipy has none)."""

    def __init__(self, mu: float, sigma: float) -> None:
        self.base = stats.norm(mu, sigma)

    def ppf(self, q):
        return expit(self.base.ppf(q))

    def rvs(self, size=None, random_state=None):
        return expit(self.base.rvs(size=size, random_state=random_state))


def make_prior(raw: object, where: str) -> Prior:
    """Validate a TOML table ``{distribution = "...", <params>}`` into a :class:`Prior`.

    Raises
    ------
    ValueError
        With a message naming ``where``, the bad value and the valid choices;
        the spec layer turns it into a ``SpecError``.
    """
    if not isinstance(raw, dict):
        raise ValueError(f"{where} = {raw!r}: expected a table like {{ distribution = ... }}")
    raw = dict(raw)
    name = raw.pop("distribution", None)
    if name not in DISTRIBUTIONS:
        raise ValueError(
            f"{where}.distribution = {name!r}: expected one of {sorted(DISTRIBUTIONS)}"
        )
    _, required, optional = DISTRIBUTIONS[name]
    allowed = set(required) | set(optional)
    unknown = sorted(set(raw) - allowed)
    if unknown:
        raise ValueError(
            f"{where}: unknown parameter(s) {unknown} for {name}; expected {sorted(allowed)}"
        )
    missing = [p for p in required if p not in raw]
    if missing:
        raise ValueError(f"{where}: {name} needs parameter(s) {missing}")
    params = {**optional}
    for key, value in raw.items():
        if isinstance(value, bool) or not isinstance(value, int | float):
            raise ValueError(f"{where}.{key} = {value!r}: expected a number")
        value = float(value)
        if not math.isfinite(value):
            raise ValueError(f"{where}.{key} = {value!r}: expected a finite number")
        if key in POSITIVE_PARAMETERS and value <= 0:
            raise ValueError(f"{where}.{key} = {value!r}: must be greater than 0")
        low, high = PARAMETER_RANGES[key]
        if not low <= value <= high:
            raise ValueError(
                f"{where}.{key} = {value!r}: outside the plausible range {low:g} to {high:g} "
                "for this parameter (priors of intercepts and scales are on the logit scale); "
                "check the number"
            )
        params[key] = value
    ordered = tuple((k, params[k]) for k in (*required, *optional))
    return Prior(name, ordered)


def implied_call_rate_range(intercept: Prior, prob: float = 0.95) -> tuple[float, float]:
    """Central ``prob`` range of expit(intercept): the call rates the prior allows for a
    typical part and appraiser before seeing data."""
    dist = intercept.scipy()
    lo, hi = dist.ppf((1 - prob) / 2), dist.ppf((1 + prob) / 2)
    return float(expit(lo)), float(expit(hi))
