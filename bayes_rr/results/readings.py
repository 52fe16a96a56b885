"""Results in words and the rows a design limits: the plain-language readings of a
fit, the wrong-call readings, and the notes on rows the design cannot inform."""

from __future__ import annotations

from dataclasses import replace

from bayes_rr.families import family_of
from bayes_rr.priors.spec import ModelSpec
from bayes_rr.results.estimands import SummaryRow
from bayes_rr.results.limitations import limitation_for, note_for

HYPER_PARAMETERS = (  # the posterior variables kept in full precision
    "intercept",
    "sigma_part",
    "sigma_appraiser",
    "sigma_interaction",
    "reference_effect",
    "rho",
    "appraiser_correlation",
    "prevalence",
    "bias_mean",
    "sigma_limit",
    "log_width_mean",
    "sigma_width",
    "threshold_mean",
    "sigma_threshold",
    "latent_limit",
    "reference_false_reject",
    "reference_false_accept",
)

WRONG_CALL_KEYS = frozenset({"false_reject_rate", "false_accept_rate"})


def wrong_call_summary(estimands, rows, spec: ModelSpec, prob: float, ok: bool) -> dict | None:
    """Readings of the false reject and false accept rates (None without such rates)."""
    from dataclasses import asdict

    from bayes_rr.core.jsonio import jsonable
    from bayes_rr.results.wrong_calls import rate_readings, standouts

    if "study__system__false_reject_rate" not in estimands:
        return None
    found = standouts(estimands) if ok else []
    # the readings quote the rates' rows only (converting every row costs 0.1 s)
    rows = [jsonable(asdict(r)) for r in rows if r.key in WRONG_CALL_KEYS]
    family = family_of(spec)
    check = family.weak_identification
    return {
        "readings": rate_readings(rows, found, prob) if ok else [],
        "standouts": found,
        "weak_identification": check(estimands, prob) if check is not None else None,
        "identification": family.identification_note,
    }


def mark_limited(rows: list[SummaryRow], limitations) -> list[SummaryRow]:
    """Put a note on every row whose result the design or the model cannot inform."""
    out = []
    for row in rows:
        limitation = limitation_for(list(limitations), row.key, row.scope)
        if limitation is not None:
            note = note_for(limitation) + (f"; {row.note}" if row.note else "")
            row = replace(row, note=note)
        out.append(row)
    return out


def plain_readings(rows: list[dict], prob: float, limitations=()) -> list[str]:
    """Sentences for people who do not think in variances of 0/1 calls.

    A sentence that rests on a result the design cannot inform (``limitations``) is
    withheld; the limitation's own sentence says why.
    """
    by_key = {(r["key"], r["scope"]): r for r in rows if r["level"] == "study"}

    def fmt(key: str, scope: str, percent: bool = False) -> str | None:
        row = by_key.get((key, scope))
        if row is None or row["mean"] is None:
            return None
        if limitation_for(list(limitations), key, scope) is not None:
            return None
        if percent:
            return f"{row['mean']:.0%} ({row['lower']:.0%} to {row['upper']:.0%})"
        return f"{row['mean']:.3f} ({row['lower']:.3f} to {row['upper']:.3f})"

    level = f"{prob:.0%} interval in brackets"
    out = []
    repeat = fmt("repeat_disagreement", "study")
    if repeat:
        out.append(
            "Two repeat calls by the same appraiser on the same part disagree with "
            f"probability {repeat}, averaged over the study's parts ({level})."
        )
    cross = fmt("cross_disagreement", "population")
    if cross:
        out.append(
            "Two calls on the same part by two different appraisers, drawn from the same "
            f"population of appraisers, disagree with probability {cross}."
        )
    share = fmt("reproducibility_share", "study", percent=True)
    if share:
        out.append(
            f"Of the inconsistency of the calls, {share} is due to appraisers differing "
            "from each other (reproducibility); the rest is each appraiser's own "
            "inconsistency (repeatability)."
        )
    return out
