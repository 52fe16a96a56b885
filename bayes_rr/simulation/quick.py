"""A lean fit of one simulated study: sampling with a reused compiled model, the
estimands, and only the numbers a plan or a calibration needs.

A simulated fit must not be judged by the report's convergence gate (ESS 400 on
every result): it needs the width of an interval and the rank of a truth, which a
shorter run gives. Its own gate (:data:`SIM_R_HAT_MAX`, :data:`SIM_ESS_MIN`) is
checked on the quantities it reads, and every fit that misses it is counted.
"""

from __future__ import annotations

import time
from dataclasses import dataclass

import numpy as np
import xarray as xr

from bayes_rr.inference.sampling import (
    SamplerSettings,
    design_key,
    sample_study,
)
from bayes_rr.priors.spec import ModelSpec
from bayes_rr.results.estimands import compute_estimands, latent_draws
from bayes_rr.study.data import StudyData

SIM_DRAWS, SIM_TUNE, SIM_CHAINS = 500, 500, 2
SIM_R_HAT_MAX = 1.05
SIM_ESS_MIN = 100
"""Enough for an interval's width and a rank among thinned draws (not for reporting a
result, which the report's gate guards)."""

PLAN_KEYS = (
    "study__study__repeatability_variance",
    "study__study__reproducibility_variance",
    "population__study__reproducibility_variance",
    "study__study__reproducibility_share",
    "study__study__repeat_disagreement",
    "study__system__false_reject_rate",
    "study__system__false_accept_rate",
    "production__system__escaped_per_million",
    "production__system__rejected_good_per_million",
)
"""Results whose interval width a plan reports (those the model has; the production
figures with a production file)."""
CALIBRATED_KEYS = (
    "study__study__call_rate",
    "study__study__repeatability_variance",
    "study__study__reproducibility_variance",
    "population__study__reproducibility_variance",
    "study__system__false_reject_rate",
    "study__system__false_accept_rate",
)
"""Results whose ranks a calibration checks, besides the hyper-parameters."""
SCALAR_SKIP = ("appraiser_correlation_unit",)
"""Hyper-parameters that are another's transform (checked through that one)."""


def simulation_settings(spec: ModelSpec, seed: int, **overrides) -> SamplerSettings:
    """Short runs on one core: many fits run side by side, one per worker."""
    base = {"draws": SIM_DRAWS, "tune": SIM_TUNE, "chains": SIM_CHAINS, "cores": 1}
    base.update({k: v for k, v in overrides.items() if v is not None})
    return SamplerSettings.from_spec(spec, seed=seed, **base)


@dataclass(frozen=True)
class QuickFit:
    """Estimand and hyper-parameter draws of one fit, and how it converged."""

    draws: dict[str, np.ndarray]
    """(chain, draw) arrays by name."""
    max_r_hat: float
    min_ess: float
    seconds: float
    compiled_reused: bool

    @property
    def ok(self) -> bool:
        return self.max_r_hat <= SIM_R_HAT_MAX and self.min_ess >= SIM_ESS_MIN


def scalar_draws(dataset: xr.Dataset, names) -> dict[str, np.ndarray]:
    """(chain, draw) arrays of ``names``, a vector split into one name per element."""
    out = {}
    for name in names:
        if name not in dataset:
            continue
        array = dataset[name]
        extra = [d for d in array.dims if d not in ("chain", "draw")]
        if not extra:
            out[name] = array.to_numpy()
            continue
        if len(extra) > 1:
            continue
        for label in array[extra[0]].to_numpy():
            out[f"{name}[{label}]"] = array.sel({extra[0]: label}).to_numpy()
    return out


def hyper_variables(posterior: xr.Dataset) -> list[str]:
    """Hyper-parameters of a fit: variables without a part, appraiser or cell dim."""
    return [name for name in posterior.data_vars
            if not set(posterior[name].dims) & {"part", "appraiser", "cell"}
            and name not in SCALAR_SKIP and not name.endswith("__")]  # fmt: skip


def quick_fit(
    study: StudyData, spec: ModelSpec, settings: SamplerSettings, keys: tuple[str, ...],
    production=None,
) -> tuple[QuickFit, xr.Dataset]:  # fmt: skip
    """Fit ``study``; returns the draws of ``keys`` and the hyper-parameters, and the
    estimands (with ``production``, a ProductionMix, the production-scope ones too)."""
    import arviz as az

    start = time.perf_counter()
    key = design_key(spec, study)
    sample = sample_study(spec, study, settings, key=key)
    # nutpie's compiled model was given (not compiled or loaded) only when reused
    reused = settings.sampler == "nutpie" and sample.run.compile_source is None
    raw = sample.run.idata.posterior
    posterior = raw[[v for v in raw.data_vars if not v.endswith("__")]]
    latent = latent_draws(posterior, spec, study, seed=settings.seed)
    if production is not None:
        from dataclasses import replace

        from bayes_rr.results.production import line_result

        line = line_result(posterior, spec, study, production, settings.seed)
        latent = replace(latent, extra={**latent.extra, **line.variables})
    estimands = compute_estimands(posterior, spec, study, settings.seed, latent=latent)
    draws = scalar_draws(estimands, keys)
    draws.update(scalar_draws(posterior, hyper_variables(posterior)))
    checked = xr.Dataset({name: (("chain", "draw"), d) for name, d in draws.items()
                          if np.isfinite(d).all()})  # fmt: skip
    r_hat = az.rhat(checked)
    ess = az.ess(checked, method="bulk")
    max_r_hat = float(max((float(r_hat[v]) for v in checked.data_vars), default=np.nan))
    min_ess = float(min((float(ess[v]) for v in checked.data_vars), default=np.nan))
    return QuickFit(draws, max_r_hat, min_ess, time.perf_counter() - start, reused), estimands


def interval(draws: np.ndarray, prob: float) -> tuple[float, float]:
    """Equal-tailed interval of the defined draws (NaN, NaN when none is defined)."""
    values = draws[np.isfinite(draws)]
    if values.size == 0:
        return float("nan"), float("nan")
    low, high = np.quantile(values, [(1 - prob) / 2, (1 + prob) / 2])
    return float(low), float(high)


def fractional_rank(draws: np.ndarray, truth: float, min_ess: float,
                    rng: np.random.Generator) -> float:  # fmt: skip
    """The truth's rank among near-independent draws, as a share in (0, 1).

    The chains are thinned to about ``min_ess`` draws (Talts et al. 2018, section 5:
    autocorrelated draws make ranks pile up at the ends); a rank r among L draws
    becomes (r + U) / (L + 1) with U uniform, which is uniform on (0, 1) when the fit
    is calibrated, whatever L is.
    """
    flat = np.asarray(draws, dtype=float).reshape(draws.shape[0], -1)
    per_chain = flat.shape[1]
    keep = max(1, int(min(min_ess, flat.size)) // flat.shape[0])
    step = max(1, per_chain // keep)
    thinned = flat[:, ::step].ravel()
    thinned = thinned[np.isfinite(thinned)]
    below = np.sum(thinned < truth)
    ties = np.sum(thinned == truth)
    rank = below + rng.integers(0, ties + 1)
    return float((rank + rng.random()) / (thinned.size + 1))
