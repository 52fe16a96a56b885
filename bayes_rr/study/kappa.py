"""Agreement beyond chance: Fleiss' and Cohen's kappa with their intervals (cluster
bootstrap over parts), per appraiser and for pairs."""

from __future__ import annotations

import itertools
import math
from dataclasses import asdict, dataclass, replace

import numpy as np
import pandas as pd

from bayes_rr.core import DEFAULT_PROB
from bayes_rr.study.data import StudyData

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
