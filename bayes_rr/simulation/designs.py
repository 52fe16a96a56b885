"""Study designs for planning and calibration, and the mix of parts in them."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from bayes_rr.core.errors import SpecError
from bayes_rr.families import FAMILIES, family_of
from bayes_rr.families.layout import reference_statuses
from bayes_rr.priors.spec import ModelSpec
from bayes_rr.study.data import StudyData, study_from_cells

# Which families can be simulated, and what their simulated parts are, is each
# family's declaration (``Family.simulated``, ``Family.simulated_parts``).
BORDERLINE = (0.1, 0.9)
"""A part is borderline when a typical appraiser rejects it with a probability in this
range: repeat calls on it disagree, so it carries the information on repeatability."""
POOL_FACTOR = 10
"""Candidate parts drawn per part of the design when the share of borderline parts is
set: the study's parts are picked from them."""
MAX_PARTS, MAX_APPRAISERS, MAX_TRIALS = 2000, 50, 20

PART_MIX_HELP = (
    "share of parts of each kind. With a reference column (reference-logit): the share "
    "of parts whose reference status is 'reject' (default 0.5). Latent class: the share "
    "of reject parts among the study's parts, their status hidden from the fit (default: "
    "drawn from the prevalence's prior). Call curve: the share of parts whose measured "
    "value lies beyond the limit (default 0.5; values are standard normal quantiles, "
    "results in sds of the study's values). Otherwise: the share of borderline parts, "
    "those a typical appraiser rejects with a probability between 10% and 90% (default: "
    "parts as the prior's population gives them). Borderline parts are where calls "
    "disagree, so they decide how well repeatability and reproducibility are estimated."
)


@dataclass(frozen=True)
class Design:
    """One study design: parts x appraisers x trials, and the mix of parts."""

    parts: int
    appraisers: int
    trials: int
    part_mix: float | None = None

    @property
    def label(self) -> str:
        mix = "" if self.part_mix is None else f" mix {self.part_mix:g}"
        return f"{self.parts}x{self.appraisers}x{self.trials}{mix}"

    def as_dict(self) -> dict:
        return {"parts": self.parts, "appraisers": self.appraisers, "trials": self.trials,
                "part_mix": self.part_mix}  # fmt: skip


def parse_counts(text: str | int, option: str, least: int, most: int) -> tuple[int, ...]:
    """``"20,40,60"`` -> (20, 40, 60), each a whole number in [least, most]."""
    out = []
    for item in str(text).split(","):
        item = item.strip()
        try:
            value = int(item)
        except ValueError:
            value = None
        if value is None or not least <= value <= most:
            raise SpecError(
                f"{option} {text!r}: {item!r} is not a whole number from {least} to {most}; "
                f"give one or more, separated by commas (e.g. {option} 20,40)"
            )
        out.append(value)
    return tuple(sorted(set(out)))


def needs_reference(spec: ModelSpec) -> bool:
    """Whether simulated studies carry a reference status per part: for the model that
    needs it. The other models' optional reference term stays out (studies without a
    reference column, the usual case for a repeatability study)."""
    return family_of(spec).simulated_parts == "reference"


def parts_from_prior(spec: ModelSpec) -> bool:
    """Whether a simulated study's parts are drawn from the prior's population (so that
    ``--part-mix`` picks borderline parts from a pool)."""
    return family_of(spec).simulated_parts == "drawn"


def check_simulated(spec: ModelSpec, part_mix: float | None) -> None:
    """Refuse a model or part mix the simulator cannot serve, before any work."""
    if not family_of(spec).simulated:
        simulated = [name for name, family in FAMILIES.items() if family.simulated]
        raise SpecError(
            f"model {spec.name!r} (family {spec.family}): studies can be simulated for the "
            f"families {', '.join(simulated)} only; choose one of their models"
        )
    if spec.reference_accuracy is not None:
        raise SpecError(
            f"model {spec.name!r} states the reference's error rates ([reference_accuracy]); "
            "studies with a fallible reference are not simulated yet: plan or calibrate the "
            "model without that table"
        )
    if part_mix is not None and not 0 <= part_mix <= 1:
        raise SpecError(f"--part-mix {part_mix!r}: expected a share from 0 to 1")
    kind = family_of(spec).simulated_parts
    if kind == "positions" and part_mix is not None:
        raise SpecError(
            f"--part-mix {part_mix!r}: model {spec.name!r} draws each part's position from "
            "the population of parts that fixes its scale; leave --part-mix out"
        )
    if not parts_from_prior(spec) and part_mix is not None and not 0 < part_mix < 1:
        what = {
            "reference": "parts of both reference statuses",
            "class": "parts of both classes",
            "values": "parts on both sides of the limit",
        }[family_of(spec).simulated_parts]
        raise SpecError(
            f"--part-mix {part_mix!r}: model {spec.name!r} needs {what}; give a share "
            "strictly between 0 and 1"
        )  # fmt: skip


def design_grid(
    parts: tuple[int, ...], appraisers: tuple[int, ...], trials: tuple[int, ...],
    part_mix: float | None,
) -> list[Design]:  # fmt: skip
    """Every combination, smallest study (fewest calls) first."""
    grid = [Design(p, a, t, part_mix) for p in parts for a in appraisers for t in trials]
    return sorted(grid, key=lambda d: (d.parts * d.appraisers * d.trials, d.parts, d.appraisers))


def skeleton_study(
    design: Design, spec: ModelSpec, parts: int | None = None, sides: tuple[str, ...] = ("upper",)
) -> StudyData:
    """A study of the design with every call an accept: the layout that simulated calls
    fill in. ``parts`` overrides the design's (a pool of candidate parts); ``sides`` are
    the limits of a design with measured values."""
    count = parts or design.parts
    n = np.full((count, design.appraisers), design.trials, dtype=int)
    kind = family_of(spec).simulated_parts
    reference, values, limits = None, None, (None, None)
    if kind == "reference":
        share = 0.5 if design.part_mix is None else design.part_mix
        reference = reference_statuses(count, share)
    if kind == "values":
        share = 0.5 if design.part_mix is None else design.part_mix
        values, limits = design_values(count, share, sides)
    return study_from_cells(
        [f"P{k + 1:04d}" for k in range(count)],
        [f"A{j + 1:02d}" for j in range(design.appraisers)],
        n,
        np.zeros_like(n),
        reference=reference,
        reference_value=values,
        limits=limits,
        source=f"simulated design {design.label}",
    )


def design_values(
    parts: int, outside_share: float, sides: tuple[str, ...]
) -> tuple[np.ndarray, tuple[float | None, float | None]]:
    """Measured values of a simulated study and its limits, on the values' own scale.

    The values are the normal quantiles at (i - 1/2) / parts, standardised to mean 0 and
    sd 1 (the call-curve model's priors are in sds of the study's values, so the scale is
    no loss); the limits leave ``outside_share`` of the parts outside (split evenly
    between two limits), each halfway between the neighbouring values.
    """
    from scipy.special import ndtri

    x = ndtri((np.arange(parts) + 0.5) / parts)
    x = (x - x.mean()) / x.std()
    outside = min(max(1, round(outside_share * parts)), parts - 1)
    per_side = {side: outside / len(sides) for side in sides}
    lower = upper = None
    if "upper" in per_side:
        k = max(1, round(per_side["upper"]))
        upper = float(np.round((x[parts - k - 1] + x[parts - k]) / 2, 12))
    if "lower" in per_side:
        k = max(1, round(per_side["lower"]))
        lower = float(np.round((x[k - 1] + x[k]) / 2, 12))
    return x, (lower, upper)


def pick_parts(
    typical_rate: np.ndarray, wanted: int, borderline_share: float, rng: np.random.Generator
) -> tuple[np.ndarray, float]:
    """Indices of ``wanted`` parts from a pool, ``borderline_share`` of them borderline;
    when the pool has too few of one kind the other fills in. Returns the indices and
    the share of borderline parts reached."""
    low, high = BORDERLINE
    border = np.flatnonzero((typical_rate >= low) & (typical_rate <= high))
    clear = np.flatnonzero((typical_rate < low) | (typical_rate > high))
    n_border = min(round(borderline_share * wanted), border.size)
    n_clear = min(wanted - n_border, clear.size)
    n_border = wanted - n_clear
    picked = np.concatenate(
        [rng.choice(border, n_border, replace=False), rng.choice(clear, n_clear, replace=False)]
    )
    return np.sort(picked), n_border / wanted
