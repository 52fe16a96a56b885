"""Numpy prior draws against PyMC's own forward draws of each family's model.

Reference: ``pymc.sample_prior_predictive`` of the model that ``families.build_model``
builds for the same spec and study. Each variable's marginals are compared with
``scipy.stats.ks_2samp`` (seeded draws, so the outcome is fixed).
"""

import subprocess
import sys
import warnings

import numpy as np
import pytest
from scipy import stats

from bayes_rr.checks.predictive import prior_predictive
from bayes_rr.priors.prior_draws import draw_prior
from bayes_rr.priors.spec import load_spec
from bayes_rr.simulation.known_truth import (
    simulate_call_curve,
    simulate_latent_trait,
    simulate_status_logit,
)
from bayes_rr.study.data import build_study

DRAWS = 3000
KS_FLOOR = 1e-3


def _studies(small_sim):
    status = simulate_status_logit(16, 3, 2, seed=2).study
    curve = simulate_call_curve(12, 3, 2, seed=3).study
    two_sided = build_study(curve.calls, source="two-sided", limits=(8.5, 10.0),
                            reference_value=curve.reference_value)  # fmt: skip
    return {
        "crossed-logit": small_sim.study,
        "beta-binomial": small_sim.study,
        "reference-logit": status,
        "latent-class": status,
        "call-curve": two_sided,
        # without a reference: with one, the known parts' positions are sampled from a
        # flat base measure that has no forward draws (their side is data, not prior)
        "latent-trait": simulate_latent_trait(16, 3, 2, seed=4).study,
    }


def _pymc_prior(spec, study, seed):
    import logging

    import pymc as pm

    from bayes_rr.families import build_model

    logging.getLogger("pymc").setLevel(logging.WARNING)
    with build_model(spec, study), warnings.catch_warnings():
        # The latent class likelihood is a Potential, which forward draws leave out:
        # that is what a prior draw is.
        warnings.filterwarnings("ignore", "The effect of Potentials", UserWarning)
        return pm.sample_prior_predictive(draws=DRAWS, random_seed=seed).prior


def _columns(values: np.ndarray) -> np.ndarray:
    """(draws, k) with at most three of the variable's elements (first, middle, last)."""
    flat = values.reshape(values.shape[0], -1)
    pick = sorted({0, flat.shape[1] // 2, flat.shape[1] - 1})
    return flat[:, pick]


@pytest.mark.parametrize(
    "name",
    ["crossed-logit", "beta-binomial", "reference-logit", "latent-class", "call-curve",
     "latent-trait"],
)  # fmt: skip
def test_numpy_prior_draws_match_pymc_forward_draws(name, small_sim):
    spec = load_spec(name)
    study = _studies(small_sim)[name]
    ours = draw_prior(spec, study, DRAWS, seed=4)
    theirs = _pymc_prior(spec, study, seed=5)
    flat = {v: theirs[v].stack(s=("chain", "draw")).transpose("s", ...).to_numpy()
            for v in theirs.data_vars}  # fmt: skip
    if name == "latent-class":
        # The ordered pair's prior is the normals restricted to reject > accept; PyMC's
        # forward draws ignore the order, so only its ordered draws are comparable.
        keep = flat["intercept"][:, 1] > flat["intercept"][:, 0]
        flat = {v: values[keep] for v, values in flat.items()}
    compared = 0
    for var in ours.data_vars:
        assert var in theirs, f"{var} is not a variable of the {name} model"
        assert ours[var].dims == theirs[var].dims, var
        assert ours[var].shape[2:] == theirs[var].shape[2:], var
        for coord in ours[var].dims[2:]:
            assert list(ours[coord].to_numpy()) == list(theirs[coord].to_numpy()), coord
        a = _columns(ours[var].to_numpy()[0])
        b = _columns(flat[var])
        for j in range(a.shape[1]):
            p = stats.ks_2samp(a[:, j], b[:, j]).pvalue
            assert p > KS_FLOOR, f"{name} {var}[{j}]: KS p = {p:.2e}"
            compared += 1
    assert compared >= 4


def test_per_part_concentration_draws_one_rho_per_part(small_sim, tmp_path):
    import dataclasses

    spec = load_spec("beta-binomial")
    per_part = dataclasses.replace(
        spec, concentration=dataclasses.replace(spec.concentration, sharing="per_part")
    )
    ours = draw_prior(per_part, small_sim.study, DRAWS, seed=4)
    theirs = _pymc_prior(per_part, small_sim.study, seed=5)
    assert ours["rho"].dims == theirs["rho"].dims == ("chain", "draw", "part")
    p = stats.ks_2samp(ours["rho"][0, :, 0], theirs["rho"][0, :, 0]).pvalue
    assert p > KS_FLOOR


def test_the_prior_predictive_check_does_not_import_pymc(small_sim, tmp_path):
    """The check draws its priors in numpy: a new process runs it without PyMC or nutpie."""
    small_sim.study.calls.to_csv(tmp_path / "study.csv", index=False)
    code = (
        "import sys\n"
        "from bayes_rr.checks.predictive import prior_predictive\n"
        "from bayes_rr.study.data import read_study\n"
        "from bayes_rr.priors.spec import load_spec\n"
        f"study = read_study({str(tmp_path / 'study.csv')!r})\n"
        "for name in ('crossed-logit', 'beta-binomial'):\n"
        "    rows = prior_predictive(load_spec(name), study, draws=50)\n"
        "    assert rows, name\n"
        "print(sorted(m for m in ('pymc', 'nutpie') if m in sys.modules))\n"
    )
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True)
    assert done.returncode == 0, done.stderr
    assert done.stdout.strip() == "[]"


def test_prior_predictive_quantiles_agree_with_pymc_draws(small_sim):
    """The check's quantiles from numpy draws against the same estimands computed from
    PyMC's forward draws (estimands.compute_estimands on both)."""
    from bayes_rr.results.estimands import compute_estimands

    spec = load_spec("crossed-logit")
    rows = {
        (r["scope"], r["key"]): r
        for r in prior_predictive(spec, small_sim.study, draws=DRAWS, seed=2)
    }
    theirs = compute_estimands(_pymc_prior(spec, small_sim.study, seed=9), spec, small_sim.study, 0)
    for key in ("call_rate", "reproducibility_share", "repeat_disagreement"):
        values = theirs[f"study__study__{key}"].to_numpy().ravel()
        lo, med, hi = np.quantile(values, [0.25, 0.5, 0.75])
        row = rows[("study", key)]
        # Monte Carlo error of a quartile from 3000 draws is about 2% of the spread.
        tol = 0.1 * (hi - lo)
        assert abs(row["median"] - med) < tol, key
        assert abs(row["q25"] - lo) < tol and abs(row["q75"] - hi) < tol, key


def test_check_and_report_commands_run_without_pymc(fit_dirs, tmp_path):
    """`bayes-rr check` then `bayes-rr report` on a copy of a fit folder, in a new process
    that never imports PyMC or nutpie."""
    import shutil

    folder = tmp_path / "fit"
    shutil.copytree(fit_dirs["crossed-logit"], folder)
    (folder / "checks.json").unlink(missing_ok=True)
    code = (
        "import sys\n"
        "from typer.testing import CliRunner\n"
        "from bayes_rr.cli import app\n"
        "runner = CliRunner()\n"
        f"for args in (['check', {str(folder)!r}, '--draws', '50'],\n"
        f"             ['report', {str(folder)!r}, '--out', {str(tmp_path / 'r.html')!r}]):\n"
        "    done = runner.invoke(app, args)\n"
        "    assert done.exit_code == 0, done.output\n"
        "print(sorted(m for m in ('pymc', 'nutpie') if m in sys.modules))\n"
    )
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True)
    assert done.returncode == 0, done.stderr
    assert done.stdout.strip().splitlines()[-1] == "[]"
    assert (tmp_path / "r.html").exists()
