"""Seeded simulators of pass/fail studies with known truth.

Shared by the tests (parameter recovery, predictive checks), the examples,
and later study planning and calibration. Every simulator takes a seed and
returns the study together with the true call probabilities.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
from scipy.special import expit

from bayes_rr.data import StudyData, study_from_cells


@dataclass(frozen=True)
class SimulatedStudy:
    """A simulated study and the truth it was drawn from.

    Attributes
    ----------
    study
        The study as the toolkit reads it.
    p
        True call probabilities, parts x appraisers.
    params
        The generating parameters, by name.
    """

    study: StudyData
    p: np.ndarray
    params: dict


def _labels(prefix: str, count: int) -> list[str]:
    width = len(str(count))
    return [f"{prefix}{k + 1:0{width}d}" for k in range(count)]


def _trials(
    rng: np.random.Generator, n_parts: int, n_appraisers: int, n_trials: int, missing_share: float
) -> np.ndarray:
    n = np.full((n_parts, n_appraisers), n_trials, dtype=int)
    if missing_share > 0:
        drop = rng.random(n.shape) < missing_share
        n[drop] = rng.integers(0, n_trials, size=int(drop.sum()))
    return n


def simulate_crossed_logit(
    n_parts: int = 40,
    n_appraisers: int = 3,
    n_trials: int = 3,
    *,
    mu: float = 0.0,
    sigma_part: float = 2.0,
    sigma_appraiser: float = 0.5,
    sigma_interaction: float = 0.3,
    reference_effect: float | None = None,
    reference_share: float = 0.4,
    missing_share: float = 0.0,
    appraiser_names: Sequence[str] | None = None,
    seed: int = 0,
) -> SimulatedStudy:
    """Simulate logit p_ij = mu + a_i + b_j + c_ij (+ reference_effect r_i).

    ``missing_share`` of the cells get fewer trials (possibly none), which
    makes the design unbalanced.
    """
    rng = np.random.default_rng(seed)
    a = rng.normal(0.0, sigma_part, n_parts)
    b = rng.normal(0.0, sigma_appraiser, n_appraisers)
    c = rng.normal(0.0, sigma_interaction, (n_parts, n_appraisers))
    reference = None
    eta = mu + a[:, None] + b[None, :] + c
    if reference_effect is not None:
        reference = (rng.random(n_parts) < reference_share).astype(int)
        eta = eta + reference_effect * reference[:, None]
    p = expit(eta)
    n = _trials(rng, n_parts, n_appraisers, n_trials, missing_share)
    s = rng.binomial(n, p)
    names = list(appraiser_names) if appraiser_names else _labels("A", n_appraisers)
    study = study_from_cells(
        _labels("P", n_parts), names, n, s, reference=reference, source=f"simulated (seed {seed})"
    )
    params = {
        "mu": mu,
        "sigma_part": sigma_part,
        "sigma_appraiser": sigma_appraiser,
        "sigma_interaction": sigma_interaction,
        "reference_effect": reference_effect,
        "part_effect": a,
        "appraiser_effect": b,
        "interaction_effect": c,
        "seed": seed,
    }
    return SimulatedStudy(study, p, params)


def simulate_beta_binomial(
    n_parts: int = 40,
    n_appraisers: int = 3,
    n_trials: int = 3,
    *,
    mu: float = 0.0,
    sigma_part: float = 2.0,
    rho: float = 0.2,
    missing_share: float = 0.0,
    seed: int = 0,
) -> SimulatedStudy:
    """Simulate p_ij ~ Beta(pi_i phi, (1 - pi_i) phi), logit pi_i ~ N(mu, sigma_part),
    phi = 1/rho - 1 (appraisers exchangeable within a part)."""
    if not 0 < rho < 1:
        raise ValueError(f"rho {rho!r} must be strictly between 0 and 1")
    rng = np.random.default_rng(seed)
    pi = expit(rng.normal(mu, sigma_part, n_parts))
    phi = 1 / rho - 1
    p = rng.beta((pi * phi)[:, None], ((1 - pi) * phi)[:, None], (n_parts, n_appraisers))
    n = _trials(rng, n_parts, n_appraisers, n_trials, missing_share)
    s = rng.binomial(n, p)
    study = study_from_cells(
        _labels("P", n_parts), _labels("A", n_appraisers), n, s, source=f"simulated (seed {seed})"
    )
    return SimulatedStudy(
        study, p, {"mu": mu, "sigma_part": sigma_part, "rho": rho, "pi": pi, "seed": seed}
    )


def flip_borderline(sim: SimulatedStudy, appraiser: int = 0, seed: int = 0) -> SimulatedStudy:
    """Make one appraiser flip every call on borderline parts (true rate within 0.2-0.8),
    a feature no exchangeable model has: used to test that the checks notice it."""
    rng = np.random.default_rng(seed)
    study = sim.study
    border = (sim.p.mean(axis=1) > 0.2) & (sim.p.mean(axis=1) < 0.8)
    n = np.zeros((len(study.parts), len(study.appraisers)), dtype=int)
    s = np.zeros_like(n)
    cells = study.cells
    n[cells["part_index"], cells["appraiser_index"]] = cells["n"]
    s[cells["part_index"], cells["appraiser_index"]] = cells["s"]
    # alternate: that appraiser's calls on borderline parts are half reject, half accept
    s[border, appraiser] = np.where(rng.random(int(border.sum())) < 0.5, n[border, appraiser], 0)
    new = study_from_cells(study.parts, study.appraisers, n, s, source=study.source + " (flipped)")
    return SimulatedStudy(new, sim.p, {**sim.params, "flipped_appraiser": appraiser})
