"""From the study to the line: production-scope rates, inspection strategies, their
costs and the decision (docs/statistics.md, "Production scope").

The numpy core works on a family's :class:`~bayes_rr.families.base.CallNodes` (call
probabilities of the study's appraisers on production parts at quadrature nodes) and
one bad share per posterior draw; every strategy is evaluated per production part and
only then averaged over parts (calls of one part by several appraisers share the part).
Never samples, never imports PyMC.
"""

from __future__ import annotations

import itertools
from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np
from scipy import stats

from bayes_rr.core.numbers import decimals_for, interval_text

if TYPE_CHECKING:
    import xarray as xr

    from bayes_rr.families.base import CallNodes
    from bayes_rr.priors.spec import ModelSpec
    from bayes_rr.study.data import StudyData
    from bayes_rr.study.production import ProductionMix, Strategy

BLOCK = 250
"""Posterior draws per block (bounds the memory of the draws x nodes arrays)."""
MILLION = 1e6
LINE_KEYS = (
    "false_reject_rate",
    "false_accept_rate",
    "escaped_per_million",
    "rejected_good_per_million",
    "shipped_bad_share",
    "calls_per_part",
)
"""The figures of a strategy on the line."""
ROW_KEYS = LINE_KEYS[:5]
"""Those that are production-scope estimand rows (of the single strategy), which
criteria with scope production may name."""


# ---------------------------------------------------------------------------
# one block of draws: what happens to one production part


def _poisson_binomial_tail(p: np.ndarray, k: int) -> np.ndarray:
    """P(at least k of the independent Bernoulli(p[..., m]) events), over the last axis.

    Only counts below k are tracked (the tail is 1 minus their sum)."""
    below = np.zeros((k, *p.shape[:-1]))  # below[c] = P(exactly c events so far), c < k
    below[0] = 1.0
    for m in range(p.shape[-1]):
        q = p[..., m]
        for c in range(k - 1, 0, -1):
            below[c] = below[c] * (1 - q) + below[c - 1] * q
        below[0] = below[0] * (1 - q)
    return 1.0 - below.sum(axis=0)


def part_outcome(
    p: np.ndarray, inner: np.ndarray, shares: np.ndarray, strategy: Strategy
) -> tuple[np.ndarray, np.ndarray]:
    """For each production part node: the probability that the part ends rejected and
    the expected calls spent on it.

    ``p`` (..., appraiser, inner node): call probabilities; ``inner`` the inner nodes'
    weights (summing to 1); ``shares`` the line's share of each appraiser. Returns two arrays (...).
    """
    # (..., J): a single call, the inner effect averaged out
    mean_p = p[..., 0] if inner.size == 1 else p @ inner
    ones = np.ones(mean_p.shape[:-1])
    if strategy.kind == "single":
        return mean_p @ shares, ones
    if strategy.kind == "confirm_same":
        k = strategy.k
        if strategy.rule == "majority":
            need = (k + 1) // 2
            ends = (p * stats.binom.sf(need - 1, k, p)) @ inner
            return ends @ shares, 1 + k * (mean_p @ shares)
        powers = np.stack([p ** (m + 1) for m in range(k + 1)])  # (k+1, ..., J, H)
        moments = (powers @ inner) @ shares  # (k+1, ...)
        return moments[k], 1 + moments[:k].sum(axis=0)
    if strategy.kind == "confirm_other":
        n_app = shares.size
        others = np.empty((n_app, n_app))
        for j in range(n_app):
            rest = shares.copy()
            rest[j] = 0.0
            # a single appraiser with all the line's parts: the others confirm equally
            rest = rest / rest.sum() if rest.sum() > 0 else np.where(np.arange(n_app) == j, 0,
                                                                     1 / (n_app - 1))  # fmt: skip
            others[j] = rest
        confirm = mean_p @ others.T  # (..., J): P(another appraiser rejects) after j
        return (shares * mean_p * confirm).sum(axis=-1), 1 + mean_p @ shares
    subsets = list(itertools.combinations(range(mean_p.shape[-1]), strategy.n))
    tails = [_poisson_binomial_tail(mean_p[..., list(s)], strategy.k) for s in subsets]
    return np.mean(tails, axis=0), strategy.n * ones


def _line_figures(
    reject_good: np.ndarray, reject_bad: np.ndarray, calls: np.ndarray, bad_share: np.ndarray
) -> dict[str, np.ndarray]:
    """The figures of the table in docs/statistics.md from the status-wise outcomes."""
    frr, far = reject_good, 1.0 - reject_bad
    escaped = bad_share * far
    shipped = escaped + (1 - bad_share) * (1 - frr)
    with np.errstate(invalid="ignore", divide="ignore"):
        shipped_bad = np.where(shipped > 0, escaped / shipped, np.nan)
    return {
        "false_reject_rate": frr,
        "false_accept_rate": far,
        "escaped_per_million": MILLION * escaped,
        "rejected_good_per_million": MILLION * (1 - bad_share) * frr,
        "shipped_bad_share": shipped_bad,
        "calls_per_part": calls,
    }


@dataclass(frozen=True)
class LineDraws:
    """Per-draw production figures: ``appraiser`` {key: (S, J)} for one call by each
    appraiser, and ``strategies`` {name: {key: (S,)}} (``single`` is the system)."""

    bad_share: np.ndarray
    appraiser: dict[str, np.ndarray]
    strategies: dict[str, dict[str, np.ndarray]]


def line_draws(
    nodes: CallNodes, bad_share: np.ndarray, shares: np.ndarray, strategies: tuple
) -> LineDraws:
    """Every strategy's figures in every posterior draw, block by block."""
    n_app = shares.size
    per_app = np.empty((2, nodes.draws, n_app))  # P(reject) of one call, by status
    outcome = {s.name: np.empty((2, 2, nodes.draws)) for s in strategies}  # status, what
    for start in range(0, nodes.draws, BLOCK):
        block = slice(start, min(start + BLOCK, nodes.draws))
        for status in (0, 1):
            p = nodes.probabilities(block, status)  # (b, G, J, H)
            w_part = nodes.part_weight[status]
            per_app[status, block] = np.einsum("bgjh,h,g->bj", p, nodes.inner_weight, w_part)
            for strategy in strategies:
                rejected, calls = part_outcome(p, nodes.inner_weight, shares, strategy)
                outcome[strategy.name][status, 0, block] = rejected @ w_part
                outcome[strategy.name][status, 1, block] = calls @ w_part
    s = bad_share
    figures = {}
    for name, out in outcome.items():
        calls = (1 - s) * out[0, 1] + s * out[1, 1]
        figures[name] = _line_figures(out[0, 0], out[1, 0], calls, s)
    appraiser = {"false_reject_rate": per_app[0], "false_accept_rate": 1.0 - per_app[1]}
    return LineDraws(s, appraiser, figures)


def add_costs(draws: LineDraws, costs) -> None:
    """``cost_per_1000`` of every strategy (in place)."""
    for figures in draws.strategies.values():
        figures["cost_per_1000"] = 1000 * (
            figures["rejected_good_per_million"] / MILLION * costs.false_reject
            + figures["escaped_per_million"] / MILLION * costs.escape
            + figures["calls_per_part"] * costs.call
        )


def probability_cheapest(draws: LineDraws) -> dict[str, float]:
    """The share of draws in which each strategy's cost is the least (ties shared)."""
    names = list(draws.strategies)
    cost = np.stack([draws.strategies[n]["cost_per_1000"] for n in names], axis=1)
    least = np.isclose(cost, cost.min(axis=1, keepdims=True), rtol=1e-12, atol=0)
    share = least / least.sum(axis=1, keepdims=True)
    return {name: float(v) for name, v in zip(names, share.mean(axis=0), strict=True)}


# ---------------------------------------------------------------------------
# from a fit


@dataclass(frozen=True)
class LineResult:
    """The production figures of a fit: estimand variables and the strategies' draws."""

    variables: dict
    draws: LineDraws
    mix: ProductionMix
    strategies: tuple


def line_result(
    posterior: xr.Dataset, spec: ModelSpec, study: StudyData, mix: ProductionMix, seed: int
) -> LineResult:
    """Production-scope estimand variables ``(scope, level, key) -> (draws, dim)`` and
    every strategy's draws, for a family with wrong-call rates."""
    from bayes_rr.families import family_of
    from bayes_rr.study.production import default_strategies

    family = family_of(spec)
    if mix.strata is not None:
        rng = np.random.default_rng([seed, 21])
        nodes = family.stratified_calls(posterior, spec, study, mix, rng)
    else:
        nodes = family.production_calls(posterior, spec, study, mix)
    if nodes.bad_share is not None:
        bad_share = np.full(nodes.draws, nodes.bad_share)
    else:
        bad_share = mix.bad_share_draws(nodes.draws, seed)
    appraisers = list(study.appraisers)
    strategies = mix.strategies or default_strategies(len(appraisers))
    if "single" not in {s.name for s in strategies}:
        from bayes_rr.study.production import Strategy

        strategies = (Strategy("single"), *strategies)
    draws = line_draws(nodes, bad_share, mix.shares(appraisers), strategies)
    if mix.costs is not None:
        add_costs(draws, mix.costs)
    system = draws.strategies["single"]
    variables = {
        ("production", "appraiser", key): (values, "appraiser")
        for key, values in draws.appraiser.items()
    }
    for key in ROW_KEYS:
        variables[("production", "system", key)] = (system[key], None)
    variables[("production", "system", "bad_share")] = (bad_share, None)
    return LineResult(variables, draws, mix, strategies)


# ---------------------------------------------------------------------------
# the strategy table and the decision


def _figure(draws: np.ndarray, prob: float) -> dict:
    defined = draws[np.isfinite(draws)]
    if defined.size == 0:
        return {"mean": None, "median": None, "lower": None, "upper": None}
    lower, upper = np.quantile(defined, [(1 - prob) / 2, (1 + prob) / 2])
    return {"mean": float(defined.mean()), "median": float(np.median(defined)),
            "lower": float(lower), "upper": float(upper)}  # fmt: skip


def production_criteria(criteria: tuple) -> tuple:
    """The criteria on line figures (scope production, system level): those a strategy
    can meet or miss."""
    return tuple(c for c in criteria if c.scope == "production")


def _meets(draws: np.ndarray, criterion) -> float:
    with np.errstate(invalid="ignore"):
        ok = draws < criterion.threshold if criterion.direction == "below" else (
            draws > criterion.threshold)  # fmt: skip
    return float(np.mean(ok))


def strategy_rows(line: LineResult, prob: float, criteria: tuple = ()) -> list[dict]:
    """One row per strategy: its figures (mean, median, equal-tailed interval), the
    probability that it is the cheapest (with costs) and each production criterion's
    posterior probability on its draws."""
    cheapest = probability_cheapest(line.draws) if line.mix.costs is not None else None
    rows = []
    for strategy in line.strategies:
        figures = line.draws.strategies[strategy.name]
        row = strategy.as_dict()
        row["figures"] = {key: _figure(values, prob) for key, values in figures.items()}
        row["probability_cheapest"] = None if cheapest is None else cheapest[strategy.name]
        checks = []
        for criterion in production_criteria(criteria):
            probability = _meets(figures[criterion.key], criterion)
            checks.append({"key": criterion.key, criterion.direction: criterion.threshold,
                           "required_probability": criterion.required_probability,
                           "probability": probability,
                           "met": probability >= criterion.required_probability})  # fmt: skip
        row["criteria"] = checks
        row["meets_criteria"] = all(c["met"] for c in checks) if checks else None
        rows.append(row)
    return rows


def decision(rows: list[dict], has_costs: bool) -> dict | None:
    """The strategy to choose, only when the user asked (costs or production criteria):
    the cheapest (least mean cost; without costs the fewest calls per part) among those
    meeting every criterion, or, when none does, the closest one named as such."""
    judged = any(row["criteria"] for row in rows)
    if not has_costs and not judged:
        return None
    basis = "cost_per_1000" if has_costs else "calls_per_part"
    meeting = [row for row in rows if row["meets_criteria"] is not False]
    if meeting:
        best = min(meeting, key=lambda row: row["figures"][basis]["mean"])
        why = "the least expected cost" if has_costs else "the fewest calls per part"
        among = "of the strategies that meet every criterion" if judged else "of all strategies"
        return {
            "chosen": best["name"],
            "meets_criteria": True if judged else None,
            "closest": None,
            "basis": basis,
            "sentence": f"{best['name']} ({best['description']}) has {why} {among}.",
        }

    def excess(row: dict, check: dict) -> float:
        """How far the figure's posterior mean is on the wrong side, in thresholds."""
        side = "below" if "below" in check else "above"
        mean = row["figures"][check["key"]]["mean"]
        gap = mean - check[side] if side == "below" else check[side] - mean
        return gap / max(abs(check[side]), 1e-12)

    def closeness(row: dict) -> tuple[float, float]:
        # the worst criterion's probability against the required one; where every
        # strategy's probability is 0, the least excess of the posterior mean decides
        ratio = min(c["probability"] / c["required_probability"] for c in row["criteria"])
        return ratio, -max(excess(row, c) for c in row["criteria"])

    closest = max(rows, key=closeness)
    worst = min(closest["criteria"], key=lambda c: c["probability"] / c["required_probability"])
    return {
        "chosen": None,
        "meets_criteria": False,
        "closest": closest["name"],
        "basis": basis,
        "sentence": (
            f"No strategy meets every criterion. The closest is {closest['name']} "
            f"({closest['description']}): its {worst['key'].replace('_', ' ')} meets the "
            f"criterion with posterior probability {worst['probability']:.3f}, required "
            f"{worst['required_probability']:g}."
        ),
    }


GUARD_STEPS = 40
"""Bisection steps of the guard band search (the bracket shrinks by 2**-40)."""
GUARD_RESOLUTION = 1e-3
"""The search stops when the bracket is narrower than this share of the study's spread
of measured values."""


def guard_band(
    posterior: xr.Dataset, spec: ModelSpec, study: StudyData, line: LineResult,
    criterion, prob: float,
) -> dict | None:  # fmt: skip
    """The least inward shift g of the gauge limit(s) (each appraiser's effective limit
    moving with it) at which ``escaped_per_million`` is below the criterion's threshold
    with at least its required probability, one call a part; and what it costs in good
    parts rejected (docs/statistics.md, "Guard band"). None for a family without one or
    without such a criterion."""
    from bayes_rr.families import family_of
    from bayes_rr.study.production import Strategy

    family = family_of(spec)
    if family.guard_band_scale is None or criterion is None:
        return None
    shares = line.mix.shares(list(study.appraisers))
    single = (Strategy("single"),)

    def figures(guard: float) -> dict:
        nodes = family.production_calls(posterior, spec, study, line.mix, guard)
        return line_draws(nodes, line.draws.bad_share, shares, single).strategies["single"]

    def escaped(guard: float) -> np.ndarray:
        # bad parts only: the search needs no good part's call
        nodes = family.production_calls(posterior, spec, study, line.mix, guard)
        accepted = np.empty(nodes.draws)
        for start in range(0, nodes.draws, BLOCK):
            block = slice(start, min(start + BLOCK, nodes.draws))
            p = nodes.probabilities(block, 1)
            one_call = p[..., 0] if nodes.inner_weight.size == 1 else p @ nodes.inner_weight
            rejected = (one_call @ shares) @ nodes.part_weight[1]
            accepted[block] = 1.0 - rejected
        return MILLION * line.draws.bad_share * accepted

    def meets(guard: float) -> bool:
        return _meets(escaped(guard), criterion) >= criterion.required_probability

    scale = family.guard_band_scale(spec, study)
    low, high = 0.0, 0.05 * scale
    at_zero = reachable = meets(0.0)
    if not at_zero:
        while not meets(high) and high < 10 * scale:
            low, high = high, 2 * high
        reachable = high < 10 * scale or meets(high)
        for _ in range(GUARD_STEPS if reachable else 0):
            if high - low < GUARD_RESOLUTION * scale:
                break
            middle = (low + high) / 2
            low, high = (low, middle) if meets(middle) else (middle, high)
    guard = 0.0 if at_zero else high
    base, guarded = figures(0.0), figures(guard)
    added = guarded["rejected_good_per_million"] - base["rejected_good_per_million"]
    return {
        "key": criterion.key,
        "below": criterion.threshold,
        "required_probability": criterion.required_probability,
        "reachable": bool(reachable),
        "shift": guard if reachable else None,
        "searched_up_to": None if reachable else high,
        "probability": _meets(guarded["escaped_per_million"], criterion),
        "escaped_per_million": _figure(guarded["escaped_per_million"], prob),
        "rejected_good_per_million": _figure(guarded["rejected_good_per_million"], prob),
        "rejected_good_added_per_million": _figure(added, prob),
    }


def _guard_criterion(criteria: tuple):
    for criterion in production_criteria(criteria):
        if criterion.key == "escaped_per_million" and criterion.direction == "below":
            return criterion
    return None


def production_document(
    line: LineResult, prob: float, criteria: tuple = (), fit: tuple | None = None
) -> dict:
    """The ``production``, ``strategies``, ``decision`` and ``guard_band`` blocks of
    summary.json; ``fit`` (posterior, spec, study) lets a call curve search its guard
    band against a criterion on ``escaped_per_million``."""
    rows = strategy_rows(line, prob, criteria)
    guard = None
    if fit is not None:
        guard = guard_band(*fit, line, _guard_criterion(criteria), prob)
    return {
        "production": {**line.mix.as_dict(), "bad_share_used": _figure(line.draws.bad_share, prob)},
        "strategies": rows,
        "decision": decision(rows, line.mix.costs is not None),
        "guard_band": guard,
    }


def guard_band_sentence(summary: dict) -> str:
    """The guard band in one sentence: the shift, the gauge limits it gives, what it
    keeps below the threshold and what it costs in good parts rejected."""
    guard = summary["guard_band"]
    target = (f"escaped bad parts per million below {guard['below']:g} with probability "
              f"{guard['required_probability']:g}")  # fmt: skip
    if not guard["reachable"]:
        return (f"no inward shift of the gauge limit up to {guard['searched_up_to']:.4g} keeps "
                f"{target}.")  # fmt: skip
    shift = guard["shift"]
    if shift == 0:
        return f"none needed: the limit as it is keeps {target}."
    scale = summary["design"].get("reference_value_range") or [0.0, 1.0]
    decimals = decimals_for(0.0, 1e-3 * (scale[1] - scale[0]) or 1e-3)
    limits = summary["design"].get("limits") or {}
    moved = [f"{name} {value - shift:.{decimals}f}" if name == "upper"
             else f"{name} {value + shift:.{decimals}f}"
             for name, value in limits.items() if value is not None]  # fmt: skip
    added = guard["rejected_good_added_per_million"]
    return (
        f"moving the gauge limit inward by {shift:.{decimals}f} (to {', '.join(moved)}) keeps "
        f"{target} (reached: {guard['probability']:.3f}); it rejects "
        f"{interval_text(added['mean'], added['lower'], added['upper'])} more good parts per "
        "million."
    )
