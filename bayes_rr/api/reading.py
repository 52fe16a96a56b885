"""A study in, its design and classical statistics out."""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path

import pandas as pd

from bayes_rr.core import DEFAULT_PROB
from bayes_rr.core.errors import DataError
from bayes_rr.study.data import ReadOptions, StudyData, study_from_frame
from bayes_rr.study.data import read_study as read_study_file

ROLE_ARGUMENTS = ("part", "appraiser", "trial", "call", "reference", "reference_value")


def read_study(
    source: str | Path | pd.DataFrame,
    *,
    part: str | None = None,
    appraiser: str | None = None,
    trial: str | None = None,
    call: str | None = None,
    reference: str | None = None,
    reference_value: str | None = None,
    reject_label: str | None = None,
    accept_labels: Sequence[str] = (),
    layout: str = "auto",
    sheet: str | None = None,
    drop_missing: bool = False,
    lower_limit: float | None = None,
    upper_limit: float | None = None,
) -> StudyData:
    """Read and validate a study from a file (CSV or XLSX) or a pandas DataFrame.

    Parameters
    ----------
    source
        A path, or a DataFrame in the tidy layout (a row per call) or the wide one (a
        row per part, a column per appraiser and trial, e.g. ``A_1``).
    part, appraiser, trial, call, reference, reference_value
        Column names, for columns not named in one of the usual ways.
    reject_label, accept_labels
        The labels of the calls when they are not a recognised pass/fail vocabulary.
    layout
        ``"tidy"``, ``"wide"`` or ``"auto"``.
    sheet
        Sheet of a workbook (default: the first).
    drop_missing
        Drop empty calls instead of refusing the table.
    lower_limit, upper_limit
        Specification limits of the reference value (call-curve model).

    Returns
    -------
    StudyData
        The validated study: calls, cells, coordinates and a hash of the data.
    """
    given = dict(zip(ROLE_ARGUMENTS, (part, appraiser, trial, call, reference, reference_value),
                     strict=True))  # fmt: skip
    if isinstance(accept_labels, str):
        accept_labels = (accept_labels,)
    options = ReadOptions(
        layout=layout,  # type: ignore[arg-type]
        columns={role: name for role, name in given.items() if name is not None},
        reject_label=reject_label,
        accept_labels=tuple(accept_labels),
        drop_missing=drop_missing,
        sheet=sheet,
        lower_limit=lower_limit,
        upper_limit=upper_limit,
    )
    if isinstance(source, pd.DataFrame):
        return study_from_frame(source, options, source="<DataFrame>")
    if isinstance(source, (str, Path)):
        return read_study_file(source, options)
    raise DataError(
        f"read_study({type(source).__name__}): expected a file path or a pandas DataFrame"
    )


@dataclass(frozen=True)
class Description:
    """A study's design and its classical statistics (what ``bayes-rr describe`` shows)."""

    study: StudyData
    document: dict
    """The same content as ``bayes-rr describe --json``."""

    @property
    def design(self) -> dict:
        return self.document["design"]

    def by_appraiser(self) -> pd.DataFrame:
        """Classical statistics, one row per appraiser and statistic (``appraiser`` None:
        the appraisers together): the estimate and its interval (Wilson score for
        shares, the percentile bootstrap for kappa)."""
        from bayes_rr.study.classical import by_appraiser

        rows = []
        for group in by_appraiser(self.document):
            for statistic, row in group.items():
                if statistic == "appraiser" or row is None:
                    continue
                rows.append({"appraiser": group["appraiser"], "statistic": statistic,
                             **_estimate(row)})  # fmt: skip
        return pd.DataFrame(rows, columns=["appraiser", "statistic", "estimate", "lower", "upper"])

    def moments(self) -> pd.DataFrame:
        """Study-level moment estimates (plug-in and corrected), one row per estimate and
        key."""
        rows = [
            {"estimate": kind, "key": key, "value": value}
            for kind, block in self.document["classical"].items()
            if isinstance(block, dict)
            for key, value in (block.get("study") or {}).items()
        ]
        return pd.DataFrame(rows, columns=["estimate", "key", "value"])

    def _repr_html_(self) -> str:
        from bayes_rr.report.blocks import esc, html_table

        rows = [[esc(k), esc(v)] for k, v in self.design.items() if not isinstance(v, (list, dict))]
        return "<b>Study</b>" + html_table(["item", "value"], rows)


def describe(
    study: StudyData | str | Path | pd.DataFrame, prob: float = DEFAULT_PROB
) -> Description:
    """The design and classical statistics of a study (a study, a path or a DataFrame)."""
    from bayes_rr.study.describe import describe_study

    if not isinstance(study, StudyData):
        study = read_study(study)
    return Description(study, describe_study(study, prob))


def _estimate(row: dict) -> dict:
    """Estimate and interval of a classical row: kappa's bootstrap interval, or a share's
    Wilson score interval."""
    if "kappa" in row:
        return {"estimate": row["kappa"], "lower": row["lower"], "upper": row["upper"]}
    wilson = [i for i in row.get("intervals", ()) if i["method"] == "Wilson score"]
    interval = wilson[0] if wilson else (row.get("intervals") or [{}])[0]
    value = row.get("share", row.get("rate"))
    return {"estimate": value, "lower": interval.get("lower"), "upper": interval.get("upper")}
