"""Classical statistics shown beside the posterior.

Moment (plug-in) estimates of the per-part decomposition, agreement
percentages, Fleiss' and Cohen's kappa with their standard errors, and
intervals for the difference of two appraisers' call rates. Keys follow
`docs/statistics.md`; every interval states its level and method.
"""

from __future__ import annotations

import itertools
import math
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from bayes_rr.core import DEFAULT_PROB
from bayes_rr.core.intervals import (
    Interval,
    agresti_caffo,
    clopper_pearson,
    newcombe_hybrid,
    wilson,
)
from bayes_rr.study.data import StudyData
from bayes_rr.study.kappa import KappaRow, kappas, pairwise_limit_note

PER_PART_KEYS = ("call_rate", "rr_variance", "repeatability_variance", "reproducibility_variance")


def _finite_or_none(value: float) -> float | None:
    return None if value is None or not np.isfinite(value) else float(value)


# ---------------------------------------------------------------------------
# moment estimates


@dataclass(frozen=True)
class MomentEstimates:
    """Per-part and study-level moment estimates of one kind (plug-in or corrected)."""

    kind: str
    description: str
    per_part: pd.DataFrame
    study: dict
    flags: tuple[str, ...] = ()

    def as_dict(self) -> dict:
        rows = [
            {k: (v if isinstance(v, str) else _finite_or_none(v)) for k, v in row.items()}
            for row in self.per_part.to_dict(orient="records")
        ]
        return {
            "description": self.description,
            "study": self.study,
            "per_part": rows,
            "flags": list(self.flags),
        }


def _study_summary(per_part: pd.DataFrame, single_appraiser: bool) -> tuple[dict, list[str]]:
    """Averages over parts; the share is a ratio of averages (docs/statistics.md).

    With a single appraiser reproducibility is not estimable (zero by construction):
    it is left out (None), never shown as a number.
    """
    flags: list[str] = []
    usable = per_part.dropna(subset=["repeatability_variance"])
    mean_t = float(usable["rr_variance"].mean()) if len(usable) else math.nan
    mean_r = float(usable["repeatability_variance"].mean()) if len(usable) else math.nan
    mean_v = float(usable["reproducibility_variance"].mean()) if len(usable) else math.nan
    study: dict = {
        "parts_used": len(usable),
        "rr_variance": _finite_or_none(mean_t),
        "repeatability_variance": _finite_or_none(mean_r),
        "reproducibility_variance": _finite_or_none(mean_v),
    }
    for key, value in (("rr", mean_t), ("repeatability", mean_r), ("reproducibility", mean_v)):
        if np.isfinite(value) and value < 0:
            flags.append(f"study {key}_variance is negative ({value:.4g}); its sd is not defined")
        study[f"{key}_sd"] = math.sqrt(value) if np.isfinite(value) and value >= 0 else None
    study["reproducibility_share"] = mean_v / mean_t if np.isfinite(mean_t) and mean_t > 0 else None
    study["repeatability_share"] = mean_r / mean_t if np.isfinite(mean_t) and mean_t > 0 else None
    study["repeat_disagreement"] = 2 * mean_r if np.isfinite(mean_r) else None
    if single_appraiser:
        for key in ("reproducibility_variance", "reproducibility_sd", "reproducibility_share",
                    "repeatability_share"):  # fmt: skip
            study[key] = None
        flags = [f for f in flags if "reproducibility" not in f]
    return study, flags


def moment_estimates(study: StudyData) -> tuple[MomentEstimates, MomentEstimates]:
    """Plug-in and bias-corrected moment estimates (docs/statistics.md, classical statistics).

    Plug-in: p_ij replaced by q_ij = s_ij / n_ij in the study-scope formulas, so
    T_i = R_i + V_i holds exactly. Corrected: R_i = mean_j q(1-q) n/(n-1) over cells
    with n >= 2, and T_i = T_i,plug + (1/J_i^2) sum_j q(1-q)/(n-1), which removes the
    plug-in T's bias of -(1/J_i^2) sum_j p(1-p)/n (correcting R alone would leave that
    whole bias in V); V_i = T_i - R_i, kept as it is and flagged when negative. A cell
    with one call cannot be corrected: its term is left out, and a flag says so.
    """
    cells = study.cells
    p = cells["s"] / cells["n"]
    frame = pd.DataFrame(
        {
            "part": cells["part"],
            "p": p,
            "pq": p * (1 - p),
            "pq_corrected": np.where(
                cells["n"] >= 2, p * (1 - p) * cells["n"] / (cells["n"] - 1).clip(lower=1), np.nan
            ),
            "t_term": np.where(cells["n"] >= 2, p * (1 - p) / (cells["n"] - 1).clip(lower=1), 0.0),
        }
    )
    grouped = frame.groupby("part", sort=False)
    call_rate = grouped["p"].mean()
    rr = call_rate * (1 - call_rate)
    rr_corr = rr + grouped["t_term"].sum() / grouped.size() ** 2
    r_plug = grouped["pq"].mean()
    r_corr = grouped["pq_corrected"].mean()  # NaN where no cell has two calls
    order = list(study.parts)

    def table(r: pd.Series, t: pd.Series) -> pd.DataFrame:
        out = pd.DataFrame(
            {
                "part": order,
                "call_rate": call_rate.reindex(order).to_numpy(),
                "rr_variance": t.reindex(order).to_numpy(),
                "repeatability_variance": r.reindex(order).to_numpy(),
            }
        )
        out["reproducibility_variance"] = out["rr_variance"] - out["repeatability_variance"]
        t = out["rr_variance"].to_numpy()
        with np.errstate(divide="ignore", invalid="ignore"):
            share = np.where(t > 0, out["reproducibility_variance"] / t, np.nan)
        out["reproducibility_share"] = share
        out["repeat_disagreement"] = 2 * out["repeatability_variance"]
        return out

    plug = table(r_plug, rr)
    corr = table(r_corr, rr_corr)
    single = len(study.appraisers) < 2
    plug_study, plug_flags = _study_summary(plug, single)
    corr_study, corr_flags = _study_summary(corr, single)
    negative = corr.loc[corr["reproducibility_variance"] < -1e-15, "part"].tolist()
    if negative:
        corr_flags.insert(
            0,
            f"corrected reproducibility variance is negative on {len(negative)} part(s) "
            f"({', '.join(negative[:6])}{'...' if len(negative) > 6 else ''}); shown as is, "
            "not clipped (sampling noise around a small true value)",
        )
    single_call_cells = int((cells["n"] < 2).sum())
    if single_call_cells and single_call_cells < len(cells):
        corr_flags.append(
            f"{single_call_cells} cell(s) have one call and cannot be corrected: their "
            "correction terms are left out"
        )
    no_repeat = corr.loc[corr["repeatability_variance"].isna(), "part"].tolist()
    if no_repeat:
        corr_flags.append(
            f"{len(no_repeat)} part(s) have no cell with two or more trials; the corrected "
            "estimates leave them out"
        )
    return (
        MomentEstimates(
            "plug_in",
            "moment estimates with p_ij replaced by s_ij/n_ij (biased low for repeatability)",
            plug,
            plug_study,
            tuple(plug_flags),
        ),
        MomentEstimates(
            "corrected",
            "bias-corrected moment estimates: n/(n-1) on each cell's p(1-p) for "
            "repeatability, and the matching correction of the total T",
            corr,
            corr_study,
            tuple(corr_flags),
        ),
    )


# ---------------------------------------------------------------------------
# agreement


@dataclass(frozen=True)
class Agreement:
    """Share of parts on which the calls of a kind agree."""

    kind: str
    appraiser: str | None
    agreed: int
    parts: int
    intervals: tuple[Interval, ...]

    def as_dict(self) -> dict:
        return {
            "kind": self.kind,
            "appraiser": self.appraiser,
            "agreed": self.agreed,
            "parts": self.parts,
            "share": self.agreed / self.parts,
            "intervals": [i.as_dict() for i in self.intervals],
        }


def _agreement(kind: str, appraiser: str | None, agreed: np.ndarray, prob: float) -> Agreement:
    x, n = int(agreed.sum()), int(agreed.size)
    return Agreement(kind, appraiser, x, n, (clopper_pearson(x, n, prob), wilson(x, n, prob)))


def agreement(study: StudyData, prob: float = DEFAULT_PROB) -> tuple[list[Agreement], list[dict]]:
    """Agreement percentages with exact and Wilson intervals, and what could not be computed."""
    calls = study.calls
    out: list[Agreement] = []
    skipped: list[dict] = []
    repeated = study.cells[study.cells["n"] >= 2]
    own = ((repeated["s"] == 0) | (repeated["s"] == repeated["n"])).to_numpy()
    # One pass over the cells, not one mask per appraiser (studies may have hundreds).
    own_by_appraiser = pd.Series(own).groupby(repeated["appraiser"].to_numpy(), sort=False)
    own_agreed = {a: g.to_numpy() for a, g in own_by_appraiser}
    for appraiser in study.appraisers:
        if appraiser not in own_agreed:
            skipped.append(
                {
                    "statistic": f"own-trials agreement ({appraiser})",
                    "reason": "needs a part called at least twice by the appraiser",
                }
            )
            continue
        out.append(_agreement("own_trials", appraiser, own_agreed[appraiser], prob))
    per_part = study.cells.groupby("part", sort=False).agg(
        n=("n", "sum"), s=("s", "sum"), appraisers=("appraiser", "size")
    )
    multi = per_part[per_part["appraisers"] >= 2]
    if len(study.appraisers) < 2 or multi.empty:
        skipped.append(
            {
                "statistic": "across-appraiser agreement",
                "reason": "needs at least two appraisers calling the same part",
            }
        )
    else:
        agreed = ((multi["s"] == 0) | (multi["s"] == multi["n"])).to_numpy()
        out.append(_agreement("across_appraisers", None, agreed, prob))
    if study.reference is not None:
        ref = calls["part"].map(study.reference).to_numpy()
        matches = calls.assign(match=(calls["call"].to_numpy() == ref))
        per_cell = matches.groupby(["appraiser", "part"], sort=False)["match"].all()
        mine = {a: g.to_numpy() for a, g in per_cell.groupby(level="appraiser", sort=False)}
        for appraiser in study.appraisers:
            out.append(_agreement("appraiser_vs_reference", appraiser, mine[appraiser], prob))
        agreed = matches.groupby("part")["match"].all().to_numpy()
        out.append(_agreement("all_vs_reference", None, agreed, prob))
    return out, skipped


@dataclass(frozen=True)
class ErrorRate:
    """Share of calls that contradict the reference, over calls (not parts)."""

    key: str
    appraiser: str | None
    errors: int
    calls: int
    intervals: tuple[Interval, ...]

    def as_dict(self) -> dict:
        return {
            "key": self.key,
            "appraiser": self.appraiser,
            "errors": self.errors,
            "calls": self.calls,
            "rate": self.errors / self.calls,
            "intervals": [i.as_dict() for i in self.intervals],
            "note": "calls treated as independent; repeated calls on a part are not",
        }


def error_rates(study: StudyData, prob: float = DEFAULT_PROB) -> list[ErrorRate]:
    """Classical false reject and false accept rates against the reference status."""
    if study.reference is None:
        return []
    calls = study.calls.assign(ref=study.calls["part"].map(study.reference).to_numpy())
    out = []
    groups = [(a, calls[calls["appraiser"] == a]) for a in study.appraisers] + [(None, calls)]
    for appraiser, frame in groups:
        for key, ref_value in (("false_reject_rate", 0), ("false_accept_rate", 1)):
            subset = frame[frame["ref"] == ref_value]
            if subset.empty:
                continue
            wrong = int((subset["call"] != ref_value).sum())
            n = len(subset)
            out.append(
                ErrorRate(
                    key,
                    appraiser,
                    wrong,
                    n,
                    (clopper_pearson(wrong, n, prob), wilson(wrong, n, prob)),
                )
            )
    return out


# ---------------------------------------------------------------------------
# appraiser differences


@dataclass(frozen=True)
class AppraiserDifference:
    """Difference of two appraisers' call (reject) rates over the parts both called."""

    appraiser: str
    other: str
    rejects: int
    calls: int
    other_rejects: int
    other_calls: int
    parts: int
    intervals: tuple[Interval, ...] = field(default_factory=tuple)

    def as_dict(self) -> dict:
        return {
            "appraiser": self.appraiser,
            "other": self.other,
            "call_rate": self.rejects / self.calls,
            "other_call_rate": self.other_rejects / self.other_calls,
            "difference": self.rejects / self.calls - self.other_rejects / self.other_calls,
            "rejects": self.rejects,
            "calls": self.calls,
            "other_rejects": self.other_rejects,
            "other_calls": self.other_calls,
            "parts": self.parts,
            "intervals": [i.as_dict() for i in self.intervals],
            "note": "intervals treat the calls as independent binomial samples",
        }


def appraiser_differences(
    study: StudyData, prob: float = DEFAULT_PROB
) -> list[AppraiserDifference]:
    """Newcombe hybrid score and Agresti-Caffo intervals for p_j - p_j' (for up to
    :data:`MAX_PAIRWISE_APPRAISERS` appraisers)."""
    out: list[AppraiserDifference] = []
    if pairwise_limit_note(study, "") is not None:
        return out
    cells = study.cells
    for a, b in itertools.combinations(study.appraisers, 2):
        ca = cells[cells["appraiser"] == a].set_index("part")
        cb = cells[cells["appraiser"] == b].set_index("part")
        common = ca.index.intersection(cb.index)
        if common.empty:
            continue
        x1, n1 = int(ca.loc[common, "s"].sum()), int(ca.loc[common, "n"].sum())
        x2, n2 = int(cb.loc[common, "s"].sum()), int(cb.loc[common, "n"].sum())
        out.append(
            AppraiserDifference(
                a,
                b,
                x1,
                n1,
                x2,
                n2,
                len(common),
                (newcombe_hybrid(x1, n1, x2, n2, prob), agresti_caffo(x1, n1, x2, n2, prob)),
            )
        )
    return out


# ---------------------------------------------------------------------------
# everything together


@dataclass(frozen=True)
class ClassicalResults:
    """All classical statistics of a study at one interval probability."""

    prob: float
    plug_in: MomentEstimates
    corrected: MomentEstimates
    agreement: tuple[Agreement, ...]
    error_rates: tuple[ErrorRate, ...]
    kappa: tuple[KappaRow, ...]
    appraiser_differences: tuple[AppraiserDifference, ...]
    not_computed: tuple[dict, ...]

    def as_dict(self) -> dict:
        return {
            "prob": self.prob,
            "classical": {
                "plug_in": self.plug_in.as_dict(),
                "corrected": self.corrected.as_dict(),
            },
            "agreement": [a.as_dict() for a in self.agreement],
            "error_rates": [e.as_dict() for e in self.error_rates],
            "kappa": [k.as_dict() for k in self.kappa],
            "appraiser_differences": [d.as_dict() for d in self.appraiser_differences],
            "not_computed": list(self.not_computed),
        }


def classical_statistics(study: StudyData, prob: float = DEFAULT_PROB) -> ClassicalResults:
    """Compute every classical statistic that the design allows; list the rest with reasons."""
    if not 0 < prob < 1:
        raise ValueError(f"interval probability {prob!r} must be strictly between 0 and 1")
    plug, corr = moment_estimates(study)
    agree, skipped_agree = agreement(study, prob)
    kap, skipped_kappa = kappas(study, prob)
    skipped = skipped_agree + skipped_kappa
    if len(study.appraisers) < 2:
        skipped.insert(
            0,
            {
                "statistic": "reproducibility (appraiser) variance",
                "reason": "needs two or more appraisers; with one it is 0 by construction",
            },
        )
        skipped.append({"statistic": "appraiser differences", "reason": "needs two appraisers"})
    too_many = pairwise_limit_note(study, "differences of call rates of each pair of appraisers")
    if too_many:
        skipped.append(too_many)
    if int(study.cells["n"].max()) < 2:
        skipped.insert(
            0,
            {
                "statistic": "corrected repeatability variance",
                "reason": "needs a cell with two or more trials",
            },
        )
    return ClassicalResults(
        prob,
        plug,
        corr,
        tuple(agree),
        tuple(error_rates(study, prob)),
        tuple(kap),
        tuple(appraiser_differences(study, prob)),
        tuple(skipped),
    )


def by_appraiser(document: dict) -> list[dict]:
    """The classical figures of a classical.json document regrouped by appraiser: one
    dict per appraiser (and ``None`` for the appraisers together) with the rows of
    ``own`` agreement and ``own_kappa``, and with a reference ``reference`` agreement,
    ``reference_kappa``, ``false_reject_rate`` and ``false_accept_rate`` (None where not
    computed)."""
    agreement = {(r["kind"], r["appraiser"]): r for r in document["agreement"]}
    kappa = {(r["kind"], r["appraiser"], r["other"]): r for r in document["kappa"]}
    errors = {(r["key"], r["appraiser"]): r for r in document["error_rates"]}
    names = list(dict.fromkeys(r["appraiser"] for r in document["agreement"] if r["appraiser"]))
    out = []
    for name in [*names, None]:
        together = name is None
        kind = "all_vs_reference" if together else "appraiser_vs_reference"
        out.append({
            "appraiser": name,
            "own": agreement.get(("across_appraisers" if together else "own_trials", name)),
            "own_kappa": kappa.get(("across_appraisers" if together else "own_trials", name,
                                    None)),
            "reference": agreement.get((kind, name)),
            "reference_kappa": kappa.get((kind, name, "reference")),
            "false_reject_rate": errors.get(("false_reject_rate", name)),
            "false_accept_rate": errors.get(("false_accept_rate", name)),
        })  # fmt: skip
    return out
