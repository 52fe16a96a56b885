"""The calibration verdict's false-alarm rate: a calibrated model is flagged in at most
FALSE_ALARM of runs, however many quantities are checked; a miscalibrated one is found.

Runs are synthetic (no fitting): under calibration the normalised rank of the truth among
the posterior draws is uniform (Talts et al. 2018, simulation-based calibration), and an
equal-tailed 90% interval holds the truth exactly when its rank lies in [0.05, 0.95]."""

import numpy as np
from scipy import stats

from bayes_rr.simulation.calibrate import FALSE_ALARM, holm, verdict

QUANTITIES = 8
SIMS = 100


def _rows(rng, draw_rank) -> list[dict]:
    """The rows ``summarise`` makes of one run (its ECDF band aside, which the verdict does
    not read): rank uniformity by scipy.stats.kstest, 90% coverage."""
    ranks = draw_rank(rng, (QUANTITIES, SIMS))
    return [
        {"name": f"q{q}", "rank_uniformity_p": float(stats.kstest(r, "uniform").pvalue),
         "coverage_90": float(np.mean(np.abs(r - 0.5) <= 0.45)), "sims": SIMS}
        for q, r in enumerate(ranks)
    ]  # fmt: skip


def _flagged(draw_rank, runs: int, seed: int) -> float:
    rng = np.random.default_rng(seed)
    return float(np.mean([
        verdict(_rows(rng, draw_rank), SIMS).startswith("Miscalibration") for _ in range(runs)
    ]))  # fmt: skip


def test_a_calibrated_model_is_flagged_at_most_at_the_stated_rate():
    rate = _flagged(lambda rng, size: rng.random(size), runs=400, seed=1)
    # at a true rate of 0.05, binomial(400, 0.05) / 400 stays below 0.08 with probability
    # about 0.995; the old rule (each quantity at its own level) flagged 32% of such runs
    assert rate <= 0.08, rate


def test_a_miscalibrated_model_is_found():
    # posteriors too narrow: the truth falls in the tails too often (ranks U-shaped)
    rate = _flagged(lambda rng, size: rng.beta(0.6, 0.6, size), runs=50, seed=2)
    assert rate >= 0.9, rate


def test_holm_against_bonferroni_and_its_step_down():
    # statsmodels.stats.multitest.multipletests(method="holm") gives the same rejections
    from statsmodels.stats.multitest import multipletests

    rng = np.random.default_rng(3)
    for _ in range(50):
        p = list(rng.random(12) ** 3)
        assert holm(p, FALSE_ALARM) == list(multipletests(p, FALSE_ALARM, method="holm")[0])
