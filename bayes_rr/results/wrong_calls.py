"""Wrong calls in words: each appraiser's false reject and false accept rates as
sentences, and the appraisers who stand out. (The rates themselves come from the
status families, ``bayes_rr.families.status``.)
"""

from __future__ import annotations

import xarray as xr

RATE_KEYS = ("false_reject_rate", "false_accept_rate", "reference_agreement")
RATE_WORDS = {
    "false_reject_rate": "of good parts, {who} rejects {value}",
    "false_accept_rate": "of bad parts, {who} accepts {value}",
    "reference_agreement": "{who} calls {value} of parts as the reference does",
}
STANDOUT_PROBABILITY = 0.95
"""An appraiser stands out when the posterior probability that their rate is above every
other appraiser's reaches this level."""


def standouts(estimands: xr.Dataset, probability: float = STANDOUT_PROBABILITY) -> list[dict]:
    """Appraisers whose study-scope rate is above every other appraiser's with posterior
    probability at least ``probability`` (a lower rate is no concern)."""
    from bayes_rr.results.decisions import beyond_all_others

    out = []
    for key in ("false_reject_rate", "false_accept_rate"):
        name = f"study__appraiser__{key}"
        if name not in estimands or estimands.sizes.get("appraiser", 0) < 2:
            continue
        values = estimands[name].transpose("chain", "draw", "appraiser").to_numpy()
        values = values.reshape(-1, values.shape[-1])
        above, _ = beyond_all_others(values)
        for j, appraiser in enumerate(estimands["appraiser"].to_numpy()):
            if above[j] >= probability:
                out.append({"appraiser": str(appraiser), "key": key, "direction": "higher",
                            "probability": float(above[j])})  # fmt: skip
    return out


def _percent(value: float) -> str:
    digits = 1 if value < 0.1 else 0
    return f"{100 * value:.{digits}f}%"


def _with_interval(row: dict) -> str:
    return f"{_percent(row['mean'])} ({_percent(row['lower'])} to {_percent(row['upper'])})"


def rate_readings(rows: list[dict], found: list[dict], prob: float) -> list[str]:
    """Plain sentences: each appraiser's and the system's rates with their intervals, and
    the appraisers who stand out."""
    out = []
    by = {(r["key"], r["scope"], r["level"], r["appraiser"]): r for r in rows}
    for key, status, verb in (("false_reject_rate", "good", "rejects"),
                              ("false_accept_rate", "bad", "accepts")):  # fmt: skip
        each = [
            (row["appraiser"], _with_interval(row))
            for (k, scope, level, _), row in by.items()
            if (k, scope, level) == (key, "study", "appraiser") and row["mean"] is not None
        ]
        system = by.get((key, "study", "system", None))
        if each:
            items = [f"{each[0][0]} {verb} {each[0][1]}"]
            items += [f"{who} {value}" for who, value in each[1:]]
            listed = items[0] if len(items) == 1 else (
                ", ".join(items[:-1]) + " and " + items[-1])  # fmt: skip
            tail = ""
            if system is not None and system["mean"] is not None:
                tail = f"; the study's appraisers together {_with_interval(system)}"
            out.append(f"Of good parts, {listed}{tail} ({prob:.0%} intervals)."
                       if status == "good" else
                       f"Of bad parts, {listed}{tail} ({prob:.0%} intervals).")  # fmt: skip
        pop = by.get((key, "population", "system", None))
        if pop is not None and pop["mean"] is not None:
            out.append(
                f"A new appraiser from the same population {verb} {_with_interval(pop)} "
                f"of new {status} parts."
            )
    for item in found:
        what = "good parts rejected" if item["key"] == "false_reject_rate" else (
            "bad parts accepted")  # fmt: skip
        out.append(
            f"{item['appraiser']} stands out: a {item['direction']} share of {what} than every "
            f"other appraiser (posterior probability {item['probability']:.2f})."
        )
    return out
