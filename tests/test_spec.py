"""Model specifications: every bundled file parses; bad specs are refused with clear errors."""

import pytest
from typer.testing import CliRunner

from bayes_rr.cli import app
from bayes_rr.core.errors import SpecError
from bayes_rr.families import FAMILIES
from bayes_rr.priors.spec import bundled_models, load_spec, models_dir, parse_spec

BUNDLED = sorted(models_dir().glob("*.toml"))


def test_the_two_required_models_are_bundled():
    assert {"crossed-logit", "beta-binomial"} <= set(bundled_models())


@pytest.mark.parametrize("path", BUNDLED, ids=lambda p: p.stem)
def test_every_bundled_spec_is_valid(path):
    spec = load_spec(path)
    assert spec.name == path.stem
    assert spec.family in FAMILIES
    assert spec.description and spec.suits
    assert len(spec.sha256) == 64
    assert load_spec(path.stem) == spec  # by name and by path alike


def _study_for(family: str):
    from bayes_rr.simulation.known_truth import simulate_call_curve, simulate_status_logit

    if family == "call_curve":
        return simulate_call_curve(12, 3, 2, seed=0).study
    return simulate_status_logit(12, 3, 2, hide_reference=family == "latent_class", seed=0).study


@pytest.mark.parametrize("path", BUNDLED, ids=lambda p: p.stem)
def test_every_bundled_spec_builds_a_model_with_a_finite_log_density(path):
    import numpy as np

    from bayes_rr.families import build_model

    spec = load_spec(path)
    model = build_model(spec, _study_for(spec.family))
    assert {"part", "appraiser", "cell"} <= set(model.coords)
    logp = model.compile_logp(mode="NUMBA")(model.initial_point())
    assert np.isfinite(logp)


VALID = """
name = "t"
family = "logit"
[intercept]
prior = { distribution = "normal", mu = 0.0, sigma = 1.5 }
[terms.part]
scale_prior = { distribution = "half_normal", sigma = 2.0 }
"""


def test_defaults_fill_what_a_spec_leaves_out():
    spec = parse_spec(VALID, "t.toml")
    assert spec.term("part").parameterization == "auto"
    assert spec.sampler.sampler == "nutpie"
    assert not spec.has("appraiser")


@pytest.mark.parametrize(
    ("text", "message"),
    [
        (VALID + "colour = 'red'\n", "unknown key(s) ['colour']"),
        (VALID.replace('"half_normal", sigma = 2.0', '"half_normal", sigma = -1.0'),
         "terms.part.scale_prior.sigma = -1.0: must be greater than 0"),
        (VALID.replace('"normal", mu', '"normall", mu'), "distribution = 'normall'"),
        (VALID.replace('"half_normal", sigma = 2.0', '"normal", sigma = 2.0'),
         "needs a distribution on positive values"),
        (VALID.replace('family = "logit"', 'family = "probit"'), "family = 'probit'"),
        (VALID + 'parameterization = "wobbly"\n', "parameterization = 'wobbly'"),
        (VALID + "[terms.operator]\n", "unknown key(s) ['operator'] in [terms]"),
        (VALID + "[concentration]\n", "[concentration] is for the beta_binomial family"),
        (VALID + "[sampler]\ndraws = 0\n", "sampler.draws = 0"),
        (VALID + "[sampler]\nsampler = 'metropolis'\n", "sampler.sampler = 'metropolis'"),
        (VALID.replace("sigma = 1.5", "sigma = 1.5, nu = 3"), "unknown parameter(s) ['nu']"),
        ("name = [\n", "not valid TOML"),
    ],
)  # fmt: skip
def test_bad_specs_raise_spec_error_naming_file_key_and_value(text, message):
    with pytest.raises(SpecError) as info:
        parse_spec(text, "mine.toml")
    assert str(info.value).startswith("mine.toml: ")
    assert message in str(info.value)


def test_spec_never_executes_code():
    # TOML is data: a string that looks like code stays a string.
    text = VALID.replace('name = "t"', "name = \"__import__('os').system('false')\"")
    assert parse_spec(text).name.startswith("__import__")


def test_unknown_model_name():
    with pytest.raises(SpecError, match="neither a bundled model"):
        load_spec("no-such-model")


def test_models_command_lists_bundled_specs():
    result = CliRunner().invoke(app, ["models"])
    assert result.exit_code == 0
    assert "crossed-logit" in result.output and "beta-binomial" in result.output


def test_spec_module_does_not_import_pymc():
    import subprocess
    import sys

    code = (
        "import sys, bayes_rr.priors.spec, bayes_rr.study.data, bayes_rr.study.classical, "
        "bayes_rr.cli;"
        "print('pymc' in sys.modules)"
    )
    proc = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert proc.stdout.strip() == "False"
