"""Labels of a study table: column names and roles, part, appraiser and trial labels,
and the calls' pass/fail vocabularies."""

from __future__ import annotations

import re
from collections.abc import Sequence

import numpy as np
import pandas as pd

from bayes_rr.core.errors import DataError
from bayes_rr.study.types import COLUMN_SYNONYMS, LABEL_VOCABULARIES, ReadOptions


def natural_key(label: str) -> tuple:
    """Sort key that puts ``P2`` before ``P10``."""
    return tuple(
        (0, int(tok), "") if tok.isdigit() else (1, 0, tok.lower())
        for tok in re.split(r"(\d+)", label)
        if tok
    )


def norm_name(name: str) -> str:
    return re.sub(r"[^a-z0-9]", "", str(name).lower())


def normalise_label(value: object) -> str:
    """Label as compared against vocabularies: case, spaces, ``-`` and ``_`` ignored."""
    text = re.sub(r"[\s_\-]+", "", str(value).strip().lower())
    if re.fullmatch(r"[01](\.0*)?", text):
        return text[0]
    return text


def norm_id(value: object) -> str:
    text = str(value).strip()
    # Excel and pandas turn the trial/part number 1 into 1.0: undo that.
    if re.fullmatch(r"-?\d+\.0+", text):
        text = text.split(".")[0]
    return text


def norm_trial(value: object) -> str:
    """Trial label: a number is a number (``02``, ``2`` and ``2.0`` are one trial)."""
    text = norm_id(value)
    if re.fullmatch(r"\+?\d+", text):
        return str(int(text))
    return text


def is_missing(value: object) -> bool:
    """Only a truly empty cell is missing: ``NA``, ``None`` or ``nan`` may be a name."""
    if value is None:
        return True
    if isinstance(value, float) and np.isnan(value):
        return True
    return not str(value).strip()


def lines(rows: Sequence[int], limit: int = 8) -> str:
    """File line numbers, shortened to the first few."""
    shown = ", ".join(str(r) for r in list(rows)[:limit])
    more = f" and {len(rows) - limit} more" if len(rows) > limit else ""
    return f"line{'s' if len(rows) > 1 else ''} {shown}{more}"


# ---------------------------------------------------------------------------
# reading the table


def clean_columns(frame: pd.DataFrame, source: str) -> pd.DataFrame:
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
    holding = [k + 1 for k in unnamed if frame.iloc[:, k].map(lambda v: not is_missing(v)).any()]
    if holding:
        raise DataError(
            f"{source}: column(s) number {holding} have no name in the header but hold values; "
            "name them (or delete them)"
        )
    frame = frame.iloc[:, [k for k in range(len(names)) if names[k]]]
    # Rows that are blank everywhere are spreadsheet padding, not missing calls.
    blank = frame.apply(lambda col: col.map(is_missing)).all(axis=1)
    return frame.loc[~blank]


def find_column(frame: pd.DataFrame, role: str, options: ReadOptions, source: str) -> str | None:
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
        by_norm.setdefault(norm_name(col), []).append(col)
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
