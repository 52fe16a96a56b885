"""Call curves along a measured reference value (docs/statistics.md family 5), numpy core.

From posterior draws of each appraiser's effective limits and transition width:
the call probability of any part, and, given a production distribution of the
reference value, the expected false reject rate (the share of good parts called
reject) and false accept rate (the share of bad parts called accept).
"""

from __future__ import annotations

import itertools
from dataclasses import dataclass

import numpy as np
from scipy import stats
from scipy.special import expit, ndtr

from bayes_rr.families.base import CallNodes

GRID_POINTS = 2000
"""Nodes of the trapezoid rule over a normal production distribution (8 sd each side,
the limits among the nodes): the error stays below 1e-4 for transition widths above
about 0.02 production sd (checked against the bivariate normal closed form)."""
BLOCK = 400
"""Draws per block when integrating (bounds the memory of the draws x nodes arrays)."""


def ten_ninety_factor(link: str) -> float:
    """The distance between 10% and 90% reject probability in units of the curve's scale
    w: 2 ln 9 (about 4.394) for the logistic, 2 z_0.9 (about 2.563) for the normal CDF.
    The ``transition_width`` results are this times w, so they mean the same whatever
    the link."""
    from scipy.special import logit, ndtri

    return float(2 * ndtri(0.9)) if link == "probit" else float(2 * logit(0.9))


def link_cdf(link: str, value: np.ndarray) -> np.ndarray:
    return ndtr(value) if link == "probit" else expit(value)


def curve_probabilities(
    effective_limit: np.ndarray,
    width: np.ndarray,
    x: np.ndarray,
    signs: np.ndarray,
    link: str,
) -> np.ndarray:
    """(S, point, appraiser) reject probabilities at reference values ``x``.

    ``effective_limit`` (S, appraiser, side), ``width`` (S, appraiser), ``signs`` (side,):
    +1 for an upper limit (reject above), -1 for a lower one.
    """
    arg = signs * (x[None, :, None, None] - effective_limit[:, None]) / width[:, None, :, None]
    return np.clip(link_cdf(link, arg).sum(axis=-1), 0.0, 1.0)


@dataclass(frozen=True)
class Production:
    """The distribution of the reference value in production: normal, or measured values."""

    mean: float | None = None
    sd: float | None = None
    values: tuple[float, ...] | None = None

    def __post_init__(self) -> None:
        if self.values is None and (self.mean is None or self.sd is None or not self.sd > 0):
            raise ValueError("a production distribution needs a mean and a positive sd, or values")

    def nodes(self, limits: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Nodes and weights of the production distribution (weights sum to about 1)."""
        if self.values is not None:
            x = np.asarray(self.values, dtype=float)
            return x, np.full(x.size, 1.0 / x.size)
        low, high = self.mean - 8 * self.sd, self.mean + 8 * self.sd
        breaks = np.unique(np.concatenate([[low, high], limits[(limits > low) & (limits < high)]]))
        xs, ws = [], []
        for a, b in itertools.pairwise(breaks):
            count = max(50, int(GRID_POINTS * (b - a) / (high - low)))
            piece = np.linspace(a, b, count)
            weight = np.full(count, (b - a) / (count - 1))
            weight[[0, -1]] /= 2
            # nudge the end nodes inside the piece so a node on a limit counts on its side
            piece[0], piece[-1] = np.nextafter(a, b), np.nextafter(b, a)
            xs.append(piece)
            ws.append(weight * stats.norm.pdf(piece, self.mean, self.sd))
        return np.concatenate(xs), np.concatenate(ws)


def known_status(x: np.ndarray, limits: np.ndarray, signs: np.ndarray) -> np.ndarray:
    """1 for a part beyond a limit (bad), else 0: the status a measured value gives."""
    return (signs[None, :] * (x[:, None] - limits[None, :]) > 0).any(axis=1).astype(float)


def production_nodes(
    effective_limit: np.ndarray,
    width: np.ndarray,
    limits: np.ndarray,
    signs: np.ndarray,
    link: str,
    production: Production,
) -> CallNodes:
    """The appraisers' call probabilities at the nodes of the production distribution,
    split at the limits into good parts (status 0) and bad parts beyond a limit (1)."""
    x, weight = production.nodes(limits)
    bad = known_status(x, limits, signs).astype(bool)
    if not bad.any() or bad.all():
        raise ValueError("the production distribution has no parts on one side of the limits")
    sides = (x[~bad], x[bad])
    part_weight = (weight[~bad] / weight[~bad].sum(), weight[bad] / weight[bad].sum())

    def probabilities(block: slice, status: int) -> np.ndarray:
        p = curve_probabilities(effective_limit[block], width[block], sides[status], signs, link)
        return p[..., None]

    share = float(weight[bad].sum() / weight.sum())
    return CallNodes(width.shape[0], part_weight, np.ones(1), probabilities, bad_share=share)


def expected_rates(
    effective_limit: np.ndarray,
    width: np.ndarray,
    limits: np.ndarray,
    signs: np.ndarray,
    link: str,
    production: Production,
) -> dict[str, np.ndarray]:
    """Expected false reject and false accept rates per draw and appraiser (S, appraiser)
    of one call on a production part: E[p(x) | x good] and E[1 - p(x) | x bad]."""
    nodes = production_nodes(effective_limit, width, limits, signs, link, production)
    frr = np.empty(width.shape)
    far = np.empty(width.shape)
    for start in range(0, width.shape[0], BLOCK):
        block = slice(start, start + BLOCK)
        good, bad = (nodes.probabilities(block, status)[..., 0] for status in (0, 1))
        frr[block] = np.einsum("bgj,g->bj", good, nodes.part_weight[0])
        far[block] = 1.0 - np.einsum("bgj,g->bj", bad, nodes.part_weight[1])
    return {"false_reject_rate": frr, "false_accept_rate": far}
