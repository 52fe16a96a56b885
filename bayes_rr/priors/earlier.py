"""An earlier study as prior: a fit folder's posterior of the hyper-parameters turned
into factors of a new spec's priors.

For each hyper-parameter theta with stated prior p0 and unconstrained value
u = g(theta) (identity, log or logit), the earlier posterior of u is approximated by

    p0(u) * N(u; mu, sigma)                                   (*)

with (mu, sigma) chosen so that the distribution function of (*) passes as close as
possible to the earlier draws' quantiles (least squares over FIT_LEVELS).
N(u; mu, sigma) stands for what the earlier data said (a Gaussian pseudo-likelihood);
the new spec multiplies the stated prior by it raised to the weight W (a power
prior, Ibrahim and Chen 2000): W = 1 carries the earlier study in full, W -> 0 gives
back the stated prior. Hyper-parameters are treated as
independent (their posterior correlation is not carried over), and a parameter with
a value per status gets a factor per status; other vector parameters (per side, per
part) share one factor fitted to all their elements' draws. How well (*) reproduces
the earlier draws is reported as the largest gap, in probability, between its
distribution function and the draws' quantiles at QUANTILE_LEVELS.

This module never imports PyMC.
"""

from __future__ import annotations

from dataclasses import asdict, dataclass
from pathlib import Path

import numpy as np
from scipy import optimize

from bayes_rr.core import tomlio
from bayes_rr.core.distributions import Prior
from bayes_rr.core.errors import SpecError
from bayes_rr.priors.hyperpriors import (
    draws_of,
    elements,
    from_unconstrained,
    hyper_parameters,
    log_density,
    log_jacobian,
    to_unconstrained,
)
from bayes_rr.priors.spec import EarlierStudy, ModelSpec, parse_spec

QUANTILE_LEVELS = (0.05, 0.25, 0.5, 0.75, 0.95)
FIT_LEVELS = (0.025, 0.05, 0.1, 0.2, 0.3, 0.4, 0.5, 0.6, 0.7, 0.8, 0.9, 0.95, 0.975)
GRID_POINTS = 4001
PRIOR_ENOUGH = 0.02
"""When the stated prior alone is within this quantile gap of the earlier draws, the
earlier study added nothing measurable about the parameter and no factor is written."""
FALLBACK_GAP = 0.1
"""A fitted factor whose quantile gap exceeds this, or a fit that fails (a small earlier
study's draws can be as wide as the prior, or pressed against a bound), is replaced by
a wider one: N(draws' mean, WIDEN x draws' sd). Prior x that factor is wider than the
earlier posterior, so the earlier study counts for less than in full, never for more;
model.toml and summary.json say so."""
WIDEN = 2.0
MARK = "# ---- earlier study as prior (written by bayes-rr; see [earlier_study]) ----"


@dataclass(frozen=True)
class Approximation:
    """How one hyper-parameter of the earlier fit was carried over."""

    parameter: str
    status: str | None
    scale: str
    draws_mean: float
    draws_sd: float
    factor_mu: float | None
    factor_sigma: float | None
    quantile_gap: float
    """Largest |F(q_p) - p| over QUANTILE_LEVELS, F the distribution function of (*)
    and q_p the earlier draws' quantiles: 0 is a perfect match."""
    widened: bool = False
    """The fitted factor failed or matched badly; the wider fallback is used."""

    @property
    def label(self) -> str:
        return self.parameter if self.status is None else f"{self.parameter}[{self.status}]"


def _grid_density(prior: Prior, scale: str, grid: np.ndarray) -> np.ndarray:
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        log_p = log_density(prior, from_unconstrained(grid, scale)) + log_jacobian(grid, scale)
    return np.where(np.isfinite(log_p), log_p, -np.inf)


def _moments(log_p: np.ndarray, grid: np.ndarray) -> tuple[float, float, np.ndarray]:
    weights = np.exp(log_p - log_p.max())
    weights /= weights.sum()
    mean = float(weights @ grid)
    sd = float(np.sqrt(max(weights @ (grid - mean) ** 2, 0.0)))
    return mean, sd, weights


def _gap(log_p: np.ndarray, grid: np.ndarray, quantiles: np.ndarray, levels) -> np.ndarray:
    _, _, weights = _moments(log_p, grid)
    cdf = np.cumsum(weights)
    return np.interp(quantiles, grid, cdf) - np.asarray(levels)


def approximate(
    draws: np.ndarray, prior: Prior, scale: str
) -> tuple[float | None, float | None, float, float, float, bool]:
    """(mu, sigma) of the factor for ``draws`` of one hyper-parameter (None, None when the
    stated prior alone already reproduces the draws), the draws' mean and sd on the
    unconstrained scale, the quantile gap of the approximation, and whether the wider
    fallback factor was used (see FALLBACK_GAP).

    (mu, sigma) minimise the squared gaps between the distribution function of
    prior x factor and the probability levels FIT_LEVELS at the draws' quantiles:
    closer in the tails than matching mean and sd, and always defined (a scale whose
    earlier posterior presses against its prior's upper tail has no Gaussian factor
    with the draws' mean and sd). The fit starts from three places (the normal-normal
    answer, the draws' moments, a wider factor), each kept inside the bounds.
    """
    u = to_unconstrained(np.asarray(draws, dtype=float).ravel(), scale)
    u = u[np.isfinite(u)]
    m, s = float(u.mean()), max(float(u.std()), 1e-6)
    grid = np.linspace(min(u.min(), m - 8 * s) - 2 * s, max(u.max(), m + 8 * s) + 2 * s,
                       GRID_POINTS)  # fmt: skip
    log_prior = _grid_density(prior, scale, grid)
    fit_q = np.quantile(u, FIT_LEVELS)
    report_q = np.quantile(u, QUANTILE_LEVELS)
    prior_gap = float(np.max(np.abs(_gap(log_prior, grid, report_q, QUANTILE_LEVELS))))
    if prior_gap <= PRIOR_ENOUGH:
        return None, None, m, s, prior_gap, False

    def residual(x: np.ndarray) -> np.ndarray:
        factor = -0.5 * ((grid - x[0]) / np.exp(x[1])) ** 2
        return _gap(log_prior + factor, grid, fit_q, FIT_LEVELS)

    def gap_of(mu: float, sigma: float) -> float:
        log_approx = log_prior - 0.5 * ((grid - mu) / sigma) ** 2
        return float(np.max(np.abs(_gap(log_approx, grid, report_q, QUANTILE_LEVELS))))

    best = _least_squares(residual, _starts(m, s, log_prior, grid), np.log(s))
    if best is not None:
        mu, sigma = float(best[0]), float(np.exp(best[1]))
        gap = gap_of(mu, sigma)
        if gap <= FALLBACK_GAP:
            return mu, sigma, m, s, gap, False
    return m, WIDEN * s, m, s, gap_of(m, WIDEN * s), True


def _starts(m: float, s: float, log_prior: np.ndarray, grid: np.ndarray) -> list[np.ndarray]:
    m0, s0, _ = _moments(log_prior, grid)
    starts = [np.array([m, np.log(s)]), np.array([m, np.log(WIDEN * s)])]
    precision = 1 / s**2 - 1 / max(s0, 1e-12) ** 2
    if precision > 0:
        starts.insert(0, np.array([(m / s**2 - m0 / s0**2) / precision,
                                   -0.5 * np.log(precision)]))  # fmt: skip
    return starts


def _least_squares(residual, starts: list[np.ndarray], log_s: float) -> np.ndarray | None:
    """The best of the fits from ``starts`` (each clipped into the bounds), or None when
    every one fails."""
    lower, upper = np.array([-50.0, log_s - 8]), np.array([50.0, max(8.0, log_s + 8)])
    best, best_cost = None, np.inf
    for start in starts:
        x0 = np.clip(np.nan_to_num(start, nan=0.0), lower + 1e-6, upper - 1e-6)
        try:
            fit = optimize.least_squares(residual, x0, bounds=(lower, upper))
        except (ValueError, FloatingPointError, np.linalg.LinAlgError):
            continue
        if np.all(np.isfinite(fit.x)) and fit.cost < best_cost:
            best, best_cost = fit.x, fit.cost
    return best


def check_compatible(earlier: ModelSpec, new: ModelSpec, folder: Path) -> None:
    """Refuse a new spec that does not share the earlier fit's family and terms."""
    if earlier.family != new.family:
        raise SpecError(
            f"{folder}: the earlier fit used the {earlier.name!r} model (family "
            f"{earlier.family!r}) and this fit the {new.name!r} model (family {new.family!r}); "
            "a prior from an earlier study needs the same family: leave out --model to fit "
            "the earlier fit's model, or leave out --prior-from"
        )
    old_terms, new_terms = {t.name for t in earlier.terms}, {t.name for t in new.terms}
    if old_terms != new_terms:
        raise SpecError(
            f"{folder}: the earlier fit's model has the terms {sorted(old_terms)} and this "
            f"model {sorted(new_terms)}; a prior from an earlier study needs the same terms"
        )


def base_text(spec: ModelSpec) -> str:
    """The spec's text without an earlier study it carried (that study's information is
    in the earlier fit's posterior, and so in the new factors)."""
    text = spec.text
    if MARK in text:
        text = text[: text.index(MARK)]
    return text.rstrip() + "\n"


def earlier_section(study: EarlierStudy, approximations: list[Approximation]) -> str:
    notes = [
        "The stated priors above are each multiplied by a normal factor N(mu, sigma) on",
        "the parameter's unconstrained scale (identity, log or logit), raised to the",
        "weight. Each factor was chosen so that prior x factor has the quantiles of the",
        "earlier fit's draws; 'quantile gap' is the largest difference in probability",
        "between that approximation and the draws at their 5/25/50/75/95% quantiles.",
    ]
    factors = []
    for a in approximations:
        if a.factor_mu is None:
            notes.append(
                f"{a.label}: the earlier draws add nothing measurable to the stated prior "
                f"(quantile gap {a.quantile_gap:.3f}); no factor"
            )
            continue
        notes.append(
            f"{a.label}: earlier draws mean {a.draws_mean:.4g}, sd {a.draws_sd:.4g} on the "
            f"{a.scale} scale; quantile gap {a.quantile_gap:.3f}"
        )
        if a.widened:
            notes.append(
                f"{a.label}: no normal factor matched the earlier draws within "
                f"{FALLBACK_GAP:g}; a wider one, N(draws' mean, {WIDEN:g} x draws' sd), is "
                "used instead, so the earlier study counts for less here than in full"
            )
        factors.append(
            {"parameter": a.parameter, "status": a.status, "scale": a.scale,
             "mu": float(a.factor_mu), "sigma": float(a.factor_sigma)}
        )  # fmt: skip
    table = {
        "earlier_study": {
            "weight": float(study.weight),
            "fit": study.fit,
            "data_sha256": study.data_sha256,
            **({"factor": factors} if factors else {}),
        }
    }
    lines = ["", MARK, *(tomlio.comment(n) for n in notes), "", tomlio.dumps(table)]
    return "\n".join(lines)


def prior_from_fit(
    loaded, weight: float, new_spec: ModelSpec | None = None
) -> tuple[ModelSpec, list[Approximation]]:
    """The spec for a new fit with the earlier fit ``loaded`` (an
    :class:`bayes_rr.io.fit_folder.LoadedFit`) as prior, and how each hyper-parameter was
    approximated.

    ``new_spec`` (default: the earlier fit's own spec) must share its family and terms.
    """
    if not 0 < weight <= 1:
        raise SpecError(
            f"--prior-weight {weight!r}: expected a number in (0, 1] (1: the earlier study in "
            "full; smaller: an older or less relevant study)"
        )
    folder = Path(loaded.folder)
    if not loaded.summary.get("use_results", False):
        raise SpecError(
            f"{folder}: the earlier fit did not pass the convergence gate, so its draws are "
            "not a posterior to carry over; fit the earlier study again with more draws"
        )
    earlier_spec = loaded.spec
    spec = new_spec or earlier_spec
    check_compatible(earlier_spec, spec, folder)
    posterior = loaded.idata.posterior
    approximations = []
    for hyper in hyper_parameters(spec):
        for status in elements(spec, hyper):
            draws = draws_of(posterior, hyper.variable, status)
            if draws is None:
                continue
            mu, sigma, mean, sd, gap, widened = approximate(draws, hyper.prior, hyper.scale)
            approximations.append(
                Approximation(
                    hyper.variable, status, hyper.scale, mean, sd, mu, sigma, gap, widened
                )
            )
    study = EarlierStudy(weight, (), str(folder), str(loaded.run.get("data_sha256", "")))
    text = base_text(spec) + earlier_section(study, approximations)
    return parse_spec(text, source=spec.source), approximations


def as_dict(study: EarlierStudy, approximations: list[Approximation]) -> dict:
    """The ``prior_from`` block of summary.json."""
    return {
        "fit": study.fit,
        "data_sha256": study.data_sha256,
        "weight": study.weight,
        "approximation": "stated prior x normal factor on the unconstrained scale, "
        "matched to the earlier draws' quantiles; parameters independent",
        "parameters": [
            {**asdict(a), "label": a.label, "carried": a.factor_mu is not None}
            for a in approximations
        ],
    }
