"""Acceptance criteria as posterior probabilities.

A criteria file (TOML) states what the user's organisation requires, e.g.

    [[criterion]]
    key = "repeatability_share"      # a study- or system-level estimand key
    scope = "study"                  # or "population"
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

from bayes_rr.errors import SpecError

LEVELS = ("study", "system")
SCOPES = ("study", "population")


@dataclass(frozen=True)
class Criterion:
    """One requirement on a study- or system-level estimand."""

    key: str
    scope: str
    threshold: float
    direction: str  # "below" or "above"
    required_probability: float
    label: str = ""

    def sentence(self, probability: float, met: bool) -> str:
        name = self.label or self.key.replace("_", " ")
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
    allowed = {"key", "scope", "below", "above", "required_probability", "label"}
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
        out.append(Criterion(key, scope, threshold, sides[0], required, label))
    return tuple(out)


def load_criteria(path: str | Path) -> tuple[Criterion, ...]:
    path = Path(path)
    try:
        text = path.read_text(encoding="utf-8")
    except (OSError, UnicodeDecodeError) as exc:
        raise SpecError(f"{path}: cannot read the criteria file ({exc})") from None
    return parse_criteria(text, path.name)


def check_keys(criteria: tuple[Criterion, ...]) -> None:
    """Refuse, before any sampling, a criterion whose key no model gives."""
    from bayes_rr.estimands import STUDY_KEYS

    known = {
        *STUDY_KEYS, "cross_disagreement", "appraiser_bias_variance", "interaction_variance",
        "false_reject_rate", "false_accept_rate", "reference_agreement", "reject_prevalence",
        "transition_width", "limit_spread",
    }  # fmt: skip
    for criterion in criteria:
        base = criterion.key.split("[")[0]
        if base not in known and not base.startswith(("bias", "effective_limit")):
            raise SpecError(
                f"criterion key {criterion.key!r} is not a study- or system-level estimand; "
                f"expected one of {sorted(known)}"
            )


def _draws_of(estimands: xr.Dataset, criterion: Criterion) -> np.ndarray:
    for level in LEVELS:
        name = f"{criterion.scope}__{level}__{criterion.key}"
        if name in estimands and estimands[name].ndim == 2:
            return estimands[name].to_numpy().ravel()
    known = sorted({
        name.split("__")[2] for name in estimands.data_vars
        if name.split("__")[1] in LEVELS and name.startswith(criterion.scope + "__")
        and estimands[name].ndim == 2
    })  # fmt: skip
    raise SpecError(
        f"criterion key {criterion.key!r} ({criterion.scope} scope) is not a study- or "
        f"system-level estimand of this fit; expected one of {known}"
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
