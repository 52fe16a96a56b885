"""The wide layout (one row per part, a column per appraiser and trial) turned into
the tidy one (a row per call)."""

from __future__ import annotations

import numpy as np
import pandas as pd

from bayes_rr.core.errors import DataError
from bayes_rr.study.labels import find_column, norm_id
from bayes_rr.study.types import PER_PART_ROLES, ROLES, WIDE_COLUMN, ReadOptions


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
        return {c: (str(a), norm_id(t)) for c, (a, t) in options.wide_columns.items()}
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


def to_long(
    frame: pd.DataFrame, options: ReadOptions, source: str
) -> tuple[pd.DataFrame, list[str]]:
    """Long table with columns part, appraiser, trial, call (raw), reference, reference_value
    and ``row`` (the file line of the call; ``frame``'s index), in file order; and the
    columns of ``frame`` it used."""
    found = {role: find_column(frame, role, options, source) for role in ROLES}
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
