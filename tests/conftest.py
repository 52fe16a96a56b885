"""Shared fixtures. Matplotlib draws off-screen; sampled fits are cached per session."""

import atexit
import os
import shutil
import tempfile

os.environ.setdefault("MPLBACKEND", "Agg")
# Compiled models go to a cache of this test run (child processes inherit it), never to
# the user's own cache folder.
if "BAYES_RR_CACHE_DIR" not in os.environ:
    _CACHE = tempfile.mkdtemp(prefix="bayes-rr-test-cache-")
    os.environ["BAYES_RR_CACHE_DIR"] = _CACHE
    atexit.register(shutil.rmtree, _CACHE, ignore_errors=True)

from pathlib import Path

import pytest

from bayes_rr.study.describe import demo_path

REPO = Path(__file__).resolve().parent.parent


@pytest.fixture(scope="session")
def demo_csv() -> Path:
    return demo_path()


@pytest.fixture(scope="session")
def small_sim():
    """A small unbalanced simulated study with a reference status."""
    from bayes_rr.simulation.known_truth import simulate_crossed_logit

    return simulate_crossed_logit(
        24, 3, 2, mu=-1.0, sigma_part=2.0, sigma_appraiser=0.6, sigma_interaction=0.3,
        reference_effect=3.0, missing_share=0.1, seed=42,
    )  # fmt: skip


FAST = {"draws": 1000, "tune": 1000, "chains": 4, "seed": 3}


@pytest.fixture(scope="session")
def fits(small_sim):
    """One small fit per bundled model, shared by the tests (fit once per session)."""
    from bayes_rr.inference.sampling import SamplerSettings
    from bayes_rr.priors.spec import load_spec
    from bayes_rr.workflow.fit import fit_study

    out = {}
    for name in ("crossed-logit", "beta-binomial"):
        spec = load_spec(name)
        out[name] = fit_study(small_sim.study, spec, SamplerSettings.from_spec(spec, **FAST))
    return out


@pytest.fixture(scope="session")
def fit_dirs(fits, tmp_path_factory):
    from bayes_rr.io.fit_folder import write_fit

    root = tmp_path_factory.mktemp("fits")
    return {name: write_fit(result, root / name) for name, result in fits.items()}


@pytest.fixture(scope="session")
def strong_appraisers():
    """Appraisers who differ a lot (a feature the beta-binomial model lacks), fitted by both
    bundled models."""
    from bayes_rr.inference.sampling import SamplerSettings
    from bayes_rr.priors.spec import load_spec
    from bayes_rr.simulation.known_truth import simulate_crossed_logit
    from bayes_rr.workflow.fit import fit_study

    sim = simulate_crossed_logit(
        40, 4, 3, mu=0.0, sigma_part=1.5, sigma_appraiser=1.5, sigma_interaction=0.2, seed=8
    )
    out = {}
    for name in ("crossed-logit", "beta-binomial"):
        spec = load_spec(name)
        out[name] = fit_study(sim.study, spec, SamplerSettings.from_spec(spec, **FAST))
    return sim, out
