"""Model checks: posterior predictive checks, the prior predictive check, LOO comparison.

Posterior predictive check: replicated studies with the same design (the same
cells and numbers of trials) are drawn from the posterior, and test statistics
that matter for an inspection study are compared with the observed ones:

* per appraiser, the number of parts on which all their trials agree;
* the number of parts on which all calls (all appraisers) agree;
* how many parts got 0, 1, ..., all reject calls;
* each appraiser's overall reject share;
* dependence beyond the model's own (the parts called both ways by every appraiser,
  the reversals of the appraisers' order of strictness part by part, and the share
  of a part's variation that comes from the appraisers differing): a latent class fit on a
  continuous judged property shows there;
* with a reference status: the share of calls that agree with it (per appraiser
  and overall).

The posterior predictive p-value is P(T_rep > T_obs) + P(T_rep = T_obs)/2 (mid-p,
because the statistics are discrete); it is flagged below 0.025 or above 0.975.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass

import numpy as np
import xarray as xr

from bayes_rr.core.errors import DataError
from bayes_rr.families import family_of
from bayes_rr.priors.spec import ModelSpec
from bayes_rr.results.estimands import PART_LOG_LIK, compute_estimands
from bayes_rr.study.data import StudyData

METHOD = "posterior predictive check"
FLAG_LOW, FLAG_HIGH = 0.025, 0.975
DEFAULT_CHECK_DRAWS = 500


@dataclass(frozen=True)
class CheckStatistic:
    """One test statistic: observed value against its replicated distribution."""

    name: str
    group: str
    description: str
    appraiser: str | None
    observed: float
    replicated: np.ndarray
    p_value: float
    flagged: bool

    def as_dict(self) -> dict:
        rep = self.replicated
        return {
            "name": self.name,
            "group": self.group,
            "description": self.description,
            "appraiser": self.appraiser,
            "observed": self.observed,
            "replicated_mean": float(rep.mean()),
            "replicated_lower": float(np.quantile(rep, FLAG_LOW)),
            "replicated_upper": float(np.quantile(rep, FLAG_HIGH)),
            "p_value": self.p_value,
            "flagged": self.flagged,
            "replicated": rep.tolist(),
        }


@dataclass(frozen=True)
class CheckResult:
    """All statistics of a posterior predictive check."""

    method: str
    draws: int
    seed: int
    statistics: tuple[CheckStatistic, ...]

    @property
    def flagged(self) -> tuple[CheckStatistic, ...]:
        return tuple(s for s in self.statistics if s.flagged)

    @property
    def chance_limit(self) -> int:
        """Flags that chance alone gives (95th percentile of Binomial(m, 0.05)) when the
        model is right, for m statistics (taken as independent, a rough guide)."""
        from scipy import stats

        return int(stats.binom.ppf(0.95, len(self.statistics), FLAG_LOW * 2))

    @property
    def verdict(self) -> str:
        count, limit = len(self.flagged), self.chance_limit
        if count == 0:
            return (
                f"none of the {len(self.statistics)} statistics checked falls outside the range "
                "the model predicts for them (this finds no misfit in these features; it does "
                "not prove the model right)"
            )
        if count <= limit:
            return (
                f"{count} of {len(self.statistics)} statistics flagged, no more than chance "
                f"gives when the model is right (up to {limit}); look at them, but they are "
                "not by themselves evidence against the model"
            )
        return (
            f"{count} of {len(self.statistics)} statistics flagged, more than chance gives "
            f"(up to {limit}): the model misses features of the data; consider another model"
        )

    @property
    def passes(self) -> bool:
        return len(self.flagged) <= self.chance_limit

    def as_dict(self) -> dict:
        return {
            "method": self.method,
            "draws": self.draws,
            "seed": self.seed,
            "p_value": "mid-p: P(T_rep > T_obs) + P(T_rep = T_obs) / 2",
            "flag_when": f"p < {FLAG_LOW} or p > {FLAG_HIGH}",
            "flagged": [s.name for s in self.flagged],
            "chance_limit": self.chance_limit,
            "passes": self.passes,
            "verdict": self.verdict,
            "statistics": [s.as_dict() for s in self.statistics],
        }


def dependence_sentence(result: CheckResult, spec: ModelSpec) -> str | None:
    """For a latent class fit whose calls depend on each other beyond the two classes
    (one of the dependence statistics lies on the side a continuous property gives,
    beyond the flag level), the sentence that says what that means; None otherwise."""
    from bayes_rr.families import family_of

    if not family_of(spec).dependence_check:
        return None
    found = []
    for stat in result.statistics:
        side = DEPENDENCE_STATISTICS.get(stat.name)
        if side is None:
            continue
        beyond = stat.p_value < FLAG_LOW if side == "more" else stat.p_value > FLAG_HIGH
        if beyond:
            found.append(f"{DEPENDENCE_FINDINGS[stat.name]} (mid-p {stat.p_value:.3f})")
    if not found:
        return None
    return (
        f"{'; '.join(found)}: the calls depend on each other beyond two classes, as when "
        "the judged property is continuous (a length, a diameter) and the appraisers' "
        "thresholds on it differ. The latent class false reject and false accept rates may "
        "then be biased. Fit latent-trait (parts on the property's scale) and weigh the "
        "two with 'bayes-rr compare'; with a measured value per part use call-curve"
    )


# ---------------------------------------------------------------------------
# statistics of a study, vectorised over replicated studies


DEPENDENCE_STATISTIC = "parts_mixed_for_everyone"
ORDER_STATISTIC = "appraiser_order_reversals"
SPREAD_STATISTIC = "between_appraiser_share"
DEPENDENCE_STATISTICS = {
    DEPENDENCE_STATISTIC: "more",
    ORDER_STATISTIC: "fewer",
    SPREAD_STATISTIC: "more",
}
"""The statistics that show calls depending on each other beyond two classes, and the
side of the replicated range a continuous judged property puts the observed value on.

On a continuous property each appraiser rejects beyond their own threshold: a part
between two thresholds is rejected by the stricter appraiser and accepted by the
other, so the appraisers' order of strictness holds part by part (few reversals) and
they differ on a part more than their own repeat calls do. Measured (latent class fits
of 60 parts x 4 appraisers x 3 trials, seeds 1-20; DEVELOPERS.md): the sentence came for
10 of 20 latent-trait studies and none of 20 two-class studies."""
DEPENDENCE_FINDINGS = {
    DEPENDENCE_STATISTIC: "more parts were called both ways by every appraiser than the "
    "latent class model replicates",
    ORDER_STATISTIC: "the appraisers' order of strictness holds part by part more often than "
    "the latent class model replicates",
    SPREAD_STATISTIC: "a larger share of the calls' variation on a part comes from the "
    "appraisers differing than the latent class model replicates",
}


def study_statistics(
    s: np.ndarray, study: StudyData
) -> dict[str, tuple[str, str, str | None, np.ndarray]]:
    """Test statistics of reject counts ``s`` (D, cell) on the design of ``study``.

    Returns name -> (group, description, appraiser, values (D,)).
    """
    s = np.atleast_2d(s)
    cells = study.cells
    n = cells["n"].to_numpy()
    part = cells["part_index"].to_numpy()
    app = cells["appraiser_index"].to_numpy()
    n_parts = len(study.parts)
    out: dict[str, tuple[str, str, str | None, np.ndarray]] = {}
    consistent = (s == 0) | (s == n)
    for j, name in enumerate(study.appraisers):
        mine = (app == j) & (n >= 2)
        if mine.any():
            out[f"parts_all_trials_agree[{name}]"] = (
                "appraiser_consistency",
                f"parts on which all of {name}'s trials agree",
                name,
                consistent[:, mine].sum(axis=1).astype(float),
            )
    per_part_s = np.zeros((s.shape[0], n_parts))
    np.add.at(per_part_s.T, part, s.T)
    per_part_n = np.bincount(part, weights=n, minlength=n_parts)
    appraisers_per_part = np.bincount(part, minlength=n_parts)
    multi = appraisers_per_part >= 2
    if multi.any():
        agree = (per_part_s == 0) | (per_part_s == per_part_n)
        out["parts_all_calls_agree"] = (
            "part_agreement",
            "parts on which all calls of all appraisers agree",
            None,
            agree[:, multi].sum(axis=1).astype(float),
        )
    repeated = n >= 2
    eligible = np.bincount(part, weights=repeated.astype(float), minlength=n_parts)
    if (eligible >= 2).any():
        # borderline parts of a continuous property draw mixed calls from everyone;
        # two classes with calls independent given the class make that rare
        mixed = ((s > 0) & (s < n) & repeated).astype(float)
        mixed_per_part = np.zeros((s.shape[0], n_parts))
        np.add.at(mixed_per_part.T, part, mixed.T)
        every = (mixed_per_part == eligible) & (eligible >= 2)
        out[DEPENDENCE_STATISTIC] = (
            "dependence",
            "parts on which every appraiser who called them twice or more called them both ways",
            None,
            every.sum(axis=1).astype(float),
        )
    out.update(_order_and_spread(s, study))
    for k in range(int(per_part_n.max()) + 1):
        out[f"parts_with_{k}_rejects"] = (
            "rejects_per_part",
            f"parts that got exactly {k} reject call(s)",
            None,
            (per_part_s == k).sum(axis=1).astype(float),
        )
    for j, name in enumerate(study.appraisers):
        mine = app == j
        out[f"reject_share[{name}]"] = (
            "reject_share",
            f"share of {name}'s calls that are reject",
            name,
            s[:, mine].sum(axis=1) / n[mine].sum(),
        )
    if study.reference is not None:
        ref = study.reference.to_numpy()[part]
        match = np.where(ref == 1, s, n - s)
        for j, name in enumerate(study.appraisers):
            mine = app == j
            out[f"reference_agreement[{name}]"] = (
                "reference_agreement",
                f"share of {name}'s calls that agree with the reference",
                name,
                match[:, mine].sum(axis=1) / n[mine].sum(),
            )
        out["reference_agreement"] = (
            "reference_agreement",
            "share of all calls that agree with the reference",
            None,
            match.sum(axis=1) / n.sum(),
        )
    return out


def _order_and_spread(s: np.ndarray, study: StudyData) -> dict:
    """The appraiser-order reversals and the between-appraiser share of reject counts
    ``s`` (D, cell), on parts called by two or more appraisers (none: no statistics).

    Reversals: pairs of appraisers on a part whose reject shares are in the reverse of
    their overall order (the more lenient over all parts rejecting more here; each
    study, observed or replicated, ordered by its own calls). Share: summed over parts,
    the variance of the appraisers' reject shares q on the part, over that plus their
    mean q (1 - q) (the observed reproducibility share of the calls' variance)."""
    from bayes_rr.families.layout import call_grids

    n, _ = call_grids(study)
    cells = study.cells
    part, app = cells["part_index"].to_numpy(), cells["appraiser_index"].to_numpy()
    called = n > 0
    shared = called.sum(axis=1) >= 2
    if not shared.any():
        return {}
    grid = np.zeros((s.shape[0], *n.shape))
    grid[:, part, app] = s
    q = grid / np.maximum(n, 1)
    overall = grid.sum(axis=1) / np.maximum(n.sum(axis=0), 1)  # (D, J)
    reversals = np.zeros(s.shape[0])
    j_count = n.shape[1]
    for a in range(j_count):
        for b in range(a + 1, j_count):
            both = called[:, a] & called[:, b]
            if not both.any():
                continue
            # sign of the overall order per study; a tie orders nothing
            order = np.sign(overall[:, b] - overall[:, a])[:, None]
            here = np.sign(q[:, both, b] - q[:, both, a])
            reversals += ((here * order) < 0).sum(axis=1)
    count = called.sum(axis=1)[shared]
    qs, mask = q[:, shared], called[shared][None].astype(float)
    mean = (qs * mask).sum(axis=2) / count
    between = (((qs - mean[..., None]) ** 2) * mask).sum(axis=2) / count
    within = (qs * (1 - qs) * mask).sum(axis=2) / count
    total = between.sum(axis=1) + within.sum(axis=1)
    with np.errstate(invalid="ignore", divide="ignore"):
        # a study whose every part got one call from everyone has no variation: share 0
        spread = np.where(total > 0, between.sum(axis=1) / total, 0.0)
    return {
        ORDER_STATISTIC: (
            "dependence",
            "pairs of appraisers on a part whose reject shares reverse their overall order",
            None,
            reversals,
        ),
        SPREAD_STATISTIC: (
            "dependence",
            "share of the calls' variance on a part that comes from appraisers differing",
            None,
            spread,
        ),
    }


def mid_p_value(replicated: np.ndarray, observed: float) -> float:
    """P(T_rep > T_obs) + P(T_rep = T_obs)/2."""
    close = np.isclose(replicated, observed, rtol=0, atol=1e-12)
    return float((replicated > observed + 1e-12).mean() + 0.5 * close.mean())


# ---------------------------------------------------------------------------
# replication


def thin(posterior: xr.Dataset, draws: int, seed: int) -> xr.Dataset:
    """``draws`` posterior draws chosen at random (without replacement when possible),
    returned with one chain."""
    stacked = posterior.stack(sample=("chain", "draw"))
    total = stacked.sizes["sample"]
    rng = np.random.default_rng(seed)
    index = np.sort(rng.choice(total, size=min(draws, total), replace=False))
    picked = stacked.isel(sample=index).drop_vars(["sample", "chain", "draw"])
    picked = picked.rename({"sample": "draw"}).assign_coords(draw=np.arange(index.size))
    return picked.expand_dims(chain=[0]).transpose("chain", "draw", ...)


def replicate(posterior: xr.Dataset, spec: ModelSpec, study: StudyData, seed: int) -> np.ndarray:
    """Replicated reject counts (S, cell) from the model, same design as the study.

    The family gives each draw's call probabilities of the cells (the same parts and
    appraisers, effects from the draw; or fresh ones where the family integrates
    them out of its likelihood).
    """
    rng = np.random.default_rng(seed)
    n = study.cells["n"].to_numpy()
    p = family_of(spec).cell_probabilities(posterior, spec, study, rng)
    return rng.binomial(n[None, :], p)


def posterior_predictive_check(
    posterior: xr.Dataset,
    spec: ModelSpec,
    study: StudyData,
    *,
    draws: int = DEFAULT_CHECK_DRAWS,
    seed: int = 0,
) -> CheckResult:
    """Replicate the study from ``draws`` posterior draws and compare the statistics."""
    if draws < 20:
        raise DataError(f"--draws {draws}: a predictive check needs at least 20 draws")
    subset = thin(posterior, draws, seed)
    s_rep = replicate(subset, spec, study, seed + 1)
    observed = study_statistics(study.cells["s"].to_numpy()[None, :], study)
    replicated = study_statistics(s_rep, study)
    stats = []
    for name, (group, description, appraiser, values) in replicated.items():
        obs = float(observed[name][3][0])
        p = mid_p_value(values, obs)
        stats.append(
            CheckStatistic(
                name,
                group,
                description,
                appraiser,
                obs,
                values,
                p,
                bool(p < FLAG_LOW or p > FLAG_HIGH),
            )
        )
    return CheckResult(METHOD, int(subset.sizes["draw"]), seed, tuple(stats))


# ---------------------------------------------------------------------------
# prior predictive check

PRIOR_KEYS = (
    "call_rate",
    "reproducibility_share",
    "repeatability_share",
    "repeat_disagreement",
    "cross_disagreement",
    "rr_variance",
)
PRIOR_RATE_KEYS = ("false_reject_rate", "false_accept_rate")
"""System-level wrong-call rates, for the models that give them."""


def prior_predictive(
    spec: ModelSpec, study: StudyData, *, draws: int = DEFAULT_CHECK_DRAWS, seed: int = 0
) -> list[dict]:
    """What the priors alone imply for the study-level shares and disagreement probabilities
    on this study's design (quantiles over prior draws).

    The priors are drawn in numpy (:func:`bayes_rr.priors.prior_draws.draw_prior`), so the
    check needs no PyMC. A spec that carries an earlier study has a prior with
    factors that cannot be drawn from directly: draws of the stated priors are
    resampled with weights proportional to the factors (sampling importance
    resampling from four times as many draws).
    """
    from bayes_rr.priors.prior_draws import draw_prior

    extra = 4 if spec.earlier is not None else 1
    prior = draw_prior(spec, study, draws * extra, seed)
    if spec.earlier is not None:
        prior = _resample_earlier(prior, spec, draws, seed)
    with np.errstate(divide="ignore", invalid="ignore"):  # 0/0 shares are left undefined
        estimands = compute_estimands(prior, spec, study, seed)
    rows = []
    wanted = [("study", key) for key in PRIOR_KEYS] + [("system", k) for k in PRIOR_RATE_KEYS]
    for scope in ("study", "population"):
        for level, key in wanted:
            name = f"{scope}__{level}__{key}"
            if name not in estimands:
                continue
            values = estimands[name].to_numpy().ravel()
            values = values[np.isfinite(values)]
            row = {"key": key, "scope": scope, "level": level, "draws": int(values.size)}
            # a quantity undefined in every draw (no variance at all on this design) has
            # no quantiles: said so, never an error
            q = np.quantile(values, QUANTILES) if values.size else [None] * len(QUANTILES)
            row.update({name: None if v is None else float(v) for name, v in
                        zip(QUANTILE_NAMES, q, strict=True)})  # fmt: skip
            rows.append(row)
    return rows


QUANTILES = (0.025, 0.25, 0.5, 0.75, 0.975)
QUANTILE_NAMES = ("q025", "q25", "median", "q75", "q975")


def prior_cells(row: dict) -> tuple[str, str, str, str]:
    """A prior predictive row as printed: the quantity's name (the glossary's), its
    scope, the prior median and the 95% range (said, where every draw left it
    undefined)."""
    from bayes_rr.core import glossary

    label = glossary.name(row["key"])
    if row.get("level") == "system":
        label += " (all appraisers)"
    if row.get("median") is None:
        return label, row["scope"], "-", "undefined in every prior draw"
    return label, row["scope"], f"{row['median']:.3f}", f"{row['q025']:.3f} to {row['q975']:.3f}"


def _resample_earlier(prior, spec: ModelSpec, draws: int, seed: int):
    """``draws`` of the stated priors' draws, resampled with the earlier study's factors as
    weights."""
    from bayes_rr.priors.hyperpriors import log_prior

    log_w = (log_prior(prior, spec) - log_prior(prior, spec, earlier=False)).ravel()
    weights = np.exp(log_w - log_w.max())
    rng = np.random.default_rng([seed, 7])
    picked = rng.choice(weights.size, size=draws, p=weights / weights.sum())
    out = prior.isel(draw=np.sort(picked))
    return out.assign_coords(draw=np.arange(draws))


# ---------------------------------------------------------------------------
# model comparison


def _unit(idata, variable: str) -> str:
    return idata.log_likelihood[variable].dims[-1]


def _loo_variables(named_idata: dict[str, object]) -> dict[str, str]:
    """The log likelihood variable LOO uses for each fit: the cell one when every fit has
    it; otherwise one term per part, which a latent class fit has and a latent trait fit
    gives beside its cells. Refused when a fit has neither in common."""
    units = {name: _unit(idata, "s") for name, idata in named_idata.items()}
    if len(set(units.values())) == 1:
        return dict.fromkeys(named_idata, "s")
    out = {}
    for name, idata in named_idata.items():
        if units[name] == "part":
            out[name] = "s"
        elif PART_LOG_LIK in idata.log_likelihood:
            out[name] = PART_LOG_LIK
        else:
            listing = ", ".join(f"{k}: one term per {v}" for k, v in units.items())
            raise DataError(
                f"the fits' log likelihoods have different units ({listing}), and {name!r} "
                "gives none per part; LOO compares models whose likelihoods leave out the "
                "same units (a latent class fit leaves out a part, latent-trait both a part "
                "and a cell, the other models a part-appraiser cell)"
            )
    return out


def compare_fits(named_idata: dict[str, object], data_hashes: dict[str, str]) -> dict:
    """PSIS-LOO on the cell log likelihood, elpd differences with SE, stacking weights and
    Pareto-k diagnostics explained in words."""
    import arviz as az

    if len(named_idata) < 2:
        raise DataError("compare needs at least two fit folders")
    variables = _loo_variables(named_idata)
    unit = "part" if any(v == PART_LOG_LIK or _unit(named_idata[k], v) == "part"
                         for k, v in variables.items()) else "cell"  # fmt: skip
    if len(set(data_hashes.values())) > 1:
        listing = ", ".join(f"{k}: {v[:12]}" for k, v in data_hashes.items())
        raise DataError(
            f"the fits were made on different data ({listing}); LOO compares models of the "
            "same data only"
        )
    with warnings.catch_warnings():
        # The Pareto-k warning is reported below, per model and in words.
        warnings.filterwarnings("ignore", message="Estimated shape parameter of Pareto")
        # arviz 0.23's compare calls DataFrame.sort_values(inplace=True), deprecated in pandas 3.
        warnings.filterwarnings("ignore", message="The inplace keyword in DataFrame.sort_values")
        loos = {name: az.loo(idata, pointwise=True, var_name=variables[name])
                for name, idata in named_idata.items()}  # fmt: skip
        table = az.compare(loos, ic="loo", method="stacking")
    rows = []
    for name, row in table.iterrows():
        k = np.asarray(loos[name].pareto_k)
        bad = int((k > 0.7).sum())
        very_bad = int((k > 1.0).sum())
        if bad == 0:
            words = "all Pareto k <= 0.7: the LOO estimate is reliable"
        else:
            words = (
                f"{bad} of {k.size} {unit}s have Pareto k > 0.7 ({very_bad} above 1): "
                f"leaving those {unit}s out changes the posterior a lot, so their LOO terms "
                f"are unreliable. Such {unit}s usually hold calls the model finds surprising; "
                "treat small elpd differences with caution or use K-fold cross-validation"
            )
        rows.append(
            {
                "model": name,
                "rank": int(row["rank"]),
                "elpd_loo": float(row["elpd_loo"]),
                "se": float(row["se"]),
                "elpd_diff": float(row["elpd_diff"]),
                "diff_se": float(row["dse"]),
                "p_loo": float(row["p_loo"]),
                "stacking_weight": float(row["weight"]),
                "pareto_k_above_0.7": bad,
                "pareto_k_above_1": very_bad,
                "pareto_k_note": words,
            }
        )
    best = rows[0]
    verdict = best["model"] + " predicts best"
    if len(rows) > 1:
        second = rows[1]
        if abs(second["elpd_diff"]) < 2 * max(second["diff_se"], 1e-9):
            verdict += (
                f", but its lead over {second['model']} ({abs(second['elpd_diff']):.1f} elpd) "
                "is within two standard errors: the data do not clearly prefer one model"
            )
        else:
            verdict += (
                f"; its lead over {second['model']} ({abs(second['elpd_diff']):.1f} elpd, "
                f"SE {second['diff_se']:.1f}) is more than two standard errors"
            )
    method = ("PSIS-LOO on the cell-level log likelihood (ArviZ), stacking weights"
              if unit == "cell" else
              "PSIS-LOO leaving out one part at a time (each part's calls with its own latent "
              "quantity integrated out, since a latent class fit has no other unit; ArviZ), "
              "stacking weights")  # fmt: skip
    return {
        "unit": unit,
        "method": method,
        "models": rows,
        "verdict": verdict,
    }
