"""Parameter recovery on seeded simulated studies with known truth (slow)."""

import numpy as np
import pytest

from bayes_rr.inference.sampling import SamplerSettings
from bayes_rr.priors.spec import load_spec
from bayes_rr.results.estimands import add_shares, decompose_study, study_level
from bayes_rr.simulation.known_truth import simulate_beta_binomial, simulate_crossed_logit
from bayes_rr.study.classical import moment_estimates
from bayes_rr.workflow.fit import fit_study

pytestmark = pytest.mark.slow
KEYS = ("rr_variance", "repeatability_variance", "reproducibility_variance", "repeat_disagreement")


def _study_truth(p):
    per_part = add_shares(decompose_study(p[None]), "study")
    return {k: float(v[0]) for k, v in study_level(per_part, "study").items()}


def _covered(result, truth):
    rows = {r.key: r for r in result.estimand_rows if r.level == "study" and r.scope == "study"}
    return [rows[k].lower <= truth[k] <= rows[k].upper for k in KEYS]


@pytest.mark.parametrize(
    ("model", "simulate"),
    [
        ("crossed-logit", lambda seed: simulate_crossed_logit(
            40, 3, 3, mu=-0.5, sigma_part=2.0, sigma_appraiser=0.6, sigma_interaction=0.3,
            seed=seed)),
        ("beta-binomial", lambda seed: simulate_beta_binomial(
            40, 3, 3, mu=-0.5, sigma_part=2.0, rho=0.25, seed=seed)),
    ],
)  # fmt: skip
def test_study_level_intervals_hold_the_truth(model, simulate):
    spec = load_spec(model)
    covered = []
    for seed in (101, 102, 103):
        sim = simulate(seed)
        result = fit_study(sim.study, spec, SamplerSettings.from_spec(spec, seed=seed))
        assert result.diagnostics.ok, result.diagnostics.reasons
        covered += _covered(result, _study_truth(sim.p))
    # 12 nominal-95% intervals: at least 10 must hold the truth (P(fewer) < 2% if calibrated).
    assert sum(covered) >= 10, covered


def test_many_trials_posterior_means_approach_classical():
    sim = simulate_crossed_logit(
        15, 3, 80, mu=0.0, sigma_part=1.0, sigma_appraiser=0.5, sigma_interaction=0.3, seed=7
    )
    spec = load_spec("crossed-logit")
    # 80 trials a cell pin every effect down: a higher target acceptance avoids the
    # few divergences (10 in 8000 at 0.95) that the sharper posterior gives.
    settings = SamplerSettings.from_spec(spec, seed=7, target_accept=0.99)
    result = fit_study(sim.study, spec, settings)
    assert result.diagnostics.ok, result.diagnostics.reasons
    rows = {r.key: r for r in result.estimand_rows if r.level == "study" and r.scope == "study"}
    _, corrected = moment_estimates(sim.study)
    for key in ("rr_variance", "repeatability_variance", "reproducibility_variance"):
        classical = corrected.study[key]
        assert rows[key].mean == pytest.approx(classical, rel=0.15, abs=0.003), key
    truth = _study_truth(sim.p)
    assert rows["repeatability_variance"].mean == pytest.approx(
        truth["repeatability_variance"], rel=0.1
    )


def test_with_reference_the_reference_effect_is_recovered():
    sim = simulate_crossed_logit(
        50, 3, 3, mu=-2.5, sigma_part=1.0, sigma_appraiser=0.4, sigma_interaction=0.2,
        reference_effect=5.0, seed=9,
    )  # fmt: skip
    spec = load_spec("crossed-logit")
    result = fit_study(sim.study, spec, SamplerSettings.from_spec(spec, seed=9))
    assert result.diagnostics.ok, result.diagnostics.reasons
    row = next(r for r in result.parameter_rows if r.key == "reference_effect")
    assert row.lower <= 5.0 <= row.upper
    assert np.isfinite(row.mean)
