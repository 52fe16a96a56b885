"""What is checked of a study against the chosen model before sampling.

A limit far from every measured value (most often a limit in other units: 10050 um
against values in mm) is refused: the fit would pass its gate and report nonsense. A
limit with every part on one side, calls that reject the wrong side of a limit, and
reference statuses that contradict the limits are warned about: the fit can run, but
part of what it says then rests on the prior. Options and columns the model does not
use are named, never dropped in silence. Reads the design only: no draws.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from bayes_rr.core.errors import DataError
from bayes_rr.families import family_of
from bayes_rr.study.data import StudyData

UNIT_FACTORS = (1e-3, 1e-2, 1e-1, 10.0, 100.0, 1000.0, 1 / 25.4, 25.4)
"""Factors between common units (milli, centi, deci and their inverses; inch and mm)
tried when a limit lies far from the measured values, to suggest what was meant."""


@dataclass(frozen=True)
class Preflight:
    """What the terminal says before sampling and summary.json keeps."""

    ignored_options: tuple[str, ...] = ()
    """Options and columns given that the chosen model does not use, one line each."""
    warnings: tuple[str, ...] = ()
    """What the fit can run with but the user should know first, one line each."""


def preflight(study: StudyData, spec, production=None) -> Preflight:
    """Check ``study`` against ``spec`` (and the production file, when given); raise
    :class:`DataError` for a limit in the wrong units, return what to say otherwise."""
    family = family_of(spec)
    warnings: list[str] = []
    if family.info.measured_curve and study.reference_value is not None:
        warnings += limit_warnings(study)
    return Preflight(tuple(ignored_options(study, spec, production)), tuple(warnings))


def _sides(study: StudyData) -> list[tuple[str, float, float]]:
    lower, upper = study.limits
    return [(name, value, sign) for name, value, sign in
            (("lower", lower, -1.0), ("upper", upper, 1.0)) if value is not None]  # fmt: skip


def limit_warnings(study: StudyData) -> list[str]:
    """Refuse a limit more than the measured values' own range away from them; warn
    when every part lies on one side of a limit, when the calls reject the parts inside
    the limits more often than those beyond, and when the reference statuses disagree
    with the limits."""
    x = study.reference_value.reindex(list(study.parts)).to_numpy(dtype=float)
    low, high = float(x.min()), float(x.max())
    span = high - low
    out = []
    for name, limit, sign in _sides(study):
        if span > 0 and not low - span <= limit <= high + span:
            raise DataError(
                f"{study.source}: the {name} limit {limit:g} lies more than the measured "
                f"values' own range away from them (they run from {low:g} to {high:g}); "
                f"{_unit_hint(limit, low, high, span)}"
            )
        beyond = sign * (x - limit) > 0
        if beyond.all() or not beyond.any():
            where = "beyond" if beyond.all() else "within"
            out.append(
                f"every part's measured value lies {where} the {name} limit {limit:g}, so "
                "the study shows no part on the other side: where the appraisers put that "
                "limit rests on the prior and on the trend of the calls alone; add parts "
                "from both sides of it"
            )
    out += _calls_against_limits(study, x)
    out += _reference_against_limits(study, x)
    return out


def _unit_hint(limit: float, low: float, high: float, span: float) -> str:
    for factor in UNIT_FACTORS:
        scaled = limit * factor
        if low - span <= scaled <= high + span:
            return (
                f"is it in other units? {limit:g} x {factor:g} = {scaled:g} would lie among "
                "the values; give the limit in the units of the reference values"
            )
    return "check the limit, and the units of the reference values"


def _out_of_spec(study: StudyData, x: np.ndarray) -> np.ndarray:
    out = np.zeros(x.shape, dtype=bool)
    for _, limit, sign in _sides(study):
        out |= sign * (x - limit) > 0
    return out


def _calls_against_limits(study: StudyData, x: np.ndarray) -> list[str]:
    bad = _out_of_spec(study, x)
    if bad.all() or not bad.any():
        return []
    calls = study.calls
    position = {part: i for i, part in enumerate(study.parts)}
    part_bad = bad[calls["part"].map(position).to_numpy()]
    rejects = calls["call"].to_numpy(dtype=float)
    inside, beyond = rejects[~part_bad].mean(), rejects[part_bad].mean()
    if beyond >= inside:
        return []
    names = " and ".join(f"{name} limit {limit:g}" for name, limit, _ in _sides(study))
    return [
        f"the calls reject parts within the {names} more often ({inside:.0%} of calls) than "
        f"parts beyond it ({beyond:.0%}): is the limit on the other side (--lower-limit "
        "for --upper-limit, or the other way round)?"
    ]


def _reference_against_limits(study: StudyData, x: np.ndarray) -> list[str]:
    if study.reference is None:
        return []
    by_value = _out_of_spec(study, x)
    status = study.reference.reindex(list(study.parts)).to_numpy(dtype=float) == 1
    differ = int((by_value != status).sum())
    if differ == 0:
        return []
    total = len(status)
    advice = (
        "most disagree: check the limit's value and side"
        if differ > total / 2
        else "the model goes by the measured values and the limits, not by the status column"
    )
    return [
        f"the reference status column and the measured values against the limits disagree "
        f"on {differ} of {total} parts; {advice}"
    ]


def ignored_options(study: StudyData, spec, production=None) -> list[str]:
    """One line for each option or column given that ``spec``'s model does not use."""
    info = family_of(spec).info
    out = []
    if any(v is not None for v in study.limits) and not info.measured_curve:
        limits = ", ".join(f"{name} {limit:g}" for name, limit, _ in _sides(study))
        out.append(
            f"the specification limits ({limits}) are not used by the {spec.name} model: "
            "only call-curve places calls against a limit"
        )
    if study.reference_value is not None and not info.measured_curve:
        out.append(
            f"the measured reference values are not used by the {spec.name} model: only "
            "call-curve uses them"
        )
    if (study.reference is not None and "reference" not in info.needs
            and not family_of(spec).full_reference):  # fmt: skip
        out.append(
            f"the reference status column is not used by the {spec.name} model: only "
            "reference-logit and latent-trait take the status of each part as known"
        )
    partial = getattr(study, "partial_status", None)
    if partial is not None and not family_of(spec).partial_reference:
        out.append(
            f"the reference statuses of {int(partial.notna().sum())} parts are not used by "
            f"the {spec.name} model: only latent-class and latent-trait take a partial reference"
        )
    strata = production is not None and getattr(production, "strata", None) is not None
    if study.stratum is not None and not strata:
        out.append(
            "the stratum column is used only with strata in a production file (--production); "
            "without them it is kept in the data but not used"
        )
    return out
