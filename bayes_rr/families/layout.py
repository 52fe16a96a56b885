"""The labelled layout of a family's model: coordinates and the call-curve design.

Kept apart from the builders so that the steps after sampling (estimands, checks,
prior draws) can read it without importing PyMC.
"""

from __future__ import annotations

import numpy as np

from bayes_rr.core.errors import DataError
from bayes_rr.study.data import StudyData

STATUSES = ("accept", "reject")
"""The two statuses of a part (reference or latent), in this order everywhere."""
APPRAISER_CORRELATION_ETA = 2.0
"""LKJ shape of the correlation of an appraiser's effects on accept and reject parts."""


def coords(study: StudyData) -> dict[str, list[str]]:
    cells = study.cells
    return {
        "part": list(study.parts),
        "appraiser": list(study.appraisers),
        "cell": [f"{p} | {a}" for p, a in zip(cells["part"], cells["appraiser"], strict=True)],
        "status": list(STATUSES),
    }


def call_grids(study: StudyData) -> tuple[np.ndarray, np.ndarray]:
    """(part, appraiser) grids of trials and reject calls (0 where a cell is empty)."""
    cells = study.cells
    n = np.zeros((len(study.parts), len(study.appraisers)), dtype=np.int64)
    s = np.zeros_like(n)
    n[cells["part_index"], cells["appraiser_index"]] = cells["n"]
    s[cells["part_index"], cells["appraiser_index"]] = cells["s"]
    return n, s


def curve_design(study: StudyData, spec_name: str = "call-curve") -> dict:
    """The limits (name, value, direction), the reference values and their scale."""
    if study.reference_value is None:
        raise DataError(
            f"{study.source}: the model {spec_name!r} needs a measured reference value per "
            "part (a 'reference_value' column, or --reference-value-col)"
        )
    lower, upper = study.limits
    sides = [(name, value, sign) for name, value, sign in
             (("lower", lower, -1.0), ("upper", upper, 1.0)) if value is not None]  # fmt: skip
    if not sides:
        raise DataError(
            f"{study.source}: the model {spec_name!r} needs a specification limit: give "
            "--upper-limit and/or --lower-limit (or limit columns in the data)"
        )
    x = study.reference_value.to_numpy(dtype=float)
    scale = float(x.std())
    if not scale > 0:
        raise DataError(f"{study.source}: every part has the same reference value {x[0]:g}")
    return {"sides": sides, "x": x, "scale": scale}


def reference_statuses(parts: int, reject_share: float) -> np.ndarray:
    """Statuses with round(share x parts) rejects (at least one of each status); parts are
    exchangeable, so which parts they are does not matter."""
    rejects = min(max(1, round(reject_share * parts)), parts - 1)
    status = np.zeros(parts, dtype=int)
    status[:rejects] = 1
    return status
