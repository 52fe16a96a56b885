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
import math
import re
from collections.abc import Sequence
from pathlib import Path

import numpy as np
import pandas as pd

from bayes_rr.core.errors import DataError
from bayes_rr.study.labels import (
    clean_columns,
    decode_labels,
    is_missing,
    lines,
    natural_key,
    norm_id,
    norm_name,
    norm_trial,
)
from bayes_rr.study.layouts import to_long
from bayes_rr.study.tables import RawTable, read_table

# ---------------------------------------------------------------------------
# helpers
from bayes_rr.study.types import MAX_CALLS, ReadOptions, StudyData

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
        bad = long.index[long[role].map(is_missing)]
        if len(bad):
            raise DataError(
                f"{source}: empty {role} name at {lines(long.loc[bad, 'row'].tolist())}; "
                f"every call needs a {role}"
            )
    missing = long["call"].map(is_missing).to_numpy()
    if missing.any():
        rows = sorted(set(long.loc[missing, "row"].tolist()))
        if not options.drop_missing:
            raise DataError(
                f"{source}: {int(missing.sum())} empty call(s) at {lines(rows)}; fill them in, "
                "or drop them with --drop-missing"
            )
        notes.append(f"dropped {int(missing.sum())} empty call(s) ({lines(rows)})")
        long = long.loc[~missing].reset_index(drop=True)
    if long.empty:
        raise DataError(f"{source}: no calls in the file; expected at least one row of calls")
    long = long.assign(
        part=long["part"].map(norm_id),
        appraiser=long["appraiser"].map(norm_id),
    )
    if long["trial"].isna().all():
        long["trial"] = (long.groupby(["part", "appraiser"]).cumcount() + 1).astype(str)
        notes.append("no trial column: trials numbered in file order within each cell")
    else:
        bad = long.index[long["trial"].map(is_missing)]
        if len(bad):
            raise DataError(
                f"{source}: empty trial at {lines(long.loc[bad, 'row'].tolist())}; "
                "number every trial, or remove the trial column to number them in file order"
            )
        long["trial"] = long["trial"].map(norm_trial)
    dup = long.duplicated(["part", "appraiser", "trial"], keep=False)
    if dup.any():
        first = long.loc[dup].iloc[0]
        raise DataError(
            f"{source}: {int(dup.sum())} calls share a (part, appraiser, trial), e.g. part "
            f"{first['part']!r}, appraiser {first['appraiser']!r}, trial {first['trial']!r} at "
            f"{lines(sorted(long.loc[dup, 'row'].tolist()))}; each trial may be called once"
        )
    long["call"] = decode_labels(
        long["call"],
        what="call",
        source=source,
        reject_label=options.reject_label,
        accept_labels=options.accept_labels,
    )
    return long, notes


NUMBER_ROLES = ("reference_value", "lower_limit", "upper_limit")
_DECIMAL_COMMA = re.compile(r"^[+-]?\d+(,\d+)?$")
_THOUSANDS = re.compile(r"^[+-]?\d{1,3}(,\d{3})+$")


def _decimal_commas(long: pd.DataFrame, source: str) -> tuple[pd.DataFrame, list[str]]:
    """Numbers written with a decimal comma (as spreadsheets in much of Europe save them)
    are read when every number of the column uses one; a column where every comma could
    also separate thousands ("1,250") is refused with the fix, never guessed."""
    notes = []
    for role in NUMBER_ROLES:
        if role not in long or long[role].isna().all():
            continue
        text = long[role].astype(str).str.strip()
        given = text[~long[role].map(is_missing)]
        if not given.str.contains(",", regex=False).any():
            continue
        if not given.map(lambda v: bool(_DECIMAL_COMMA.match(v))).all():
            continue  # mixed or other text: the number check names the bad value
        with_comma = given[given.str.contains(",", regex=False)]
        if with_comma.map(lambda v: bool(_THOUSANDS.match(v))).all():
            raise DataError(
                f"{source}: the {role.replace('_', ' ')} column holds {with_comma.iloc[0]!r}, "
                "where the comma may mark decimals or thousands; save the file with decimal "
                "points (or without thousands separators) and read it again"
            )
        points = text.str.replace(",", ".", regex=False)
        long = long.assign(**{role: long[role].where(long[role].map(is_missing), points)})
        notes.append(f"read decimal commas in the {role.replace('_', ' ')} column (10,05 as 10.05)")
    return long, notes


def _partial_reference(status: pd.Series, source: str) -> pd.Series:
    known = status.dropna()
    if known.nunique() < 2:
        which = "reject" if len(known) and int(known.iloc[0]) == 1 else "accept"
        raise DataError(
            f"{source}: the reference column is filled in for {len(known)} of {len(status)} "
            f"parts, all of them {which}; parts of both statuses must have one (or leave the "
            "column out and fit latent-class)"
        )
    return status


def partial_note(status: pd.Series) -> str:
    """What a partial reference means for the fit, said where the data are read."""
    known = int(status.notna().sum())
    return (
        f"reference status given for {known} of {len(status)} parts; the others' status "
        "is unknown and inferred from the calls (latent-class, latent-trait). Sound when "
        "the parts given a reference were chosen at random, or by their calls alone (e.g. "
        "every part someone rejected plus a random share of the rest); not when chosen by anything "
        "else the data do not hold"
    )


def _per_part(long: pd.DataFrame, role: str, source: str, options: ReadOptions) -> pd.Series | None:
    if long[role].isna().all():
        return None
    values = long[["part", role, "row"]]
    missing = values[role].map(is_missing)
    if missing.any() and role == "reference":
        # a partial reference: empty means unknown (latent-class uses the known ones)
        known = _per_part(long[~missing.to_numpy()], role, source, options)
        parts = list(dict.fromkeys(long["part"]))
        return known.reindex(parts).astype(float) if known is not None else None
    if missing.any():
        raise DataError(
            f"{source}: empty {role.replace('_', ' ')} at "
            f"{lines(sorted(values.loc[missing, 'row'].tolist()))}; give every part one, "
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
    elif role == "stratum":
        values = values.assign(**{role: values[role].astype(str).str.strip()})
    else:
        numeric = pd.to_numeric(values[role].str.strip(), errors="coerce")
        if numeric.isna().any():
            rows = values.loc[numeric.isna(), "row"].tolist()
            bad = values.loc[numeric.isna(), role].iloc[0]
            hint = (
                "; decimal commas are read when every value of the column uses them (or save "
                "the file with decimal points)"
                if "," in str(bad)
                else ""
            )
            raise DataError(
                f"{source}: reference value {bad!r} at {lines(rows)} is not a number{hint}"
            )
        infinite = ~np.isfinite(numeric.to_numpy(dtype=float))
        if infinite.any():
            rows = values.loc[infinite, "row"].tolist()
            bad = values.loc[infinite, role].iloc[0]
            raise DataError(
                f"{source}: reference value {bad!r} at {lines(rows)} is not a finite number; "
                "give the measured value"
            )
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
            if not math.isfinite(from_data):
                raise DataError(
                    f"{source}: the {role.replace('_', ' ')} column holds "
                    f"{long[role].astype(str).str.strip().iloc[0]!r}; expected a finite number"
                )
        if given is not None and not math.isfinite(given):
            raise DataError(
                f"--{role.replace('_', '-')} {given!r}: expected a finite number (the "
                "specification limit, in the units of the measured values)"
            )
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
    stratum: pd.Series | None = None,
) -> str:
    """SHA-256 of a canonical text of the study (sorted, labels as 0/1)."""
    digest = hashlib.sha256()
    digest.update(b"bayes-rr study v1\n")
    for row in calls[["part", "appraiser", "trial", "call"]].itertuples(index=False):
        digest.update(f"{row[0]}\t{row[1]}\t{row[2]}\t{int(row[3])}\n".encode())
    named = [("reference", reference), ("reference_value", ref_value)]
    if stratum is not None:  # (studies without strata keep their earlier hash)
        named.append(("stratum", stratum))
    for name, series in named:
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
    partial_status: pd.Series | None = None,
    reference_value: pd.Series | None = None,
    notes: Sequence[str] = (),
    ignored_columns: Sequence[str] = (),
    limits: tuple[float | None, float | None] = (None, None),
    stratum: pd.Series | None = None,
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
    if partial_status is not None:
        partial_status = partial_status.reindex(list(parts)).astype(float)
        partial_status.index.name = "part"
    if reference_value is not None:
        reference_value = reference_value.reindex(list(parts)).astype(float)
        reference_value.index.name = "part"
    if stratum is not None:
        stratum = stratum.reindex(list(parts)).astype(str)
        stratum.index.name = "part"
    return StudyData(
        calls=calls,
        cells=cells,
        parts=parts,
        appraisers=appraisers,
        reference=reference,
        partial_status=partial_status,
        reference_value=reference_value,
        source=source,
        sha256=study_hash(
            calls,
            reference if partial_status is None else partial_status,
            reference_value,
            limits,
            stratum,
        ),
        notes=tuple(notes),
        ignored_columns=tuple(ignored_columns),
        limits=limits,
        stratum=stratum,
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
    frame = frame.astype(object).map(lambda v: "" if is_missing(v) else str(v))
    frame.index = pd.Index(lines if lines is not None else range(2, len(frame) + 2))
    frame = clean_columns(frame, source)
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
    long, used = to_long(frame, options, source)
    long, call_notes = _validated_calls(long, options, source)
    long, comma_notes = _decimal_commas(long, source)
    call_notes = [*call_notes, *comma_notes]
    reference = _per_part(long, "reference", source, options)
    partial = None
    if reference is not None and reference.isna().any():
        partial, reference = _partial_reference(reference, source), None
        call_notes.append(partial_note(partial))
    reference_value = _per_part(long, "reference_value", source, options)
    stratum = _per_part(long, "stratum", source, options)
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
        partial_status=partial,
        reference_value=reference_value,
        notes=all_notes,
        ignored_columns=ignored,
        limits=limits,
        stratum=stratum,
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
    reference_value: Sequence[float] | None = None,
    limits: tuple[float | None, float | None] = (None, None),
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
    values = None
    if reference_value is not None:
        values = pd.Series(np.asarray(reference_value, dtype=float),
                           index=[str(p) for p in parts], name="reference_value")  # fmt: skip
        values.index.name = "part"
    return build_study(long, source=source, reference=ref, reference_value=values,
                       limits=limits)  # fmt: skip


def _is_number(text: str) -> bool:
    try:
        float(text)
    except ValueError:
        return False
    return True


def read_values(path: str | Path) -> tuple[float, ...]:
    """A column of numbers from a CSV or XLSX file (the column named ``value``, or the
    only column): measured production values, for example."""
    path = Path(path)
    frame = read_table(path).frame
    column = next((c for c in frame.columns if norm_name(c) == "value"), None)
    if column is None:
        if frame.shape[1] != 1:
            raise DataError(
                f"{path}: {frame.shape[1]} columns {list(frame.columns)}; expected one column "
                "of numbers, or a column named 'value'"
            )
        column = frame.columns[0]
    text = frame[column].astype(str).str.strip()
    if frame.shape[1] == 1 and _is_number(str(column)):
        # a bare column of numbers: its first line is a value, not a header
        text = pd.concat([pd.Series([str(column).strip()]), text], ignore_index=True)
    numbers = pd.to_numeric(text[text != ""], errors="coerce")
    if numbers.isna().any() or numbers.empty:
        bad = text[text != ""][numbers.isna()].head(3).tolist()
        raise DataError(f"{path}: column {column!r} holds non-numbers {bad}; expected numbers")
    infinite = ~np.isfinite(numbers.to_numpy(dtype=float))
    if infinite.any():
        bad = text[text != ""][infinite].head(3).tolist()
        raise DataError(
            f"{path}: column {column!r} holds {bad}, not finite numbers; expected measured values"
        )
    return tuple(float(v) for v in numbers)
