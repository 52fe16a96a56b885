"""Classical statistics shown beside the posterior.

Moment (plug-in) estimates of the per-part decomposition, agreement
percentages, Fleiss' and Cohen's kappa with their standard errors, and
intervals for the difference of two appraisers' call rates. Keys follow
``estimands.md``; every interval states its level and method.
"""

from __future__ import annotations

import itertools
import math
from dataclasses import asdict, dataclass, field, replace

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

PER_PART_KEYS = ("call_rate", "rr_variance", "repeatability_variance", "reproducibility_variance")
MAX_PAIRWISE_APPRAISERS = 12
"""Pairwise statistics (Cohen's kappa and call-rate differences of every pair) are listed
up to this many appraisers (66 pairs). Their number grows with the square of the
appraisers: 1000 appraisers would give half a million rows that nobody reads and
minutes of computing; beyond the limit they are listed as not computed, with the reason."""


def pairwise_limit_note(study: StudyData, statistic: str) -> dict | None:
    """The not-computed entry for a pairwise statistic when there are too many appraisers."""
    count = len(study.appraisers)
    if count <= MAX_PAIRWISE_APPRAISERS:
        return None
    pairs = count * (count - 1) // 2
    return {
        "statistic": statistic,
        "reason": f"{count} appraisers make {pairs:,} pairs; pairwise statistics are listed "
        f"up to {MAX_PAIRWISE_APPRAISERS} appraisers (analyse a subset of appraisers for them)",
    }


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
    """Averages over parts; the share is a ratio of averages (estimands.md).

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
    """Plug-in and bias-corrected moment estimates (estimands.md, classical statistics).

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
# kappa


BOOTSTRAP_RESAMPLES = 2000
BOOTSTRAP_SEED = 0
"""Fixed, so the same data always give the same interval."""


def bootstrap_weights(groups: int, resamples: int = BOOTSTRAP_RESAMPLES,
                      seed: int = BOOTSTRAP_SEED) -> np.ndarray:  # fmt: skip
    """(resamples, groups) counts of how often each group is drawn in each resample."""
    rng = np.random.default_rng(seed)
    return rng.multinomial(groups, np.full(groups, 1.0 / groups), size=resamples).astype(float)


def _percentile(values: np.ndarray, prob: float) -> tuple[float, float]:
    values = values[np.isfinite(values)]
    if values.size < 0.9 * BOOTSTRAP_RESAMPLES:
        return math.nan, math.nan
    lo, hi = np.quantile(values, [(1 - prob) / 2, (1 + prob) / 2])
    return float(lo), float(hi)


BOOTSTRAP_NOTE = (
    "percentile bootstrap over parts ({resamples} resamples, fixed seed): the uncertainty "
    "of the estimate; the null SE serves only the test of no agreement beyond chance"
)


@dataclass(frozen=True)
class FleissKappa:
    """Fleiss' kappa with its standard errors and a bootstrap interval.

    ``se_fleiss_1971`` is the formula printed by Fleiss (1971);
    ``se_null_fnl_1979`` the SE under no agreement beyond chance of Fleiss, Nee &
    Landis (1979), right for the test (``z``) and wrong as the uncertainty of the
    estimate; ``lower``/``upper`` a percentile bootstrap interval over parts.
    """

    kappa: float
    se_fleiss_1971: float
    se_null_fnl_1979: float
    z: float
    subjects: int
    ratings_per_subject: float
    observed_agreement: float
    chance_agreement: float
    lower: float = math.nan
    upper: float = math.nan
    interval: str = ""


def _fleiss_weighted(counts: np.ndarray, weights: np.ndarray) -> np.ndarray:
    """Fleiss' kappa for each row of subject ``weights`` (resamples x subjects)."""
    n_i = counts.sum(axis=1)
    p_i = ((counts**2).sum(axis=1) - n_i) / (n_i * (n_i - 1))
    p_j = (weights @ counts) / (weights @ n_i)[:, None]
    p_bar = (weights @ p_i) / weights.sum(axis=1)
    p_e = (p_j**2).sum(axis=1)
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(p_e < 1 - 1e-12, (p_bar - p_e) / (1 - p_e), np.nan)


def fleiss_kappa(
    counts: np.ndarray, *, groups: np.ndarray | None = None, prob: float | None = None
) -> FleissKappa:
    """Fleiss' kappa of a subjects x categories table of rating counts.

    Subjects with fewer than two ratings carry no agreement information and
    are dropped. Unequal numbers of ratings per subject are allowed in the
    point estimate (per-subject agreement P_i averaged); the standard errors
    assume equal numbers and use the mean number of ratings. With ``prob``, a
    percentile bootstrap interval resamples the subjects, or the ``groups`` of
    subjects (an integer label per subject: the part of each call) when given.
    """
    counts = np.asarray(counts, dtype=float)
    n_i = counts.sum(axis=1)
    keep = n_i >= 2
    counts = counts[keep]
    n_i = n_i[keep]
    if groups is not None:
        groups = np.asarray(groups)[keep]
    if counts.shape[0] == 0:
        raise ValueError("Fleiss' kappa needs at least one subject with two or more ratings")
    subjects = counts.shape[0]
    p_j = counts.sum(axis=0) / n_i.sum()
    p_i = ((counts**2).sum(axis=1) - n_i) / (n_i * (n_i - 1))
    p_bar = float(p_i.mean())
    p_e = float((p_j**2).sum())
    if p_e >= 1 - 1e-12:
        raise ValueError("Fleiss' kappa is undefined when every rating is in one category")
    kappa = (p_bar - p_e) / (1 - p_e)
    n = float(n_i.mean())
    q_j = 1 - p_j
    var_1971 = (
        2
        / (subjects * n * (n - 1))
        * (p_e - (2 * n - 3) * p_e**2 + 2 * (n - 2) * (p_j**3).sum())
        / (1 - p_e) ** 2
    )
    pq = float((p_j * q_j).sum())
    var_null = (
        2 / (subjects * n * (n - 1)) * (pq**2 - float((p_j * q_j * (q_j - p_j)).sum())) / pq**2
    )
    se_null = math.sqrt(max(var_null, 0.0))
    lower = upper = math.nan
    interval = ""
    if prob is not None:
        codes = np.arange(subjects) if groups is None else np.unique(groups, return_inverse=True)[1]
        weights = bootstrap_weights(int(codes.max()) + 1)[:, codes]
        lower, upper = _percentile(_fleiss_weighted(counts, weights), prob)
        interval = BOOTSTRAP_NOTE.format(resamples=BOOTSTRAP_RESAMPLES)
    return FleissKappa(
        kappa=float(kappa),
        se_fleiss_1971=math.sqrt(max(var_1971, 0.0)),
        se_null_fnl_1979=se_null,
        z=float(kappa / se_null) if se_null > 0 else math.nan,
        subjects=subjects,
        ratings_per_subject=n,
        observed_agreement=p_bar,
        chance_agreement=p_e,
        lower=lower,
        upper=upper,
        interval=interval,
    )


@dataclass(frozen=True)
class CohenKappa:
    """Cohen's kappa of a square agreement table with three standard errors.

    ``se_cohen_1960``: sqrt(po(1-po)/(N(1-pe)^2)) of Cohen (1960);
    ``se_fce_1969``: the large-sample SE of Fleiss, Cohen & Everitt (1969);
    ``se_null``: the SE under no agreement beyond chance, used for ``z``.
    """

    kappa: float
    se_cohen_1960: float
    se_fce_1969: float
    se_null: float
    z: float
    n: int
    observed_agreement: float
    chance_agreement: float
    lower: float = math.nan
    upper: float = math.nan
    interval: str = ""


def _cohen_many(tables: np.ndarray) -> np.ndarray:
    """Cohen's kappa of each k x k table of a stack (resamples x k x k)."""
    p = tables / tables.sum(axis=(1, 2))[:, None, None]
    po = np.trace(p, axis1=1, axis2=2)
    pe = (p.sum(axis=2) * p.sum(axis=1)).sum(axis=1)
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(pe < 1 - 1e-12, (po - pe) / (1 - pe), np.nan)


def pair_tables(cells: pd.DataFrame, a: str, b: str) -> np.ndarray:
    """Per common part, the 2 x 2 table of all pairings of appraiser ``a``'s calls with
    ``b``'s (rows: a accept/reject, columns: b), each part weighted 1.

    Every call of one appraiser is paired with every call of the other on the same
    part, so trial numbers play no part: relabelling trials within a cell leaves the
    table unchanged. With one trial each it is the usual table of paired calls.
    """
    mine = cells[cells["appraiser"] == a].set_index("part")
    theirs = cells[cells["appraiser"] == b].set_index("part")
    common = mine.index.intersection(theirs.index)
    x = (mine.loc[common, "s"] / mine.loc[common, "n"]).to_numpy(dtype=float)
    y = (theirs.loc[common, "s"] / theirs.loc[common, "n"]).to_numpy(dtype=float)
    return np.stack(
        [np.stack([(1 - x) * (1 - y), (1 - x) * y], axis=1),
         np.stack([x * (1 - y), x * y], axis=1)], axis=1,
    )  # fmt: skip


def cohen_kappa(table: np.ndarray) -> CohenKappa:
    """Cohen's (unweighted) kappa of a k x k table of counts (rows: rater 1)."""
    table = np.asarray(table, dtype=float)
    n = table.sum()
    if table.ndim != 2 or table.shape[0] != table.shape[1] or n <= 0:
        raise ValueError(f"Cohen's kappa needs a non-empty square table, got shape {table.shape}")
    p = table / n
    rows, cols = p.sum(axis=1), p.sum(axis=0)
    po = float(np.trace(p))
    pe = float((rows * cols).sum())
    if pe >= 1 - 1e-12:
        raise ValueError("Cohen's kappa is undefined when both raters use one category only")
    kappa = (po - pe) / (1 - pe)
    se_1960 = math.sqrt(po * (1 - po) / (n * (1 - pe) ** 2))
    diag = np.diag(p)
    term1 = float((diag * (1 - (rows + cols) * (1 - kappa)) ** 2).sum())
    off = p.copy()
    np.fill_diagonal(off, 0.0)
    term2 = (1 - kappa) ** 2 * float((off * (cols[:, None] + rows[None, :]) ** 2).sum())
    term3 = (kappa - pe * (1 - kappa)) ** 2
    se_fce = math.sqrt(max(term1 + term2 - term3, 0.0) / (n * (1 - pe) ** 2))
    var0 = (pe + pe**2 - float((rows * cols * (rows + cols)).sum())) / (n * (1 - pe) ** 2)
    se0 = math.sqrt(max(var0, 0.0))
    # One rater using a single category gives a null SE of 0: z is then undefined.
    z = float(kappa / se0) if se0 > 0 else math.nan
    return CohenKappa(float(kappa), se_1960, se_fce, se0, z, round(n), po, pe)


def cohen_kappa_pairs(per_part: np.ndarray, prob: float) -> CohenKappa:
    """Cohen's kappa of the summed per-part tables of :func:`pair_tables`, with a
    percentile bootstrap interval over parts. The standard errors treat each part as
    one pair of calls."""
    result = cohen_kappa(per_part.sum(axis=0))
    weights = bootstrap_weights(per_part.shape[0])
    lower, upper = _percentile(_cohen_many(np.einsum("bp,pij->bij", weights, per_part)), prob)
    return replace(result, lower=lower, upper=upper,
                   interval=BOOTSTRAP_NOTE.format(resamples=BOOTSTRAP_RESAMPLES))  # fmt: skip


@dataclass(frozen=True)
class KappaRow:
    """One kappa statistic of the study, labelled."""

    kind: str
    statistic: str
    appraiser: str | None
    other: str | None
    value: FleissKappa | CohenKappa
    note: str = ""

    def as_dict(self) -> dict:
        return {
            "kind": self.kind,
            "statistic": self.statistic,
            "appraiser": self.appraiser,
            "other": self.other,
            **asdict(self.value),
            "note": self.note,
        }


def _binary_counts(s: np.ndarray, n: np.ndarray) -> np.ndarray:
    return np.column_stack([n - s, s])


def kappas(study: StudyData, prob: float = DEFAULT_PROB) -> tuple[list[KappaRow], list[dict]]:
    """Fleiss' kappa of each appraiser's own trials, across appraisers and against the reference;
    Cohen's kappa for each pair of appraisers (all pairings of their calls on common parts,
    see :func:`pair_tables`); each with a bootstrap interval over parts."""
    rows: list[KappaRow] = []
    skipped: list[dict] = []

    def attempt(label: str, make) -> None:
        try:
            rows.append(make())
        except ValueError as exc:
            skipped.append({"statistic": label, "reason": str(exc)})

    cells = study.cells
    by_appraiser = dict(tuple(cells.groupby("appraiser", sort=False)))
    for appraiser in study.appraisers:
        mine = by_appraiser[appraiser]
        attempt(
            f"Fleiss' kappa of own trials ({appraiser})",
            lambda mine=mine, appraiser=appraiser: KappaRow(
                "own_trials",
                "fleiss",
                appraiser,
                None,
                fleiss_kappa(_binary_counts(mine["s"].to_numpy(), mine["n"].to_numpy()), prob=prob),
                "subjects: parts; ratings: the appraiser's trials",
            ),
        )
    if len(study.appraisers) >= 2:
        per_part = cells.groupby("part", sort=False)[["n", "s"]].sum()
        attempt(
            "Fleiss' kappa across appraisers",
            lambda: KappaRow(
                "across_appraisers",
                "fleiss",
                None,
                None,
                fleiss_kappa(
                    _binary_counts(per_part["s"].to_numpy(), per_part["n"].to_numpy()), prob=prob
                ),
                "subjects: parts; ratings: every call of every appraiser",
            ),
        )
    else:
        skipped.append(
            {"statistic": "Fleiss' kappa across appraisers", "reason": "needs two appraisers"}
        )
    if study.reference is not None:
        calls = study.calls.assign(ref=study.calls["part"].map(study.reference).to_numpy())
        groups = [(a, calls[calls["appraiser"] == a]) for a in study.appraisers] + [(None, calls)]
        for appraiser, frame in groups:
            s = frame["call"].to_numpy() + frame["ref"].to_numpy()
            parts = frame["part"].to_numpy()
            attempt(
                f"Fleiss' kappa against reference ({appraiser or 'all appraisers'})",
                lambda s=s, parts=parts, appraiser=appraiser: KappaRow(
                    "appraiser_vs_reference" if appraiser else "all_vs_reference",
                    "fleiss",
                    appraiser,
                    "reference",
                    fleiss_kappa(_binary_counts(s, np.full_like(s, 2)), groups=parts, prob=prob),
                    "subjects: calls; ratings: the call and the reference status",
                ),
            )
    too_many = pairwise_limit_note(study, "Cohen's kappa of each pair of appraisers")
    if too_many:
        skipped.append(too_many)
        return rows, skipped
    for a, b in itertools.combinations(study.appraisers, 2):
        per_part = pair_tables(cells, a, b)
        if per_part.shape[0] == 0:
            skipped.append(
                {"statistic": f"Cohen's kappa {a} vs {b}", "reason": "the two appraisers "
                 "share no part"}
            )  # fmt: skip
            continue
        attempt(
            f"Cohen's kappa {a} vs {b}",
            lambda per_part=per_part, a=a, b=b: KappaRow(
                "appraiser_pair",
                "cohen",
                a,
                b,
                cohen_kappa_pairs(per_part, prob),
                "subjects: parts both appraisers called; every call of one paired with "
                "every call of the other on the part (trial numbers play no part)",
            ),
        )
    return rows, skipped


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
