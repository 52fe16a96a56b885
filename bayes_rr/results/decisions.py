"""Acceptance criteria as posterior probabilities.

A criteria file (TOML) states what the user's organisation requires, e.g.

    [[criterion]]
    key = "repeatability_share"      # a study- or system-level estimand key
    scope = "study"                  # or "population", or "production" (needs --production)
    below = 0.5                      # or: above = ...
    required_probability = 0.95

Each criterion is met when the posterior probability that the estimand is on the
required side of the threshold, the share of posterior draws that are, reaches the
required probability. Thresholds are the organisation's to set: nothing here is a
universal limit. Reads summaries and draws; never samples.
"""

from __future__ import annotations

import math
import tomllib
from dataclasses import asdict, dataclass
from pathlib import Path

import numpy as np
import xarray as xr

from bayes_rr.core.errors import SpecError

LEVELS = ("study", "system")
SCOPES = ("study", "population", "production")


@dataclass(frozen=True)
class Criterion:
    """One requirement on a study- or system-level estimand."""

    key: str
    scope: str
    threshold: float
    direction: str  # "below" or "above"
    required_probability: float
    label: str = ""
    appraiser: str | None = None
    """One appraiser's value (study scope), or None for the study or system value."""

    def sentence(self, probability: float, met: bool) -> str:
        from bayes_rr.core import glossary

        name = self.label or glossary.name(self.key)
        if self.appraiser is not None and not self.label:
            name = f"{self.appraiser}'s {name}"
        verdict = "met" if met else "not met"
        return (
            f"{name} ({self.scope} scope) is {self.direction} {self.threshold:g} with "
            f"posterior probability {probability:.3f}; required {self.required_probability:g}: "
            f"{verdict}."
        )


def _number(value: object, where: str, source: str) -> float:
    if isinstance(value, bool) or not isinstance(value, int | float) or not math.isfinite(value):
        raise SpecError(f"{source}: {where} = {value!r}: expected a finite number")
    return float(value)


def parse_criteria(text: str, source: str = "<criteria>") -> tuple[Criterion, ...]:
    """Validate the TOML text of a criteria file."""
    try:
        raw = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise SpecError(f"{source}: not valid TOML ({exc})") from None
    unknown = sorted(set(raw) - {"criterion"})
    if unknown:
        raise SpecError(f"{source}: unknown key(s) {unknown}; expected [[criterion]] tables")
    tables = raw.get("criterion")
    if not isinstance(tables, list) or not tables:
        raise SpecError(f"{source}: no [[criterion]] table; see the README for an example")
    out = []
    allowed = {"key", "scope", "below", "above", "required_probability", "label", "appraiser"}
    for k, table in enumerate(tables, 1):
        where = f"criterion {k}"
        extra = sorted(set(table) - allowed)
        if extra:
            raise SpecError(
                f"{source}: {where}: unknown key(s) {extra}; expected {sorted(allowed)}"
            )
        key = table.get("key")
        if not isinstance(key, str) or not key:
            raise SpecError(f"{source}: {where}: key = {key!r}: expected an estimand key")
        scope = table.get("scope", "study")
        if scope not in SCOPES:
            raise SpecError(f"{source}: {where}: scope = {scope!r}: expected one of {SCOPES}")
        sides = [side for side in ("below", "above") if side in table]
        if len(sides) != 1:
            raise SpecError(f"{source}: {where}: give exactly one of 'below' or 'above'")
        required = _number(table.get("required_probability"), f"{where}.required_probability",
                           source)  # fmt: skip
        if not 0 < required <= 1:
            raise SpecError(
                f"{source}: {where}.required_probability = {required!r}: expected a number in "
                "(0, 1]"
            )
        label = table.get("label", "")
        if not isinstance(label, str):
            raise SpecError(f"{source}: {where}.label = {label!r}: expected a string")
        threshold = _number(table[sides[0]], f"{where}.{sides[0]}", source)
        appraiser = table.get("appraiser")
        if appraiser is not None and (not isinstance(appraiser, str) or not appraiser):
            raise SpecError(
                f"{source}: {where}.appraiser = {appraiser!r}: expected an appraiser's name "
                "as in the data"
            )
        if appraiser is not None and scope != "study":
            raise SpecError(
                f"{source}: {where}: appraiser = {appraiser!r} with scope = {scope!r}; a "
                'criterion on one appraiser is about the study\'s parts: use scope = "study"'
            )
        out.append(Criterion(key, scope, threshold, sides[0], required, label, appraiser))
    return tuple(out)


def load_criteria(path: str | Path) -> tuple[Criterion, ...]:
    path = Path(path)
    try:
        text = path.read_text(encoding="utf-8")
    except (OSError, UnicodeDecodeError) as exc:
        raise SpecError(f"{path}: cannot read the criteria file ({exc})") from None
    return parse_criteria(text, path.name)


def criteria_from_rows(rows: list[dict], source: str) -> tuple[Criterion, ...]:
    """The criteria an earlier fit was judged by, rebuilt from its summary.json rows."""
    out = []
    for row in rows:
        side = "below" if "below" in row else "above"
        try:
            required = float(row["required_probability"])
            criterion = Criterion(
                str(row["key"]), str(row["scope"]), float(row[side]), side, required,
                str(row.get("label", "")), row.get("appraiser"),
            )  # fmt: skip
            out.append(criterion)
        except (KeyError, TypeError, ValueError):
            raise SpecError(
                f"{source}: a criterion of the earlier fit cannot be read back ({row!r}); "
                "give the criteria again with --criteria"
            ) from None
    return tuple(out)


def check_keys(criteria: tuple[Criterion, ...]) -> None:
    """Refuse, before any sampling, a criterion whose key no model gives."""
    from bayes_rr.results.estimands import STUDY_KEYS

    known = {
        *STUDY_KEYS, "cross_disagreement", "appraiser_bias_variance", "interaction_variance",
        "false_reject_rate", "false_accept_rate", "reference_agreement", "reject_prevalence",
        "transition_width", "limit_spread", "escaped_per_million", "rejected_good_per_million",
        "shipped_bad_share", "bad_share",
    }  # fmt: skip
    for criterion in criteria:
        base = criterion.key.split("[")[0]
        if base not in known and not base.startswith(("bias", "effective_limit")):
            raise SpecError(
                f"criterion key {criterion.key!r} is not a study- or system-level estimand; "
                f"expected one of {sorted(known)}"
            )


def criterion_draws(estimands: xr.Dataset, criterion: Criterion) -> np.ndarray:
    """The draws ``criterion`` judges (SpecError when ``estimands`` lack them)."""
    return _draws_of(estimands, criterion)


def _keyed_draws(estimands: xr.Dataset, scope: str) -> dict[str, xr.DataArray]:
    """Every study- or system-level estimand of ``scope`` a criterion may name: a
    scalar by its key, one with a further dimension (the side of a limit) as
    ``key[dim=value]``."""
    out = {}
    for name in estimands.data_vars:
        parts = name.split("__")
        if len(parts) != 3 or parts[0] != scope or parts[1] not in LEVELS:
            continue
        values = estimands[name]
        if values.ndim == 2:
            out[parts[2]] = values
        elif values.ndim == 3:
            dim = values.dims[2]
            for coord in values[dim].to_numpy():
                out[f"{parts[2]}[{dim}={coord}]"] = values.sel({dim: coord})
    return out


def _draws_of(estimands: xr.Dataset, criterion: Criterion) -> np.ndarray:
    if criterion.appraiser is not None:
        return _appraiser_criterion_draws(estimands, criterion)
    found = _keyed_draws(estimands, criterion.scope)
    if criterion.key in found:
        return found[criterion.key].to_numpy().ravel()
    raise SpecError(
        f"criterion key {criterion.key!r} ({criterion.scope} scope) is not a study- or "
        f"system-level estimand of this fit; expected one of {sorted(found)}"
    )


def _appraiser_criterion_draws(estimands: xr.Dataset, criterion: Criterion) -> np.ndarray:
    name = f"{criterion.scope}__appraiser__{criterion.key}"
    if name not in estimands:
        known = sorted({
            n.split("__")[2] for n in estimands.data_vars
            if n.startswith(f"{criterion.scope}__appraiser__")
        })  # fmt: skip
        raise SpecError(
            f"criterion key {criterion.key!r} with appraiser = {criterion.appraiser!r}: not "
            f"a per-appraiser result of this model; expected one of {known}"
        )
    names = [str(a) for a in estimands[name]["appraiser"].to_numpy()]
    if criterion.appraiser not in names:
        raise SpecError(
            f"criterion on appraiser {criterion.appraiser!r}: no such appraiser in the data; "
            f"the appraisers are {names}"
        )
    return estimands[name].sel(appraiser=criterion.appraiser).to_numpy().ravel()


def check_available(
    criteria: tuple[Criterion, ...], estimands: xr.Dataset, model: str = "this"
) -> None:
    """Refuse a criterion ``estimands`` (of a few prior draws, before sampling) lack:
    the fit would give no draws to judge it by."""
    from bayes_rr.results.production import ROW_KEYS

    for criterion in criteria:
        if criterion.scope == "production":
            if criterion.key not in (*ROW_KEYS, "bad_share"):
                raise SpecError(
                    f"criterion key {criterion.key!r} (production scope) is not a production "
                    f"figure; expected one of {sorted((*ROW_KEYS, 'bad_share'))}"
                )
            continue
        if criterion.appraiser is not None:
            _appraiser_criterion_draws(estimands, criterion)
            continue
        scopes = [scope for scope in ("study", "population")
                  if criterion.key in _keyed_draws(estimands, scope)]  # fmt: skip
        if criterion.scope in scopes:
            continue
        known = sorted(_keyed_draws(estimands, criterion.scope))
        elsewhere = f"; it is given in {' and '.join(scopes)} scope" if scopes else ""
        raise SpecError(
            f"criterion key {criterion.key!r} ({criterion.scope} scope): the {model} model "
            f"does not give it{elsewhere}; expected one of {known}, or another model"
        )


def evaluate_criteria(criteria: tuple[Criterion, ...], estimands: xr.Dataset) -> list[dict]:
    """Each criterion with ``probability`` (the share of draws meeting it) and ``met``.

    Draws where the estimand is undefined (NaN) count as not meeting it.
    """
    rows = []
    for criterion in criteria:
        draws = _draws_of(estimands, criterion)
        with np.errstate(invalid="ignore"):
            meets = draws < criterion.threshold if criterion.direction == "below" else (
                draws > criterion.threshold)  # fmt: skip
        probability = float(np.mean(meets))
        met = probability >= criterion.required_probability
        row = asdict(criterion)
        row[row.pop("direction")] = row.pop("threshold")
        row.update(probability=probability, met=met, sentence=criterion.sentence(probability, met))
        rows.append(row)
    return rows


# ---------------------------------------------------------------------------
# appraisers compared

COMPARED_KEYS = (
    ("call_rate", "call rate"),
    ("false_reject_rate", "false reject rate"),
    ("false_accept_rate", "false accept rate"),
)
DIFFER_LEVEL = 0.95
"""An appraiser differs from the rest when the posterior probability that their value is
above (or below) every other appraiser's reaches this level."""


def beyond_all_others(draws: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """For draws (S, appraiser): each appraiser's posterior probability of being above
    every other appraiser, and of being below every other. (Against the others' mean,
    one outlier among three would make the other two stand out too.)"""
    count = draws.shape[1]
    above, below = np.empty(count), np.empty(count)
    for j in range(count):
        others = np.delete(draws, j, axis=1)
        above[j] = np.mean((draws[:, [j]] > others).all(axis=1))
        below[j] = np.mean((draws[:, [j]] < others).all(axis=1))
    return above, below


def _appraiser_draws(estimands: xr.Dataset, key: str) -> np.ndarray | None:
    name = f"study__appraiser__{key}"
    if name not in estimands:
        return None
    values = estimands[name].transpose("chain", "draw", "appraiser").to_numpy()
    return values.reshape(-1, values.shape[-1])


def _interval(values: np.ndarray, prob: float) -> tuple[float, float]:
    low, high = np.quantile(values, [(1 - prob) / 2, (1 + prob) / 2])
    return float(low), float(high)


def compare_appraisers(
    estimands: xr.Dataset,
    prob: float = 0.95,
    level: float = DIFFER_LEVEL,
    repeated: dict[str, bool] | None = None,
) -> dict | None:
    """The study's appraisers compared, from the posterior draws (study scope).

    For each key in :data:`COMPARED_KEYS` the model gives: every pair's difference
    (mean, equal-tailed interval, P(first > second)); and the appraisers whose value is
    above (or below) every other appraiser's with posterior probability ``level`` or
    more.
    With per-appraiser repeatability, the probability that each appraiser is the most
    consistent (the smallest repeatability variance, i.e. the least self-disagreement).
    ``repeated`` says which appraisers called some part more than once: only they enter
    that comparison (another's repeatability rests on the prior alone), and none is named
    when fewer than two did. None with fewer than two appraisers or no per-appraiser
    estimands.
    """
    names = [str(a) for a in estimands["appraiser"].to_numpy()] if "appraiser" in estimands else []
    if len(names) < 2:
        return None
    pairs, differ = [], []
    for key, label in COMPARED_KEYS:
        draws = _appraiser_draws(estimands, key)
        if draws is None:
            continue
        for a in range(len(names)):
            for b in range(a + 1, len(names)):
                diff = draws[:, a] - draws[:, b]
                low, high = _interval(diff, prob)
                pairs.append({
                    "key": key, "label": label, "appraiser": names[a], "other": names[b],
                    "mean": float(diff.mean()), "lower": low, "upper": high,
                    "probability_greater": float((diff > 0).mean()),
                })  # fmt: skip
        above, below = beyond_all_others(draws)
        for j, name in enumerate(names):
            for direction, share in (("above", above[j]), ("below", below[j])):
                if share >= level:
                    row = {"key": key, "label": label, "appraiser": name}
                    differ.append({**row, "direction": direction, "probability": float(share)})
    consistency, unrepeated = None, []
    repeat = _appraiser_draws(estimands, "repeatability_variance")
    if repeat is not None:
        keep = [j for j, name in enumerate(names) if (repeated or {}).get(name, True)]
        unrepeated = [name for j, name in enumerate(names) if j not in keep]
        if len(keep) >= 2:
            best = np.bincount(repeat[:, keep].argmin(axis=1), minlength=len(keep))
            consistency = {names[j]: float(p) for j, p in zip(keep, best / repeat.shape[0],
                                                               strict=True)}  # fmt: skip
    if not pairs:
        return None
    return {
        "prob": prob,
        "level": level,
        "pairs": pairs,
        "differ": differ,
        "most_consistent_probability": consistency,
        "consistency_left_out": unrepeated,
        "sentences": _comparison_sentences(differ, consistency, level, unrepeated),
    }


def _comparison_sentences(
    differ: list[dict], consistency: dict | None, level: float, unrepeated: list[str]
) -> list:
    out = []
    for row in differ:
        out.append(
            f"{row['appraiser']}'s {row['label']} is {row['direction']} every other "
            f"appraiser's (posterior probability {row['probability']:.2f})."
        )
    if not differ:
        out.append(
            f"No appraiser is above or below all the others with posterior probability "
            f"{level:g} or more."
        )
    if consistency:
        best = max(consistency, key=consistency.get)
        out.append(
            f"Most consistent (least disagreement with their own repeat calls): {best}, with "
            f"posterior probability {consistency[best]:.2f}."
        )
    if unrepeated:
        who = ", ".join(unrepeated)
        out.append(
            f"Not compared for consistency: {who} called no part twice, so the data say "
            "nothing of their repeatability (the prior alone sets it)."
            if consistency
            else "Which appraiser is most consistent cannot be said: fewer than two appraisers "
            "called any part twice."
        )
    return out
