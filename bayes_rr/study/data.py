"""Reading and validating study data.

A study file is a table of pass/fail calls in one of two layouts:

* tidy: one row per call, with columns for part, appraiser, trial (optional),
  call, and optionally the part's reference status and reference value;
* wide: one row per part, one column per appraiser and trial (``A_1``,
  ``A-1``, ``A trial 1``, ... or an explicit mapping).

Everything downstream works on :class:`StudyData`: the tidy calls, the cell
table (part, appraiser, n, s) and a SHA-256 of the normalised data. This
module never imports PyMC.
"""

from __future__ import annotations

import hashlib
import re
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Literal

import numpy as np
import pandas as pd

from bayes_rr.core.errors import DataError
from bayes_rr.study.tables import RawTable, read_table

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
)
PER_PART_ROLES = ("reference", "reference_value", "lower_limit", "upper_limit")

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
    """(lower, upper) specification limits of the reference value; None where absent."""

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
            "data_sha256": self.sha256,
            "ignored_columns": list(self.ignored_columns),
            "notes": list(self.notes),
        }


# ---------------------------------------------------------------------------
# helpers


def natural_key(label: str) -> tuple:
    """Sort key that puts ``P2`` before ``P10``."""
    return tuple(
        (0, int(tok), "") if tok.isdigit() else (1, 0, tok.lower())
        for tok in re.split(r"(\d+)", label)
        if tok
    )


def _norm_name(name: str) -> str:
    return re.sub(r"[^a-z0-9]", "", str(name).lower())


def normalise_label(value: object) -> str:
    """Label as compared against vocabularies: case, spaces, ``-`` and ``_`` ignored."""
    text = re.sub(r"[\s_\-]+", "", str(value).strip().lower())
    if re.fullmatch(r"[01](\.0*)?", text):
        return text[0]
    return text


def _norm_id(value: object) -> str:
    text = str(value).strip()
    # Excel and pandas turn the trial/part number 1 into 1.0: undo that.
    if re.fullmatch(r"-?\d+\.0+", text):
        text = text.split(".")[0]
    return text


def _norm_trial(value: object) -> str:
    """Trial label: a number is a number (``02``, ``2`` and ``2.0`` are one trial)."""
    text = _norm_id(value)
    if re.fullmatch(r"\+?\d+", text):
        return str(int(text))
    return text


def _is_missing(value: object) -> bool:
    """Only a truly empty cell is missing: ``NA``, ``None`` or ``nan`` may be a name."""
    if value is None:
        return True
    if isinstance(value, float) and np.isnan(value):
        return True
    return not str(value).strip()


def _lines(rows: Sequence[int], limit: int = 8) -> str:
    """File line numbers, shortened to the first few."""
    shown = ", ".join(str(r) for r in list(rows)[:limit])
    more = f" and {len(rows) - limit} more" if len(rows) > limit else ""
    return f"line{'s' if len(rows) > 1 else ''} {shown}{more}"


# ---------------------------------------------------------------------------
# reading the table


def _clean_columns(frame: pd.DataFrame, source: str) -> pd.DataFrame:
    frame = frame.copy()
    frame.columns = [str(c).strip() for c in frame.columns]
    names = list(frame.columns)
    dupes = sorted({c for c in names if c and names.count(c) > 1})
    if dupes:
        raise DataError(
            f"{source}: column name(s) {dupes} appear more than once in the header; give every "
            "column its own name"
        )
    unnamed = [k for k, c in enumerate(names) if not c]
    holding = [k + 1 for k in unnamed if frame.iloc[:, k].map(lambda v: not _is_missing(v)).any()]
    if holding:
        raise DataError(
            f"{source}: column(s) number {holding} have no name in the header but hold values; "
            "name them (or delete them)"
        )
    frame = frame.iloc[:, [k for k in range(len(names)) if names[k]]]
    # Rows that are blank everywhere are spreadsheet padding, not missing calls.
    blank = frame.apply(lambda col: col.map(_is_missing)).all(axis=1)
    return frame.loc[~blank]


def _find_column(frame: pd.DataFrame, role: str, options: ReadOptions, source: str) -> str | None:
    if role in options.columns:
        wanted = options.columns[role]
        if wanted not in frame.columns:
            raise DataError(
                f"{source}: the {role} column {wanted!r} given by option is not in the file; "
                f"columns found: {list(frame.columns)}"
            )
        return wanted
    by_norm: dict[str, list[str]] = {}
    for col in frame.columns:
        by_norm.setdefault(_norm_name(col), []).append(col)
    for synonym in COLUMN_SYNONYMS[role]:
        if synonym in by_norm:
            return by_norm[synonym][0]
    return None


# ---------------------------------------------------------------------------
# labels


def decode_labels(
    values: pd.Series,
    *,
    what: str,
    source: str,
    reject_label: str | None = None,
    accept_labels: Sequence[str] = (),
) -> np.ndarray:
    """Map raw labels to 1 (reject) and 0 (accept), or raise a :class:`DataError`.

    Without ``reject_label`` every label must belong to one recognised
    vocabulary pair (see ``LABEL_VOCABULARIES``); nothing is guessed.
    """
    normed = values.map(normalise_label)
    counts = normed.value_counts()
    spelled = {n: values[normed == n].iloc[0] for n in counts.index}
    listing = ", ".join(f"{str(spelled[n]).strip()!r} ({c})" for n, c in counts.items())
    if reject_label is not None:
        reject = normalise_label(reject_label)
        others = [n for n in counts.index if n != reject]
        if accept_labels:
            accept = {normalise_label(a) for a in accept_labels}
            unknown = [n for n in others if n not in accept]
            if unknown:
                raise DataError(
                    f"{source}: {what} label(s) {[spelled[n] for n in unknown]} are neither the "
                    f"reject label {reject_label!r} nor an accept label {list(accept_labels)}; "
                    f"labels found: {listing}"
                )
        elif len(others) > 1:
            raise DataError(
                f"{source}: with reject label {reject_label!r} every other {what} label must be "
                f"one accept label, but found {listing}; list the accept labels with "
                "--accept-label"
            )
        return (normed == reject).to_numpy(dtype=np.int8)
    labels = set(counts.index)
    for accept, reject in LABEL_VOCABULARIES:
        if labels <= {accept, reject}:
            return (normed == reject).to_numpy(dtype=np.int8)
    pairs = ", ".join(f"{a}/{r}" for a, r in LABEL_VOCABULARIES)
    raise DataError(
        f"{source}: unknown or mixed {what} labels: {listing}; expected one pair of "
        f"accept/reject labels ({pairs}), or say which label means reject with --reject-label"
    )


# ---------------------------------------------------------------------------
# layouts -> long table


def _wide_mapping(
    frame: pd.DataFrame, id_columns: set[str], options: ReadOptions, source: str
) -> dict[str, tuple[str, str]]:
    if options.wide_columns:
        missing = [c for c in options.wide_columns if c not in frame.columns]
        if missing:
            raise DataError(
                f"{source}: wide column(s) {missing} given by option are not in the file; "
                f"columns found: {list(frame.columns)}"
            )
        return {c: (str(a), _norm_id(t)) for c, (a, t) in options.wide_columns.items()}
    mapping: dict[str, tuple[str, str]] = {}
    unmatched = []
    for col in frame.columns:
        if col in id_columns:
            continue
        match = WIDE_COLUMN.match(col)
        if match:
            mapping[col] = (match["appraiser"].strip(), str(int(match["trial"])))
        else:
            unmatched.append(col)
    if unmatched:
        raise DataError(
            f"{source}: wide layout, but column(s) {unmatched} are not of the form "
            "APPRAISER_TRIAL (e.g. 'A_1', 'A-2', 'A trial 3'); map a call column with "
            "--wide-column 'COLUMN=APPRAISER:TRIAL', a reference status column with "
            "--reference-col, a measured reference value with --reference-value-col, or "
            "delete columns that are not part of the study"
        )
    if not mapping:
        raise DataError(
            f"{source}: no call columns found; columns found: {list(frame.columns)}. Expected a "
            "tidy layout (part, appraiser, trial, call columns) or a wide one "
            "(part + A_1, A_2, ...)"
        )
    return mapping


def _to_long(
    frame: pd.DataFrame, options: ReadOptions, source: str
) -> tuple[pd.DataFrame, list[str]]:
    """Long table with columns part, appraiser, trial, call (raw), reference, reference_value
    and ``row`` (the file line of the call; ``frame``'s index), in file order; and the
    columns of ``frame`` it used."""
    found = {role: _find_column(frame, role, options, source) for role in ROLES}
    if found["part"] is None:
        raise DataError(
            f"{source}: no part column; columns found: {list(frame.columns)}. Name it 'part' "
            "or say which column it is with --part-col"
        )
    layout = options.layout
    if layout == "auto":
        # An appraiser or call column means one row per call; the message for a
        # missing partner column is then about the tidy layout.
        tidy_like = found["call"] is not None or found["appraiser"] is not None
        layout = "tidy" if tidy_like else "wide"
    extra = {found[role] for role in PER_PART_ROLES} - {None}
    rows = frame.index.to_numpy()
    positions = np.arange(len(frame))
    if layout == "tidy":
        for role in ("appraiser", "call"):
            if found[role] is None:
                raise DataError(
                    f"{source}: tidy layout needs a {role} column; columns found: "
                    f"{list(frame.columns)}. Name it {role!r} or use --{role}-col"
                )
        long = pd.DataFrame(
            {
                "part": frame[found["part"]].to_numpy(),
                "appraiser": frame[found["appraiser"]].to_numpy(),
                "trial": frame[found["trial"]].to_numpy() if found["trial"] else None,
                "call": frame[found["call"]].to_numpy(),
                "row": rows,
                "pos": positions,
            }
        )
        used = [found[r] for r in ("part", "appraiser", "trial", "call")] + sorted(extra)
    else:
        ids = {found["part"], *extra}
        mapping = _wide_mapping(frame, ids, options, source)
        pieces = []
        for col, (appraiser, trial) in mapping.items():
            pieces.append(
                pd.DataFrame(
                    {
                        "part": frame[found["part"]].to_numpy(),
                        "appraiser": appraiser,
                        "trial": trial,
                        "call": frame[col].to_numpy(),
                        "row": rows,
                        "pos": positions,
                    }
                )
            )
        long = pd.concat(pieces, ignore_index=True)
        used = [found["part"], *sorted(extra), *mapping]
    for role in PER_PART_ROLES:
        col = found[role]
        long[role] = frame[col].to_numpy()[long["pos"].to_numpy()] if col else None
    return long.drop(columns="pos"), [c for c in used if c]


# ---------------------------------------------------------------------------
# validation


def _validated_calls(long: pd.DataFrame, options: ReadOptions, source: str) -> tuple:
    notes: list[str] = []
    if len(long) > MAX_CALLS:
        raise DataError(
            f"{source}: {len(long):,} calls, more than the {MAX_CALLS:,} a study may have; "
            "check the layout or analyse a subset"
        )
    for role in ("part", "appraiser"):
        bad = long.index[long[role].map(_is_missing)]
        if len(bad):
            raise DataError(
                f"{source}: empty {role} name at {_lines(long.loc[bad, 'row'].tolist())}; "
                f"every call needs a {role}"
            )
    missing = long["call"].map(_is_missing).to_numpy()
    if missing.any():
        rows = sorted(set(long.loc[missing, "row"].tolist()))
        if not options.drop_missing:
            raise DataError(
                f"{source}: {int(missing.sum())} empty call(s) at {_lines(rows)}; fill them in, "
                "or drop them with --drop-missing"
            )
        notes.append(f"dropped {int(missing.sum())} empty call(s) ({_lines(rows)})")
        long = long.loc[~missing].reset_index(drop=True)
    if long.empty:
        raise DataError(f"{source}: no calls in the file; expected at least one row of calls")
    long = long.assign(
        part=long["part"].map(_norm_id),
        appraiser=long["appraiser"].map(_norm_id),
    )
    if long["trial"].isna().all():
        long["trial"] = (long.groupby(["part", "appraiser"]).cumcount() + 1).astype(str)
        notes.append("no trial column: trials numbered in file order within each cell")
    else:
        bad = long.index[long["trial"].map(_is_missing)]
        if len(bad):
            raise DataError(
                f"{source}: empty trial at {_lines(long.loc[bad, 'row'].tolist())}; "
                "number every trial, or remove the trial column to number them in file order"
            )
        long["trial"] = long["trial"].map(_norm_trial)
    dup = long.duplicated(["part", "appraiser", "trial"], keep=False)
    if dup.any():
        first = long.loc[dup].iloc[0]
        raise DataError(
            f"{source}: {int(dup.sum())} calls share a (part, appraiser, trial), e.g. part "
            f"{first['part']!r}, appraiser {first['appraiser']!r}, trial {first['trial']!r} at "
            f"{_lines(sorted(long.loc[dup, 'row'].tolist()))}; each trial may be called once"
        )
    long["call"] = decode_labels(
        long["call"],
        what="call",
        source=source,
        reject_label=options.reject_label,
        accept_labels=options.accept_labels,
    )
    return long, notes


def _per_part(long: pd.DataFrame, role: str, source: str, options: ReadOptions) -> pd.Series | None:
    if long[role].isna().all():
        return None
    values = long[["part", role, "row"]]
    missing = values[role].map(_is_missing)
    if missing.any():
        raise DataError(
            f"{source}: empty {role.replace('_', ' ')} at "
            f"{_lines(sorted(values.loc[missing, 'row'].tolist()))}; give every part one, "
            "or leave the column out"
        )
    if role == "reference":
        try:
            coded = decode_labels(values[role], what="reference", source=source)
        except DataError:
            if options.reject_label is None:
                raise
            coded = decode_labels(
                values[role],
                what="reference",
                source=source,
                reject_label=options.reject_label,
                accept_labels=options.accept_labels,
            )
        values = values.assign(**{role: coded})
    else:
        numeric = pd.to_numeric(values[role].str.strip(), errors="coerce")
        if numeric.isna().any():
            rows = values.loc[numeric.isna(), "row"].tolist()
            bad = values.loc[numeric.isna(), role].iloc[0]
            raise DataError(f"{source}: reference value {bad!r} at {_lines(rows)} is not a number")
        values = values.assign(**{role: numeric.to_numpy()})
    per_part = values.groupby("part")[role].nunique()
    conflicting = per_part[per_part > 1]
    if len(conflicting):
        part = conflicting.index[0]
        seen = sorted(long.loc[long["part"] == part, role].astype(str).str.strip().unique())
        raise DataError(
            f"{source}: part {part!r} has {len(seen)} different {role.replace('_', ' ')}s "
            f"{seen}; a part has one"
        )
    return values.groupby("part")[role].first()


def _limits(
    long: pd.DataFrame, source: str, options: ReadOptions
) -> tuple[float | None, float | None]:
    """The study's specification limits, from options or from constant columns."""
    found = []
    for role, given in (("lower_limit", options.lower_limit),
                        ("upper_limit", options.upper_limit)):  # fmt: skip
        from_data = None
        if not long[role].isna().all():
            values = pd.to_numeric(long[role].astype(str).str.strip(), errors="coerce")
            if values.isna().any() or values.nunique() != 1:
                seen = sorted(long[role].astype(str).str.strip().unique())[:5]
                raise DataError(
                    f"{source}: the {role.replace('_', ' ')} column must hold one number for "
                    f"the whole study; found {seen}"
                )
            from_data = float(values.iloc[0])
        if given is not None and from_data is not None and given != from_data:
            raise DataError(
                f"{source}: --{role.replace('_', '-')} {given:g} differs from the "
                f"{role.replace('_', ' ')} {from_data:g} in the data; give one of them"
            )
        found.append(given if given is not None else from_data)
    if None not in found and found[0] >= found[1]:
        raise DataError(f"{source}: lower limit {found[0]:g} is not below upper limit {found[1]:g}")
    return found[0], found[1]


def study_hash(
    calls: pd.DataFrame,
    reference: pd.Series | None,
    ref_value: pd.Series | None,
    limits: tuple[float | None, float | None] = (None, None),
) -> str:
    """SHA-256 of a canonical text of the study (sorted, labels as 0/1)."""
    digest = hashlib.sha256()
    digest.update(b"bayes-rr study v1\n")
    for row in calls[["part", "appraiser", "trial", "call"]].itertuples(index=False):
        digest.update(f"{row[0]}\t{row[1]}\t{row[2]}\t{int(row[3])}\n".encode())
    for name, series in (("reference", reference), ("reference_value", ref_value)):
        if series is not None:
            digest.update(f"#{name}\n".encode())
            for part in sorted(series.index, key=natural_key):
                digest.update(f"{part}\t{series[part]!r}\n".encode())
    if limits != (None, None):
        digest.update(f"#limits\t{limits[0]!r}\t{limits[1]!r}\n".encode())
    return digest.hexdigest()


def build_study(
    long: pd.DataFrame,
    *,
    source: str,
    reference: pd.Series | None = None,
    reference_value: pd.Series | None = None,
    notes: Sequence[str] = (),
    ignored_columns: Sequence[str] = (),
    limits: tuple[float | None, float | None] = (None, None),
) -> StudyData:
    """Assemble :class:`StudyData` from validated calls (part, appraiser, trial, call 0/1)."""
    parts = tuple(sorted(long["part"].unique(), key=natural_key))
    appraisers = tuple(sorted(long["appraiser"].unique(), key=natural_key))
    part_pos = {p: i for i, p in enumerate(parts)}
    app_pos = {a: j for j, a in enumerate(appraisers)}
    calls = pd.DataFrame(
        {
            "part": long["part"].astype(str).to_numpy(),
            "appraiser": long["appraiser"].astype(str).to_numpy(),
            "trial": long["trial"].astype(str).to_numpy(),
            "call": long["call"].to_numpy(dtype=np.int8),
        }
    )
    order = np.lexsort(
        (
            calls["trial"].map(natural_key).rank(method="dense").to_numpy(),
            calls["appraiser"].map(app_pos).to_numpy(),
            calls["part"].map(part_pos).to_numpy(),
        )
    )
    calls = calls.iloc[order].reset_index(drop=True)
    cells = (
        calls.groupby(["part", "appraiser"], sort=False)["call"]
        .agg(n="size", s="sum")
        .reset_index()
    )
    cells["part_index"] = cells["part"].map(part_pos).astype(np.int64)
    cells["appraiser_index"] = cells["appraiser"].map(app_pos).astype(np.int64)
    cells["n"] = cells["n"].astype(np.int64)
    cells["s"] = cells["s"].astype(np.int64)
    cells = cells.sort_values(["part_index", "appraiser_index"]).reset_index(drop=True)
    if reference is not None:
        reference = reference.reindex(list(parts)).astype(np.int8)
        reference.index.name = "part"
    if reference_value is not None:
        reference_value = reference_value.reindex(list(parts)).astype(float)
        reference_value.index.name = "part"
    return StudyData(
        calls=calls,
        cells=cells,
        parts=parts,
        appraisers=appraisers,
        reference=reference,
        reference_value=reference_value,
        source=source,
        sha256=study_hash(calls, reference, reference_value, limits),
        notes=tuple(notes),
        ignored_columns=tuple(ignored_columns),
        limits=limits,
    )


def study_from_frame(
    frame: pd.DataFrame,
    options: ReadOptions | None = None,
    *,
    source: str = "<table>",
    lines: Sequence[int] | None = None,
    notes: Sequence[str] = (),
) -> StudyData:
    """Validate a table already in memory (same rules as :func:`read_study`).

    ``lines`` gives the file line of each row, for messages; by default the rows
    are numbered as in a file with one header line (first row = line 2).
    """
    options = options or ReadOptions()
    frame = frame.astype(object).map(lambda v: "" if _is_missing(v) else str(v))
    frame.index = pd.Index(lines if lines is not None else range(2, len(frame) + 2))
    frame = _clean_columns(frame, source)
    if frame.shape[1] < 2:
        raise DataError(
            f"{source}: not a table of calls (found {frame.shape[1]} column(s): "
            f"{list(frame.columns)}); expected a header row and columns separated by , ; or tab"
        )
    if frame.empty:
        raise DataError(f"{source}: header but no rows; expected at least one row of calls")
    if frame.shape[0] * frame.shape[1] > 4 * MAX_CALLS:
        raise DataError(
            f"{source}: {frame.shape[0]:,} rows x {frame.shape[1]} columns is more than a study "
            f"of {MAX_CALLS:,} calls; check the file"
        )
    long, used = _to_long(frame, options, source)
    long, call_notes = _validated_calls(long, options, source)
    reference = _per_part(long, "reference", source, options)
    reference_value = _per_part(long, "reference_value", source, options)
    limits = _limits(long, source, options)
    ignored = tuple(c for c in frame.columns if c not in used)
    all_notes = [*notes, *call_notes]
    if ignored:
        all_notes.append(
            f"column(s) {list(ignored)} not used: not recognised as part, appraiser, trial, "
            "call, reference status or reference value; map one with --trial-col, "
            "--reference-col, ... if it is one of those"
        )
    return build_study(
        long,
        source=source,
        reference=reference,
        reference_value=reference_value,
        notes=all_notes,
        ignored_columns=ignored,
        limits=limits,
    )


def read_study(path: str | Path, options: ReadOptions | None = None) -> StudyData:
    """Read and validate a study file (CSV or XLSX, tidy or wide layout).

    Raises
    ------
    DataError
        With a one-line message naming the file, the line or column and the
        bad value, what was expected and how to fix it.
    """
    path = Path(path)
    options = options or ReadOptions()
    table: RawTable = read_table(path, options.sheet)
    notes = []
    source = path.name
    if table.sheet is not None and len(table.sheets) > 1:
        notes.append(f"read sheet {table.sheet!r} of the workbook's sheets {list(table.sheets)}")
        source = f"{path.name} (sheet {table.sheet!r})"
    try:
        return study_from_frame(table.frame, options, source=source, lines=table.lines, notes=notes)
    except DataError as exc:
        if table.sheet is not None and len(table.sheets) > 1 and options.sheet is None:
            others = [n for n in table.sheets if n != table.sheet]
            raise DataError(
                f"{exc} (the first sheet was read; the workbook also has sheets {others}: "
                "choose one with --sheet NAME)"
            ) from None
        raise


def study_from_cells(
    parts: Sequence[str],
    appraisers: Sequence[str],
    n: np.ndarray,
    s: np.ndarray,
    *,
    reference: Sequence[int] | None = None,
    source: str = "<simulated>",
    rng: np.random.Generator | None = None,
) -> StudyData:
    """Build a study from a parts x appraisers grid of trials ``n`` and reject counts ``s``.

    Cells with ``n == 0`` are empty. With ``rng``, the trials that carry the ``s``
    rejects of a cell are drawn at random (as in a real study, where a trial number
    says nothing about the call); without it, the rejects come first (fixed tables
    in tests). Rejects first lines up the calls of two appraisers on the same trial
    numbers as well as possible, which inflates any trial-matched agreement.
    """
    n = np.asarray(n, dtype=int)
    s = np.asarray(s, dtype=int)
    if n.shape != (len(parts), len(appraisers)) or s.shape != n.shape:
        raise DataError(
            f"{source}: n and s must have shape (parts, appraisers) = "
            f"{(len(parts), len(appraisers))}, got {n.shape} and {s.shape}"
        )
    rows = []
    for i, part in enumerate(parts):
        for j, appraiser in enumerate(appraisers):
            calls = (np.arange(n[i, j]) < s[i, j]).astype(int)
            if rng is not None:
                calls = rng.permutation(calls)
            for k, call in enumerate(calls):
                rows.append((str(part), str(appraiser), str(k + 1), int(call)))
    long = pd.DataFrame(rows, columns=["part", "appraiser", "trial", "call"])
    ref = None
    if reference is not None:
        ref = pd.Series(np.asarray(reference, dtype=np.int8), index=[str(p) for p in parts])
    return build_study(long, source=source, reference=ref)


def read_values(path: str | Path) -> tuple[float, ...]:
    """A column of numbers from a CSV or XLSX file (the column named ``value``, or the
    only column): measured production values, for example."""
    path = Path(path)
    frame = read_table(path).frame
    column = next((c for c in frame.columns if _norm_name(c) == "value"), None)
    if column is None:
        if frame.shape[1] != 1:
            raise DataError(
                f"{path}: {frame.shape[1]} columns {list(frame.columns)}; expected one column "
                "of numbers, or a column named 'value'"
            )
        column = frame.columns[0]
    text = frame[column].astype(str).str.strip()
    numbers = pd.to_numeric(text[text != ""], errors="coerce")
    if numbers.isna().any() or numbers.empty:
        bad = text[text != ""][numbers.isna()].head(3).tolist()
        raise DataError(f"{path}: column {column!r} holds non-numbers {bad}; expected numbers")
    return tuple(float(v) for v in numbers)
