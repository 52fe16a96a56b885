"""The quantities of docs/statistics.md, computed from posterior draws.

A numpy core (functions of arrays with draws on the leading axes) under a thin
xarray layer that labels draws with ``chain``, ``draw``, ``part`` and
``appraiser``. Nothing here samples a model: the only randomness is the
conjugate or prior draw of latent call probabilities of cells, from a seeded
generator.

Keys and scopes (see docs/statistics.md):

* per part (level ``part``), scopes ``study`` (the study's appraisers) and
  ``population`` (a new appraiser from the same population);
* study level (level ``study``): averages over the study's parts, their
  square roots, shares as ratios of averages;
* per appraiser (level ``appraiser``, scope ``study``): the appraiser's mean
  call rate over the study's parts (crossed logit only).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import xarray as xr

from bayes_rr.core import DEFAULT_PROB
from bayes_rr.families import family_of
from bayes_rr.families.base import LatentDraws
from bayes_rr.priors.spec import ModelSpec
from bayes_rr.study.data import StudyData

SEP = "__"
SCOPES = ("study", "population")
PER_PART_KEYS = (
    "call_rate",
    "rr_variance",
    "repeatability_variance",
    "reproducibility_variance",
    "reproducibility_share",
    "repeatability_share",
    "repeat_disagreement",
)
POPULATION_ONLY_KEYS = ("cross_disagreement", "appraiser_bias_variance", "interaction_variance")
STUDY_KEYS = (
    "call_rate",
    "rr_variance",
    "repeatability_variance",
    "reproducibility_variance",
    "rr_sd",
    "repeatability_sd",
    "reproducibility_sd",
    "reproducibility_share",
    "repeatability_share",
    "repeat_disagreement",
)


def variable_name(scope: str, level: str, key: str) -> str:
    return SEP.join((scope, level, key))


def parse_variable_name(name: str) -> tuple[str, str, str]:
    scope, level, key = name.split(SEP)
    return scope, level, key


# ---------------------------------------------------------------------------
# numpy core


def decompose_study(p: np.ndarray, q: np.ndarray | None = None) -> dict[str, np.ndarray]:
    """Study-scope per-part decomposition from call probabilities ``p`` (..., part, appraiser).

    pi = mean_j p, T = pi(1 - pi), V = mean_j (p - pi)^2, R = mean_j p(1 - p);
    T = R + V exactly. ``q`` is 1 - p computed without cancellation (see
    :class:`LatentDraws`): with it, T and R stay positive for p within 1e-16 of 1,
    and V is computed from whichever of p and q is small.
    """
    q = 1 - p if q is None else q
    pi = p.mean(axis=-1)
    qbar = q.mean(axis=-1)
    spread_p = ((p - pi[..., None]) ** 2).mean(axis=-1)
    spread_q = ((q - qbar[..., None]) ** 2).mean(axis=-1)
    return {
        "call_rate": pi,
        "rr_variance": pi * qbar,
        "repeatability_variance": (p * q).mean(axis=-1),
        "reproducibility_variance": np.where(pi <= 0.5, spread_p, spread_q),
    }


def add_shares(per_part: dict[str, np.ndarray], scope: str) -> dict[str, np.ndarray]:
    """Shares and disagreement probabilities of a per-part decomposition.

    Shares are missing (NaN) where T = 0, never 0/0 silently.
    """
    out = dict(per_part)
    t = per_part["rr_variance"]
    with np.errstate(divide="ignore", invalid="ignore"):
        out["reproducibility_share"] = np.where(
            t > 0, per_part["reproducibility_variance"] / t, np.nan
        )
        out["repeatability_share"] = np.where(t > 0, per_part["repeatability_variance"] / t, np.nan)
    out["repeat_disagreement"] = 2 * per_part["repeatability_variance"]
    if scope == "population":
        out["cross_disagreement"] = 2 * t
    return out


def study_level(per_part: dict[str, np.ndarray], scope: str) -> dict[str, np.ndarray]:
    """Averages over the study's parts (last axis); shares as ratios of averages."""
    mean = {k: v.mean(axis=-1) for k, v in per_part.items() if not k.endswith("_share")}
    t, r, v = mean["rr_variance"], mean["repeatability_variance"], mean["reproducibility_variance"]
    # a study whose every call is certain (a simulated truth can be) has no variance to
    # share out: its shares are NaN, which summaries and calibration skip
    with np.errstate(invalid="ignore", divide="ignore"):
        shares = {"reproducibility_share": v / t, "repeatability_share": r / t}
    out = {
        "call_rate": mean["call_rate"],
        "rr_variance": t,
        "repeatability_variance": r,
        "reproducibility_variance": v,
        "rr_sd": np.sqrt(t),
        "repeatability_sd": np.sqrt(r),
        "reproducibility_sd": np.sqrt(np.clip(v, 0, None)),
        **shares,
        "repeat_disagreement": 2 * r,
    }
    if scope == "population":
        out["cross_disagreement"] = 2 * t
        for key in ("appraiser_bias_variance", "interaction_variance"):
            if key in mean:
                out[key] = mean[key]
    return out


# ---------------------------------------------------------------------------
# from a posterior to labelled estimands


def latent_draws(
    posterior: xr.Dataset, spec: ModelSpec, study: StudyData, seed: int = 0
) -> LatentDraws:
    """Latent call probabilities, population decomposition and cell log likelihood."""
    rng = np.random.default_rng(seed)
    return family_of(spec).latent(posterior, spec, study, rng)


def log_likelihood_dataset(
    posterior: xr.Dataset, latent: LatentDraws, study: StudyData
) -> xr.Dataset:
    """The cell log likelihood as an ArviZ ``log_likelihood`` group (variable ``s``)."""
    chains, draws = posterior.sizes["chain"], posterior.sizes["draw"]
    cells = study.cells
    if latent.log_lik_dim == "part":
        labels = list(study.parts)
    else:
        labels = [f"{p} | {a}" for p, a in zip(cells["part"], cells["appraiser"], strict=True)]
    values = latent.cell_log_lik.reshape((chains, draws, -1))
    dim = latent.log_lik_dim
    data = {"s": (("chain", "draw", dim), values)}
    coords = {"chain": posterior["chain"].to_numpy(), "draw": posterior["draw"].to_numpy(),
              dim: labels}  # fmt: skip
    if latent.part_log_lik is not None and dim != "part":
        # a second unit, for comparing with a model whose likelihood leaves out a part
        data[PART_LOG_LIK] = (("chain", "draw", "part"),
                              latent.part_log_lik.reshape((chains, draws, -1)))  # fmt: skip
        coords["part"] = list(study.parts)
    return xr.Dataset(data, coords=coords)


PART_LOG_LIK = "s_part"
"""The log likelihood variable with one term per part, beside the cell one."""


def compute_estimands(
    posterior: xr.Dataset,
    spec: ModelSpec,
    study: StudyData,
    seed: int = 0,
    latent: LatentDraws | None = None,
) -> xr.Dataset:
    """Every estimand of the model as draws, labelled ``chain``, ``draw`` and ``part`` or
    ``appraiser``; variable names are ``scope__level__key``."""
    chains, draws = posterior.sizes["chain"], posterior.sizes["draw"]
    latent = latent or latent_draws(posterior, spec, study, seed)
    per_scope = {}
    if latent.p_study is not None:
        per_scope["study"] = add_shares(decompose_study(latent.p_study, latent.q_study), "study")
    if latent.population:
        per_scope["population"] = add_shares(latent.population, "population")
    coords = {
        "chain": posterior["chain"].to_numpy(),
        "draw": posterior["draw"].to_numpy(),
        "part": list(study.parts),
        "appraiser": list(study.appraisers),
    }
    if "side" in posterior.coords:
        coords["side"] = list(posterior["side"].to_numpy())
    variables: dict[str, xr.DataArray] = {}

    def put(scope: str, level: str, key: str, values: np.ndarray, dim) -> None:
        extra_dims = [] if dim is None else [dim] if isinstance(dim, str) else list(dim)
        dims = ["chain", "draw", *extra_dims]
        shaped = values.reshape((chains, draws, *values.shape[1:]))
        variables[variable_name(scope, level, key)] = xr.DataArray(
            shaped,
            dims=dims,
            coords={d: coords[d] for d in dims},
            attrs={"key": key, "scope": scope, "level": level},
        )

    for scope, per_part in per_scope.items():
        for key, values in per_part.items():
            put(scope, "part", key, values, "part")
        for key, values in study_level(per_part, scope).items():
            put(scope, "study", key, values, None)
    if family_of(spec).appraiser_rows:
        p = latent.p_study
        q = 1 - p if latent.q_study is None else latent.q_study
        put("study", "appraiser", "call_rate", p.mean(axis=1), "appraiser")
        # each appraiser's own inconsistency: mean over the parts of p(1 - p)
        put("study", "appraiser", "repeatability_variance", (p * q).mean(axis=1),
            "appraiser")  # fmt: skip
    for (scope, level, key), (values, dim) in latent.extra.items():
        put(scope, level, key, values, dim)
    return xr.Dataset(variables, attrs={"seed": seed, "family": spec.family})


# ---------------------------------------------------------------------------
# summaries


@dataclass(frozen=True)
class SummaryRow:
    """Posterior summary of one estimand (a row of summary.json / summary.csv)."""

    key: str
    scope: str | None
    level: str
    part: str | None
    appraiser: str | None
    mean: float
    median: float
    sd: float
    lower: float
    upper: float
    r_hat: float
    ess_bulk: float
    ess_tail: float
    note: str | None = None


def _defined_summary(draws: np.ndarray, prob: float, interval: str) -> dict[str, float]:
    """Mean, median, sd and interval of the defined (non-NaN) draws of one quantity."""
    from bayes_rr.core import diagnostics

    defined = draws[np.isfinite(draws)]
    if interval == "hdi":
        lower, upper = diagnostics.hdi(defined.reshape(1, -1, 1), prob)
        lower, upper = float(lower[0]), float(upper[0])
    else:
        lower, upper = (float(v) for v in np.quantile(defined, [(1 - prob) / 2, (1 + prob) / 2]))
    return {
        "mean": float(defined.mean()),
        "median": float(np.median(defined)),
        "sd": float(defined.std(ddof=1)) if defined.size > 1 else math.nan,
        "lower": lower,
        "upper": upper,
    }


def summarize(
    ds: xr.Dataset, prob: float = DEFAULT_PROB, interval: str = "eti", *, level: str | None = None
) -> list[SummaryRow]:
    """Mean, median, sd, interval (``hdi`` or ``eti``), r_hat, ess_bulk and ess_tail of every
    variable of ``ds`` (estimands, or posterior parameters with ``level="parameter"``).

    All elements are diagnosed at once (``bayes_rr.core.diagnostics``, checked against ArviZ).
    """
    from bayes_rr.core import diagnostics

    if interval not in ("hdi", "eti"):
        raise ValueError(f"interval {interval!r}: expected 'hdi' or 'eti'")
    columns, labels = [], []
    for name, da in ds.data_vars.items():
        da = da.transpose("chain", "draw", ...)
        extra = list(da.dims[2:])
        values = da.to_numpy().reshape(da.sizes["chain"], da.sizes["draw"], -1)
        columns.append(values)
        # coordinate labels read once per variable (indexing xarray per row is slow)
        names = [[str(v) for v in da[d].to_numpy()] for d in extra]
        for idx in np.ndindex(*[da.sizes[d] for d in extra]) if extra else [()]:
            labels.append(
                (name, {d: names[j][i] for j, (d, i) in enumerate(zip(extra, idx, strict=True))})
            )
    if not columns:
        return []
    x = np.concatenate(columns, axis=2)
    # A share is undefined in draws where T = 0 (p within 1e-308 of 0 or 1 for every
    # appraiser): it is summarised over the other draws, with a note saying in how many
    # it was undefined, and stays in the convergence gate, its diagnostics computed
    # with the undefined draws set to the median of the others.
    missing = np.isnan(x)
    undefined = missing.mean(axis=(0, 1))
    raw = x
    if missing.any():
        partial = undefined < 1
        fill = np.zeros(x.shape[2])
        fill[partial] = np.nanmedian(x[:, :, partial].reshape(-1, int(partial.sum())), axis=0)
        x = np.where(missing, fill, x)
    flat = x.reshape(-1, x.shape[2])
    eti_probs = [(1 - prob) / 2, (1 + prob) / 2]
    described = diagnostics.describe_draws(x, eti_probs if interval == "eti" else ())
    if interval == "hdi":
        lower, upper = diagnostics.hdi(x, prob)
    else:
        lower, upper = described["quantiles"]
    stats_ = {
        "mean": flat.mean(axis=0),
        "median": described["median"],
        "sd": flat.std(axis=0, ddof=1),
        "lower": lower,
        "upper": upper,
        "r_hat": described["r_hat"],
        "ess_bulk": described["ess_bulk"],
        "ess_tail": described["ess_tail"],
    }
    rows = []
    for k, (name, where) in enumerate(labels):
        if level == "parameter":
            scope, lev, key = None, "parameter", name
        else:
            scope, lev, key = parse_variable_name(name)
        # Dims other than part and appraiser (a parameter's status) name the row's key.
        other = [f"{d}={v}" for d, v in where.items() if d not in ("part", "appraiser")]
        if other:
            key = f"{key}[{','.join(other)}]"
        values = {s: float(v[k]) for s, v in stats_.items()}
        note = None
        if undefined[k] == 1:
            values = dict.fromkeys(stats_, math.nan)
            note = "undefined in every draw (T = 0)"
        elif undefined[k] > 0:
            values.update(_defined_summary(raw[:, :, k], prob, interval))
            note = (
                f"undefined in {undefined[k]:.2%} of draws (T = 0); summarised over the other draws"
            )
        rows.append(
            SummaryRow(
                key, scope, lev, where.get("part"), where.get("appraiser"), **values, note=note
            )
        )
    return rows
