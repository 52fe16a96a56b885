"""The ``describe`` step: design summary and classical statistics of a study."""

from __future__ import annotations

from importlib import resources
from pathlib import Path

from bayes_rr.core import DEFAULT_PROB
from bayes_rr.study.classical import classical_statistics
from bayes_rr.study.data import ReadOptions, StudyData, read_study

DEMO_FILE = "demo_study.csv"


def demo_path() -> Path:
    """Path of the bundled (invented) demo study."""
    return Path(str(resources.files("bayes_rr.demo").joinpath(DEMO_FILE)))


def describe_study(study: StudyData, prob: float = DEFAULT_PROB) -> dict:
    """Design and classical statistics as one JSON-ready dict."""
    return {"design": study.design(), **classical_statistics(study, prob).as_dict()}


def describe_file(
    path: str | Path, options: ReadOptions | None = None, prob: float = DEFAULT_PROB
) -> dict:
    """Read, validate and describe a study file."""
    return describe_study(read_study(path, options), prob)


def reference_rows(design: dict) -> list[tuple[str, str]]:
    """(label, text) rows about the reference status, the reference values and the
    limits, where the study has them (for the terminal and the report)."""
    rows = []
    if design.get("reference_reject_parts") is not None:
        rows.append(("parts with reference status reject", str(design["reference_reject_parts"])))
    known = design.get("reference_known_parts")
    if known and not design.get("has_reference"):
        rows.append(("reference status known", f"for {known} of {design['parts']} parts"))
    span = design.get("reference_value_range")
    if span:
        rows.append(("reference values", f"{span[0]:g} to {span[1]:g}"))
    for side in ("lower", "upper"):
        value = (design.get("limits") or {}).get(side)
        if value is not None:
            rows.append((f"{side} specification limit", f"{value:g}"))
    return rows
