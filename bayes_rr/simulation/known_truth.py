"""Seeded simulators of pass/fail studies with known truth.

Shared by the tests (parameter recovery, predictive checks), the examples,
and later study planning and calibration. Every simulator takes a seed and
returns the study together with the true call probabilities.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
import pandas as pd
from scipy.special import expit

from bayes_rr.study.data import StudyData, build_study, study_from_cells


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
        _labels("P", n_parts),
        names,
        n,
        s,
        reference=reference,
        source=f"simulated (seed {seed})",
        rng=rng,
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
        _labels("P", n_parts),
        _labels("A", n_appraisers),
        n,
        s,
        source=f"simulated (seed {seed})",
        rng=rng,
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
    new = study_from_cells(study.parts, study.appraisers, n, s, source=study.source + " (flipped)",
                           rng=rng)  # fmt: skip
    return SimulatedStudy(new, sim.p, {**sim.params, "flipped_appraiser": appraiser})


def simulate_status_logit(
    n_parts: int = 40,
    n_appraisers: int = 3,
    n_trials: int = 3,
    *,
    mu_accept: float = -2.5,
    mu_reject: float = 2.5,
    sigma_part: float = 1.0,
    sigma_appraiser: tuple[float, float] = (0.5, 0.5),
    correlation: float = 0.0,
    sigma_interaction: float = 0.2,
    reject_share: float = 0.4,
    hide_reference: bool = False,
    missing_share: float = 0.0,
    appraiser_effect: np.ndarray | None = None,
    reference_errors: tuple[float, float] = (0.0, 0.0),
    seed: int = 0,
) -> SimulatedStudy:
    """Simulate logit p_ij = mu_r(i) + a_i + b_j,r(i) + c_ij with parts of two statuses.

    ``reference_errors`` (false reject, false accept) makes the study's reference
    fallible: each good part's reference says bad with the first probability, each bad
    part's says good with the second (``params["reference"]``; the rates stay against
    the true status).
    ``hide_reference`` leaves the status out of the study (a latent class study).
    ``appraiser_effect`` (appraisers x 2) fixes the appraisers' effects instead of
    drawing them. ``params["rates"]`` holds the true study-scope rates: each
    appraiser's mean reject probability over the good parts (false reject rate), mean
    accept probability over the bad parts (false accept rate), and their means over
    the appraisers (system).
    """
    rng = np.random.default_rng(seed)
    status = np.zeros(n_parts, dtype=int)
    status[rng.permutation(n_parts)[: max(1, round(reject_share * n_parts))]] = 1
    a = rng.normal(0.0, sigma_part, n_parts)
    if appraiser_effect is None:
        sd = np.asarray(sigma_appraiser, dtype=float)
        cov = np.array([[sd[0] ** 2, correlation * sd[0] * sd[1]],
                        [correlation * sd[0] * sd[1], sd[1] ** 2]])  # fmt: skip
        b = rng.multivariate_normal(np.zeros(2), cov, n_appraisers)
    else:
        b = np.asarray(appraiser_effect, dtype=float)
    c = rng.normal(0.0, sigma_interaction, (n_parts, n_appraisers))
    mu = np.array([mu_accept, mu_reject])
    eta = mu[status][:, None] + a[:, None] + b[:, status].T + c
    p = expit(eta)
    n = _trials(rng, n_parts, n_appraisers, n_trials, missing_share)
    s = rng.binomial(n, p)
    said = status
    if any(reference_errors):
        flip = rng.random(n_parts) < np.where(status == 1, reference_errors[1],
                                              reference_errors[0])  # fmt: skip
        said = np.where(flip, 1 - status, status)
    good, bad = status == 0, status == 1
    frr = p[good].mean(axis=0)
    far = (1 - p[bad]).mean(axis=0)
    rates = {
        "appraiser": {"false_reject_rate": frr, "false_accept_rate": far},
        "system": {"false_reject_rate": frr.mean(), "false_accept_rate": far.mean()},
    }
    study = study_from_cells(
        _labels("P", n_parts), _labels("A", n_appraisers), n, s,
        reference=None if hide_reference else said, source=f"simulated (seed {seed})", rng=rng,
    )  # fmt: skip
    params = {
        "mu": mu, "sigma_part": sigma_part, "sigma_appraiser": sigma_appraiser,
        "correlation": correlation, "sigma_interaction": sigma_interaction, "status": status,
        "part_effect": a, "appraiser_effect": b, "rates": rates, "seed": seed,
        "reference": said,
    }  # fmt: skip
    return SimulatedStudy(study, p, params)


def simulate_call_curve(
    n_parts: int = 40,
    n_appraisers: int = 3,
    n_trials: int = 3,
    *,
    upper_limit: float = 10.0,
    value_mean: float = 10.0,
    value_sd: float = 1.0,
    effective_limits: Sequence[float] = (9.8, 10.0, 10.3),
    widths: Sequence[float] = (0.15, 0.2, 0.3),
    link: str = "logistic",
    seed: int = 0,
) -> SimulatedStudy:
    """Simulate calls p_ij = F((x_i - t_j) / w_j) against an upper limit, with reference
    values x_i ~ N(value_mean, value_sd) and the given effective limits t_j and widths
    w_j (one per appraiser). The study carries the values and the limit."""
    from scipy.special import ndtr

    rng = np.random.default_rng(seed)
    t = np.asarray(effective_limits, dtype=float)[:n_appraisers]
    w = np.asarray(widths, dtype=float)[:n_appraisers]
    x = rng.normal(value_mean, value_sd, n_parts)
    arg = (x[:, None] - t[None, :]) / w[None, :]
    p = ndtr(arg) if link == "probit" else expit(arg)
    n = np.full((n_parts, n_appraisers), n_trials)
    s = rng.binomial(n, p)
    study = study_from_cells(_labels("P", n_parts), _labels("A", n_appraisers), n, s,
                             source=f"simulated (seed {seed})", rng=rng)  # fmt: skip
    values = pd.Series(x, index=list(study.parts), name="reference_value")
    values.index.name = "part"
    study = build_study(study.calls, source=study.source, reference_value=values,
                        limits=(None, float(upper_limit)))  # fmt: skip
    params = {"effective_limits": t, "widths": w, "x": x, "upper_limit": upper_limit,
              "link": link, "seed": seed}  # fmt: skip
    return SimulatedStudy(study, p, params)


def simulate_latent_trait(
    n_parts: int = 40,
    n_appraisers: int = 4,
    n_trials: int = 3,
    *,
    thresholds: Sequence[float] = (-0.3, 0.0, 0.2, 0.5),
    widths: Sequence[float] = (0.15, 0.25, 0.2, 0.3),
    link: str = "probit",
    seed: int = 0,
) -> SimulatedStudy:
    """Simulate calls on a continuous property nobody measured: positions z_i ~ N(0, 1),
    p_ij = F((z_i - t_j) / w_j) with the given thresholds t_j and curve scales w_j (one
    per appraiser); no reference. ``params`` holds z, t and w."""
    from scipy.special import ndtr

    rng = np.random.default_rng(seed)
    t = np.asarray(thresholds, dtype=float)[:n_appraisers]
    w = np.asarray(widths, dtype=float)[:n_appraisers]
    z = rng.standard_normal(n_parts)
    arg = (z[:, None] - t[None, :]) / w[None, :]
    p = ndtr(arg) if link == "probit" else expit(arg)
    n = np.full((n_parts, n_appraisers), n_trials)
    s = rng.binomial(n, p)
    study = study_from_cells(_labels("P", n_parts), _labels("A", n_appraisers), n, s,
                             source=f"simulated latent trait (seed {seed})", rng=rng)  # fmt: skip
    return SimulatedStudy(study, p, {"z": z, "thresholds": t, "widths": w, "link": link,
                                     "seed": seed})  # fmt: skip
