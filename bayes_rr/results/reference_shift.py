"""How the rates move when the reference is taken as fallible instead of exact.

A fit whose spec states the reference's error rates (``[reference_accuracy]``) is
compared with the same model fitted with the reference taken as the truth: per
appraiser and for the system, each wrong-call rate under both, and the parts whose
reference the calls most doubt. Never imports PyMC.
"""

from __future__ import annotations

from collections.abc import Iterable

RATE_KEYS = ("false_reject_rate", "false_accept_rate")
DOUBT = 0.5
"""A part is listed when its reference is more likely wrong than right."""
LISTED_PARTS = 20


def _index(rows: Iterable[dict]) -> dict:
    return {(r["key"], r["scope"], r["level"], r["appraiser"]): r for r in rows}


def _figure(row: dict | None) -> dict | None:
    if row is None or row.get("mean") is None:
        return None
    return {k: row[k] for k in ("mean", "lower", "upper")}


def reference_comparison(
    fallible_rows: Iterable[dict], exact_rows: Iterable[dict], exact_ok: bool,
    appraisers: Iterable[str],
) -> dict:  # fmt: skip
    """The block ``reference_comparison`` of summary.json.

    ``fallible_rows``/``exact_rows``: summary rows (dicts) of the two fits; ``exact_ok``:
    whether the exact-reference fit passed the convergence gate (if not, its numbers are
    left out and the block says so).
    """
    fallible_rows = list(fallible_rows)
    mine, theirs = _index(fallible_rows), _index(exact_rows)
    lines = [(name, "study", "appraiser") for name in appraisers]
    lines += [(None, "study", "system"), (None, "population", "system")]
    rows = []
    for key in RATE_KEYS:
        for name, scope, level in lines:
            fallible = _figure(mine.get((key, scope, level, name)))
            exact = _figure(theirs.get((key, scope, level, name))) if exact_ok else None
            if fallible is None:
                continue
            shift = None if exact is None else fallible["mean"] - exact["mean"]
            rows.append({"key": key, "scope": scope, "level": level, "appraiser": name,
                         "fallible": fallible, "exact": exact, "shift": shift})  # fmt: skip
    doubtful = sorted(
        ({"part": r["part"], "probability": r["mean"]} for r in fallible_rows
         if r["key"] == "reference_wrong_probability" and (r["mean"] or 0) > DOUBT),
        key=lambda item: -item["probability"],
    )  # fmt: skip
    return {
        "rows": rows,
        "exact_ok": exact_ok,
        "doubtful_parts": doubtful[:LISTED_PARTS],
        "doubtful_count": len(doubtful),
        "sentences": _sentences(rows, exact_ok, doubtful),
    }


def _sentences(rows: list[dict], exact_ok: bool, doubtful: list[dict]) -> list[str]:
    out = []
    if not exact_ok:
        out.append("The fit with the reference taken as exact did not pass the convergence "
                   "gate; its rates are not shown.")  # fmt: skip
    for row in rows:
        if row["level"] != "system" or row["scope"] != "study" or row["shift"] is None:
            continue
        name = row["key"].replace("_", " ")
        exact, fallible = row["exact"]["mean"], row["fallible"]["mean"]
        direction = "lower" if fallible < exact else "higher"
        out.append(
            f"Against a fallible reference the system's {name} is {fallible:.1%}, "
            f"{direction} than the {exact:.1%} found when the reference is taken as exact."
        )
    if doubtful:
        names = ", ".join(d["part"] for d in doubtful[:5])
        more = f" and {len(doubtful) - 5} more" if len(doubtful) > 5 else ""
        out.append(
            f"The calls doubt the reference of {len(doubtful)} part(s) ({names}{more}): "
            "each is more likely than not of the other status; check them before the "
            "reference is used again."
        )
    else:
        out.append("The calls doubt no part's reference (none is more likely than not "
                   "wrong).")  # fmt: skip
    return out
