"""What a study is: the column roles and their names, the options of reading a table,
and the validated study (:class:`StudyData`) every later step works on."""

from __future__ import annotations

import re
from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Literal

import pandas as pd

from bayes_rr.core.errors import DataError

MAX_CALLS = 1_000_000
ROLES = (
    "part",
    "appraiser",
    "trial",
    "call",
    "reference",
    "reference_value",
    "lower_limit",
    "upper_limit",
    "stratum",
)
PER_PART_ROLES = ("reference", "reference_value", "lower_limit", "upper_limit", "stratum")

# Column names recognised without an option, compared after lower-casing and
# dropping everything but letters and digits.
COLUMN_SYNONYMS: dict[str, tuple[str, ...]] = {
    "part": ("part", "partid", "partno", "partnumber", "item", "sample", "specimen", "unit"),
    "appraiser": ("appraiser", "operator", "inspector", "rater", "examiner", "assessor"),
    "trial": (
        "trial", "trialno", "replicate", "replication", "rep", "repeat", "repetition", "run",
        "round", "attempt",
    ),
    "call": ("call", "result", "response", "decision", "outcome", "rating", "verdict"),
    "reference": (
        "reference", "ref", "referencestatus", "referencecall", "referencejudgement", "truth",
        "truestatus", "standard", "known", "knownstatus", "master", "mastercall", "masterstatus",
        "masterjudgement", "expert", "expertcall", "expertjudgement", "gold", "goldstandard",
        "expected", "expectedcall",
    ),
    "reference_value": (
        "referencevalue", "refvalue", "truevalue", "measuredvalue", "measurement", "mastervalue",
        "referencemeasurement",
    ),
    "lower_limit": ("lowerlimit", "lsl", "lowerspec", "lowerspecificationlimit", "lowerlimitvalue"),
    "stratum": ("stratum", "strata", "stratumname", "partgroup", "selectiongroup"),
    "upper_limit": ("upperlimit", "usl", "upperspec", "upperspecificationlimit", "upperlimitvalue"),
}  # fmt: skip

# Pairs of (accept, reject) labels recognised without an option. A study's
# labels must all come from one pair; anything else must be declared.
LABEL_VOCABULARIES: tuple[tuple[str, str], ...] = (
    ("0", "1"),
    ("accept", "reject"),
    ("pass", "fail"),
    ("go", "nogo"),
    ("good", "bad"),
    ("ok", "ng"),
    ("ok", "nok"),
    # "in Ordnung" / "nicht in Ordnung", common on German shop floors (i.O. / n.i.O.)
    ("i.o.", "n.i.o."),
    ("io", "nio"),
    ("conforming", "nonconforming"),
)


WIDE_COLUMN = re.compile(
    r"^(?P<appraiser>.*?\S)\s*(?:[_\-.:/#]|\s)\s*"
    r"(?:(?:trial|try|rep|replicate|run|t|r)\s*[_\-.]?\s*)?(?P<trial>\d+)$",
    re.IGNORECASE,
)

Layout = Literal["auto", "tidy", "wide"]


@dataclass(frozen=True)
class ReadOptions:
    """How to read a study table.

    Parameters
    ----------
    layout
        ``"tidy"``, ``"wide"`` or ``"auto"`` (tidy when a call and an
        appraiser column are found, wide otherwise).
    columns
        Role -> column name in the file, for roles whose column is not named
        in the usual way (roles: part, appraiser, trial, call, reference,
        reference_value).
    reject_label
        The raw label meaning *reject*, when the labels are not one of the
        recognised vocabularies.
    accept_labels
        With ``reject_label``: the labels meaning *accept*. When empty, every
        other label must be one single accept label.
    drop_missing
        Drop calls that are empty instead of refusing the file.
    sheet
        Sheet name of an XLSX file (default: the first sheet).
    wide_columns
        Explicit wide layout: column -> (appraiser, trial).
    lower_limit, upper_limit
        The specification limit(s) of the reference value (a part is bad below the
        lower or above the upper limit); also read from columns of that name.
    """

    layout: Layout = "auto"
    columns: Mapping[str, str] = field(default_factory=dict)
    reject_label: str | None = None
    accept_labels: tuple[str, ...] = ()
    drop_missing: bool = False
    sheet: str | None = None
    wide_columns: Mapping[str, tuple[str, str]] | None = None
    lower_limit: float | None = None
    upper_limit: float | None = None

    def __post_init__(self) -> None:
        unknown = sorted(set(self.columns) - set(ROLES))
        if unknown:
            raise DataError(f"unknown column role(s) {unknown}; expected some of {list(ROLES)}")
        if self.layout not in ("auto", "tidy", "wide"):
            raise DataError(f"layout {self.layout!r} is not one of 'auto', 'tidy', 'wide'")
        if self.accept_labels and self.reject_label is None:
            raise DataError(
                "accept labels were given without a reject label; give --reject-label too"
            )


@dataclass(frozen=True)
class StudyData:
    """A validated pass/fail study.

    Attributes
    ----------
    calls
        Tidy calls: columns ``part``, ``appraiser``, ``trial`` (strings) and
        ``call`` (1 = reject, 0 = accept), sorted by the coords.
    cells
        One row per non-empty (part, appraiser) cell: ``part``, ``appraiser``,
        ``n`` (calls), ``s`` (reject calls), ``part_index``, ``appraiser_index``.
    parts, appraisers
        Ordered coords (natural sort of the labels, so file order never matters).
    reference
        Per part reference status (1 = reject, 0 = accept) indexed by part,
        or None.
    reference_value
        Per part reference value on a continuous scale, or None.
    source
        Where the data came from (file name or a description).
    sha256
        Hash of the normalised data: the same study gives the same hash
        whatever the layout, row order or label spelling.
    notes
        Things the reader did that a user should know (dropped rows, trial
        numbers assigned from file order, columns not used).
    ignored_columns
        Columns of the file that were not used (none is dropped silently).
    """

    calls: pd.DataFrame
    cells: pd.DataFrame
    parts: tuple[str, ...]
    appraisers: tuple[str, ...]
    reference: pd.Series | None
    reference_value: pd.Series | None
    source: str
    sha256: str
    notes: tuple[str, ...] = ()
    ignored_columns: tuple[str, ...] = ()
    limits: tuple[float | None, float | None] = (None, None)
    stratum: pd.Series | None = None
    """Per part, the group its part was picked from (a ``stratum`` column), or None:
    production figures can reweight the groups to their shares of production."""
    partial_status: pd.Series | None = None
    """Per part, the reference status where the reference column gives one (1 / 0) and
    NaN where it is empty; set only for such a partial reference (``reference`` is then
    None). The latent class model uses the known statuses and infers the rest."""

    @property
    def n_calls(self) -> int:
        return len(self.calls)

    @property
    def has_reference(self) -> bool:
        return self.reference is not None

    def design(self) -> dict:
        """Plain description of the design, for output and the report."""
        n = self.cells["n"].to_numpy()
        return {
            "source": self.source,
            "parts": len(self.parts),
            "appraisers": len(self.appraisers),
            "appraiser_names": list(self.appraisers),
            "cells": len(self.cells),
            "empty_cells": len(self.parts) * len(self.appraisers) - len(self.cells),
            "trials_per_cell_min": int(n.min()),
            "trials_per_cell_max": int(n.max()),
            "balanced": bool(
                n.min() == n.max() and len(self.cells) == len(self.parts) * len(self.appraisers)
            ),
            "calls": self.n_calls,
            "reject_calls": int(self.calls["call"].sum()),
            "reject_share": float(self.calls["call"].mean()),
            "has_reference": self.has_reference,
            "reference_known_parts": (
                int(self.partial_status.notna().sum())
                if self.partial_status is not None
                else len(self.parts)
                if self.reference is not None
                else 0
            ),
            "reference_reject_parts": (
                int(self.reference.sum()) if self.reference is not None else None
            ),
            "has_reference_value": self.reference_value is not None,
            "reference_value_range": (
                [float(self.reference_value.min()), float(self.reference_value.max())]
                if self.reference_value is not None
                else None
            ),
            "limits": {"lower": self.limits[0], "upper": self.limits[1]},
            "strata": (
                {str(k): int(v) for k, v in self.stratum.value_counts().sort_index().items()}
                if self.stratum is not None
                else None
            ),
            "data_sha256": self.sha256,
            "ignored_columns": list(self.ignored_columns),
            "notes": list(self.notes),
        }
