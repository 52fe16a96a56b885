"""Limits that fail fast, in one line, before anything is compiled or allocated."""

from types import SimpleNamespace

import pytest
from helpers import write
from typer.testing import CliRunner

from bayes_rr.cli import app
from bayes_rr.core.errors import SpecError
from bayes_rr.inference.sampling import SamplerSettings, check_memory, planned_memory_bytes
from bayes_rr.priors.spec import load_spec, models_dir, parse_spec
from bayes_rr.study.classical import classical_statistics
from bayes_rr.study.data import study_from_cells
from bayes_rr.study.kappa import MAX_PAIRWISE_APPRAISERS

runner = CliRunner()
STUDY = "part,appraiser,trial,call\n1,A,1,pass\n1,A,2,fail\n1,B,1,pass\n2,A,1,fail\n2,B,1,fail\n"


def one_line(result, code=2) -> str:
    assert result.exit_code == code, result.output
    assert isinstance(result.exception, SystemExit), result.exception
    message = result.stderr.strip()
    assert message and "\n" not in message and "Traceback" not in result.output
    return message


@pytest.mark.parametrize(
    ("option", "value", "expected"),
    [
        ("--draws", "1000000000", "draws = 1000000000"),
        ("--draws", "99999999999999999999999", "draws = 99999999999999999999999"),
        ("--draws", "5", "from 10"),
        ("--chains", "1000", "chains = 1000"),
        ("--seed", "-1", "seed = -1"),
    ],
)
def test_sampler_numbers_out_of_range_are_one_line(tmp_path, option, value, expected):
    data = write(tmp_path, "s.csv", STUDY)
    result = runner.invoke(app, ["fit", str(data), "--out", str(tmp_path / "fit"), option, value])
    assert expected in one_line(result)
    assert not (tmp_path / "fit").exists()


@pytest.mark.parametrize(
    ("old", "new", "key"),
    [
        ("draws = 2000", "draws = 100000000", "sampler.draws"),
        ("draws = 2000", "draws = 99999999999999999999", "draws"),
        ("sigma = 2.5 }", "sigma = 1e300 }", "terms.part.scale_prior.sigma"),
        ("sigma = 2.5 }", "sigma = 1e-300 }", "terms.part.scale_prior.sigma"),
        ("mu = 0.0, sigma = 1.5", "mu = 1e200, sigma = 1.5", "intercept.prior.mu"),
    ],
)
def test_spec_numbers_out_of_range_name_the_key(tmp_path, old, new, key):
    text = (models_dir() / "crossed-logit.toml").read_text()
    assert old in text
    with pytest.raises(SpecError, match=key.replace(".", r"\.")):
        parse_spec(text.replace(old, new, 1), "bad.toml")
    spec = write(tmp_path, "bad.toml", text.replace(old, new, 1))
    data = write(tmp_path, "s.csv", STUDY)
    result = runner.invoke(
        app, ["fit", str(data), "--out", str(tmp_path / "fit"), "--model", str(spec)]
    )
    assert key.split(".")[-1] in one_line(result)


def test_memory_budget_refuses_with_the_figure(monkeypatch):
    import bayes_rr.inference.sampling as sampling

    monkeypatch.setattr(sampling, "machine_memory_bytes", lambda: 24 * 2**30)
    settings = SamplerSettings(draws=100_000, chains=4)
    with pytest.raises(SpecError, match=r"need about \d+\.\d GiB, more than the 9\.6 GiB"):
        check_memory(45, 3, 135, settings)
    # the bundled default on the demo's size stays far inside the budget
    default = SamplerSettings.from_spec(load_spec("crossed-logit"))
    assert planned_memory_bytes(45, 3, 135, default) < 2**30
    check_memory(45, 3, 135, default)


def test_pairwise_statistics_beyond_the_limit_are_listed_as_not_computed():
    count = MAX_PAIRWISE_APPRAISERS + 1
    names = [f"A{j}" for j in range(count)]
    n = [[2] * count, [2] * count]
    s = [[j % 3 for j in range(count)], [1] * count]
    study = study_from_cells(["P1", "P2"], names, n, [[min(v, 2) for v in r] for r in s])
    result = classical_statistics(study)
    assert result.appraiser_differences == ()
    assert not [k for k in result.kappa if k.statistic == "cohen"]
    reasons = [item["reason"] for item in result.not_computed]
    assert any(f"{count} appraisers make {count * (count - 1) // 2} pairs" in r for r in reasons)
    # below the limit they are all there
    small = study_from_cells(["P1", "P2"], names[:3], [[2] * 3] * 2, [[0, 1, 2], [1, 1, 1]])
    assert len(classical_statistics(small).appraiser_differences) == 3


class _Sampled(Exception):
    """Stands in for sampling: the test is about the checks before it."""


def test_memory_check_follows_the_draws_the_fit_takes(monkeypatch):
    """The latent class model of the dental data (Espeland and Handelman 1989; 3,869
    patients x 5 dentists) with the default sampler settings on a 24 GiB machine: the
    spec's 4 x 2,000 draws would not fit the budget, the first stage's 4 x 1,000 do, so the
    fit starts; the full number is checked again before a second stage and refused there
    with the reason."""
    from test_wrong_calls import dental_study

    import bayes_rr.inference.sampling as sampling
    import bayes_rr.workflow.fit as fit_module

    monkeypatch.setattr(sampling, "machine_memory_bytes", lambda: 24 * 2**30)
    study = dental_study()
    spec = load_spec("latent-class")
    settings = SamplerSettings.from_spec(spec, seed=1)
    size = (len(study.parts), len(study.appraisers), len(study.cells))
    with pytest.raises(SpecError, match="GiB budget"):
        check_memory(*size, settings, "latent_class")  # what the fit used to check
    first = SamplerSettings.from_spec(spec, seed=1, draws=fit_module.FIRST_STAGE_DRAWS)
    check_memory(*size, first, "latent_class")

    def first_stage_only(model, stage, compiled=None):
        assert stage.draws == fit_module.FIRST_STAGE_DRAWS
        raise _Sampled

    monkeypatch.setattr(sampling, "sample_model", first_stage_only)
    monkeypatch.setattr(fit_module, "cached_compiled", lambda *a: None)
    import bayes_rr.families as families

    monkeypatch.setattr(families, "build_model", lambda *a: None)
    with pytest.raises(_Sampled):
        fit_module.fit_study(study, spec, settings, two_stage=True)

    # the first stage fails the gate: the second is refused before it is sampled
    failed = SimpleNamespace(diagnostics=SimpleNamespace(ok=False, modes=None), timings={})
    run = SimpleNamespace(compiled=None, compile_source="compiled", timings={}, idata=None)
    sampled = SimpleNamespace(run=run, integrate=True, retried="", form="", rule_check={})
    monkeypatch.setattr(fit_module, "sample_study", lambda *a, **k: sampled)
    monkeypatch.setattr(fit_module, "_summarise", lambda *a: failed)
    with pytest.raises(SpecError, match="did not pass the convergence gate, and 4 chains x 2,000"):
        fit_module.fit_study(study, spec, settings, two_stage=True)
