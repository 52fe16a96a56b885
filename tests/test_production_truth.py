"""Known truth: on seeded simulated studies the 95% intervals of the line's figures hold
the truth of the simulation (docs/statistics.md, "Production scope").

The truth is computed outside the toolkit's quadrature: by a brute-force simulation of
production parts and calls with the simulation's own parameters (status models), and by
``scipy.integrate.quad`` over the production distribution (call curve). Slow: each test
fits a model.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy import integrate, stats
from scipy.special import expit

from bayes_rr.inference.sampling import SamplerSettings
from bayes_rr.priors.spec import load_spec
from bayes_rr.simulation.known_truth import simulate_call_curve, simulate_status_logit
from bayes_rr.study.production import ProductionMix
from bayes_rr.workflow.fit import fit_study

pytestmark = pytest.mark.slow
BAD_SHARE = 0.05


def brute_force_line(params: dict, bad_share: float, parts: int, seed: int) -> dict:
    """One call a part by an appraiser chosen equally: escaped and good rejected per
    million, by simulating production parts of the simulation's model."""
    rng = np.random.default_rng(seed)
    b = np.asarray(params["appraiser_effect"])  # (J, 2)
    bad = (rng.random(parts) < bad_share).astype(int)
    who = rng.integers(0, b.shape[0], parts)
    eta = (params["mu"][bad] + b[who, bad] + rng.normal(0, params["sigma_part"], parts)
           + rng.normal(0, params["sigma_interaction"], parts))  # fmt: skip
    rejected = rng.random(parts) < expit(eta)
    return {
        "escaped_per_million": 1e6 * np.mean((bad == 1) & ~rejected),
        "rejected_good_per_million": 1e6 * np.mean((bad == 0) & rejected),
    }


def production_rows(result) -> dict:
    return {r.key: r for r in result.estimand_rows
            if r.scope == "production" and r.level == "system"}  # fmt: skip


@pytest.mark.parametrize("model", ["reference-logit", "latent-class"])
def test_line_figures_hold_the_simulated_truth(model):
    sim = simulate_status_logit(60, 3, 3, mu_accept=-2.5, mu_reject=2.0, sigma_part=0.8,
                                sigma_appraiser=(0.6, 0.6), sigma_interaction=0.2,
                                reject_share=0.4, hide_reference=model == "latent-class",
                                seed=5)  # fmt: skip
    # (the latent class model has no interaction term; the simulated one is small)
    spec = load_spec(model)
    result = fit_study(sim.study, spec, SamplerSettings.from_spec(spec, draws=1000, seed=4),
                       production=ProductionMix(bad_share=BAD_SHARE))  # fmt: skip
    assert result.diagnostics.ok
    truth = brute_force_line(sim.params, BAD_SHARE, 2_000_000, seed=9)
    rows = production_rows(result)
    for key, value in truth.items():
        assert rows[key].lower <= value <= rows[key].upper, (model, key, value, rows[key])


def test_call_curve_line_figures_hold_the_truth():
    limits, widths = (9.9, 10.0, 10.2), (0.1, 0.15, 0.2)
    sim = simulate_call_curve(50, 3, 3, effective_limits=limits, widths=widths, value_sd=0.5,
                              seed=3)  # fmt: skip
    spec = load_spec("call-curve")  # logistic, as the simulation
    mean, sd = 9.5, 0.3
    result = fit_study(sim.study, spec, SamplerSettings.from_spec(spec, draws=1000, seed=2),
                       production=ProductionMix(mean=mean, sd=sd))  # fmt: skip
    assert result.diagnostics.ok

    def reject(x):
        # the simulation's own curves, the link the simulation used
        return np.mean([expit((x - t) / w) for t, w in zip(limits, widths, strict=True)])

    density = stats.norm(mean, sd).pdf
    # scipy.integrate.quad over the production distribution, each side of the limit
    good = integrate.quad(lambda x: reject(x) * density(x), mean - 10 * sd, 10.0)[0]
    bad = integrate.quad(lambda x: (1 - reject(x)) * density(x), 10.0, mean + 10 * sd)[0]
    # the production distribution changes no study-scope row (issue: scopes named right)
    plain = fit_study(sim.study, spec, SamplerSettings.from_spec(spec, draws=1000, seed=2))
    study_rows = {(r.key, r.level, r.appraiser): r.mean for r in plain.estimand_rows
                  if r.scope == "study"}  # fmt: skip
    assert study_rows == {(r.key, r.level, r.appraiser): r.mean for r in result.estimand_rows
                          if r.scope == "study"}  # fmt: skip
    assert ("false_accept_rate", "system", None) in study_rows
    rows = production_rows(result)
    for key, value in (("rejected_good_per_million", 1e6 * good),
                       ("escaped_per_million", 1e6 * bad)):  # fmt: skip
        assert rows[key].lower <= value <= rows[key].upper, (key, value, rows[key])


def test_a_stratified_study_reweighted_to_production_recovers_its_figures():
    import dataclasses

    import pandas as pd

    sim = simulate_status_logit(60, 3, 3, mu_accept=-2.0, mu_reject=2.0, sigma_part=1.2,
                                sigma_appraiser=(0.6, 0.6), sigma_interaction=0.2,
                                reject_share=0.4, seed=8)  # fmt: skip
    # the parts were picked from two groups: near the limit (small |effect|) or clear
    edge = np.abs(sim.params["part_effect"]) < 0.6
    stratum = pd.Series(np.where(edge, "edge", "clear"), index=list(sim.study.parts))
    study = dataclasses.replace(sim.study, stratum=stratum)
    shares = {"clear": 0.9, "edge": 0.1}
    spec = load_spec("reference-logit")
    mix = ProductionMix(strata=tuple(shares.items()))
    result = fit_study(study, spec, SamplerSettings.from_spec(spec, draws=1000, seed=4),
                       production=mix)  # fmt: skip
    assert result.diagnostics.ok
    # truth: the same reweighting of the study's parts with their true call probabilities
    weight = np.array([shares[s] / (stratum == s).sum() for s in stratum])
    status = sim.params["status"]
    one_call = sim.p.mean(axis=1)  # an appraiser chosen equally
    truth = {
        "escaped_per_million": 1e6 * (weight * (status == 1) * (1 - one_call)).sum(),
        "rejected_good_per_million": 1e6 * (weight * (status == 0) * one_call).sum(),
    }
    rows = production_rows(result)
    for key, value in truth.items():
        assert rows[key].lower <= value <= rows[key].upper, (key, value, rows[key])
