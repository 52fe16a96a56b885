"""Closed-form interval estimates for proportions and their differences.

Pure numpy/scipy; used by the classical statistics and by the report.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from scipy import stats

from bayes_rr.core import DEFAULT_PROB


@dataclass(frozen=True)
class Interval:
    """An interval estimate with the method and level it was made with."""

    estimate: float
    lower: float
    upper: float
    prob: float
    method: str

    def as_dict(self) -> dict:
        return {
            "estimate": self.estimate,
            "lower": self.lower,
            "upper": self.upper,
            "prob": self.prob,
            "method": self.method,
        }


def _z(prob: float) -> float:
    if not 0 < prob < 1:
        raise ValueError(f"interval probability {prob!r} must be strictly between 0 and 1")
    return float(stats.norm.ppf(0.5 + prob / 2))


def _check_counts(x: int, n: int) -> None:
    if n <= 0 or not 0 <= x <= n:
        raise ValueError(f"need 0 <= x <= n and n > 0, got x={x!r}, n={n!r}")


def clopper_pearson(x: int, n: int, prob: float = DEFAULT_PROB) -> Interval:
    """Exact (Clopper-Pearson) interval for a binomial proportion."""
    _check_counts(x, n)
    alpha = 1 - prob
    lower = 0.0 if x == 0 else float(stats.beta.ppf(alpha / 2, x, n - x + 1))
    upper = 1.0 if x == n else float(stats.beta.ppf(1 - alpha / 2, x + 1, n - x))
    return Interval(x / n, lower, upper, prob, "Clopper-Pearson exact")


def wilson(x: int, n: int, prob: float = DEFAULT_PROB) -> Interval:
    """Wilson score interval for a binomial proportion (no continuity correction)."""
    _check_counts(x, n)
    z = _z(prob)
    p = x / n
    centre = (x + z * z / 2) / (n + z * z)
    half = z * math.sqrt(x * (n - x) / n + z * z / 4) / (n + z * z)
    return Interval(p, max(0.0, centre - half), min(1.0, centre + half), prob, "Wilson score")


def jeffreys(x: int, n: int, prob: float = DEFAULT_PROB) -> Interval:
    """Equal-tailed Jeffreys interval, Beta(x + 1/2, n - x + 1/2) quantiles."""
    _check_counts(x, n)
    alpha = 1 - prob
    dist = stats.beta(x + 0.5, n - x + 0.5)
    return Interval(
        x / n,
        float(dist.ppf(alpha / 2)),
        float(dist.ppf(1 - alpha / 2)),
        prob,
        "Jeffreys equal-tailed",
    )


def newcombe_hybrid(x1: int, n1: int, x2: int, n2: int, prob: float = DEFAULT_PROB) -> Interval:
    """Newcombe's hybrid score interval for p1 - p2 (Newcombe 1998, method 10).

    Combines the two Wilson intervals; the proportions are taken as independent.
    """
    a, b = wilson(x1, n1, prob), wilson(x2, n2, prob)
    p1, p2 = a.estimate, b.estimate
    diff = p1 - p2
    lower = diff - math.sqrt((p1 - a.lower) ** 2 + (b.upper - p2) ** 2)
    upper = diff + math.sqrt((a.upper - p1) ** 2 + (p2 - b.lower) ** 2)
    return Interval(diff, lower, upper, prob, "Newcombe hybrid score")


def agresti_caffo(x1: int, n1: int, x2: int, n2: int, prob: float = DEFAULT_PROB) -> Interval:
    """Agresti-Caffo interval for p1 - p2: Wald after one success and one failure added
    to each sample, clipped to [-1, 1]."""
    _check_counts(x1, n1)
    _check_counts(x2, n2)
    z = _z(prob)
    q1, q2 = (x1 + 1) / (n1 + 2), (x2 + 1) / (n2 + 2)
    half = z * math.sqrt(q1 * (1 - q1) / (n1 + 2) + q2 * (1 - q2) / (n2 + 2))
    diff = q1 - q2
    return Interval(
        x1 / n1 - x2 / n2, max(-1.0, diff - half), min(1.0, diff + half), prob, "Agresti-Caffo"
    )
