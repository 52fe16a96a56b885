"""The disk cache of compiled models: a later process loads instead of compiling, the
draws are exactly those of a fresh compile, and the key separates what must differ."""

import json
import os
import subprocess
import sys

import numpy as np
import pytest

from bayes_rr.families import build_model
from bayes_rr.inference import compile_cache
from bayes_rr.priors.spec import load_spec, parse_spec
from bayes_rr.simulation.known_truth import simulate_beta_binomial


@pytest.fixture(scope="module")
def small_study():
    return simulate_beta_binomial(12, 3, 2, seed=1).study


@pytest.fixture
def cache_dir(tmp_path, monkeypatch):
    folder = tmp_path / "cache"
    monkeypatch.setenv(compile_cache.CACHE_DIR_ENV, str(folder))
    monkeypatch.delenv(compile_cache.CACHE_SWITCH_ENV, raising=False)
    return folder


def _draws(compiled, seed=5):
    import nutpie

    idata = nutpie.sample(compiled, draws=100, tune=100, chains=2, seed=seed,
                          progress_bar=False)  # fmt: skip
    return {name: idata.posterior[name].to_numpy() for name in ("intercept", "sigma_part", "rho")}


def test_the_key_follows_the_graph_not_the_calls(small_study):
    """Two studies of one design differ only in the replaceable reject counts: same key.
    A prior with another constant, or another design, is another graph: another key."""
    spec = load_spec("beta-binomial")
    other_calls = simulate_beta_binomial(12, 3, 2, seed=2).study
    assert not np.array_equal(small_study.cells["s"], other_calls.cells["s"])
    key = compile_cache.model_key(build_model(spec, small_study))
    assert compile_cache.model_key(build_model(spec, other_calls)) == key
    other_design = simulate_beta_binomial(13, 3, 2, seed=1).study
    assert compile_cache.model_key(build_model(spec, other_design)) != key
    text = spec.text.replace("sigma = 1.5", "sigma = 1.25", 1)
    assert text != spec.text, "the bundled spec changed; pick another constant to vary"
    changed = parse_spec(text, "changed prior")
    assert compile_cache.model_key(build_model(changed, small_study)) != key


def test_an_operation_without_declared_parameters_is_not_keyed():
    """An operation whose equality the key cannot see is compiled, never stored."""
    import pytensor.tensor as pt
    from pytensor.graph.basic import Apply
    from pytensor.graph.op import Op

    class Opaque(Op):
        def make_node(self, x):
            x = pt.as_tensor_variable(x)
            return Apply(self, [x], [x.type()])

        def perform(self, node, inputs, outputs):
            outputs[0][0] = inputs[0]

    x = pt.dvector("x")
    with pytest.raises(compile_cache._Unkeyable, match="Opaque"):
        compile_cache.graph_fingerprint([Opaque()(x)])
    # the same graph built from operations with declared parameters is keyed, stably
    first = compile_cache.graph_fingerprint([pt.exp(x).sum()])
    assert first == compile_cache.graph_fingerprint([pt.exp(pt.dvector("x")).sum()])
    assert first != compile_cache.graph_fingerprint([pt.log(x).sum()])


def test_a_stored_model_loads_with_the_draws_of_a_fresh_compile(small_study, cache_dir):
    spec = load_spec("beta-binomial")
    stored = compile_cache.compile_model(build_model(spec, small_study))
    assert stored.source == "stored"
    entry = cache_dir / "compiled-models" / stored.key[:2] / stored.key
    assert sorted(p.name for p in entry.iterdir()) == ["expand.nbc", "logp.nbc", "meta.json"]
    loaded = compile_cache.compile_model(build_model(spec, small_study))
    assert loaded.source == "loaded"
    first, again = _draws(stored.compiled), _draws(loaded.compiled)
    for name in first:
        np.testing.assert_array_equal(first[name], again[name])
    # new calls go in through nutpie's data replacement, as with a fresh compile
    other = simulate_beta_binomial(12, 3, 2, seed=2).study
    calls = other.cells["s"].to_numpy()
    from bayes_rr.families.pymc_parts import OBSERVED_CALLS

    replaced = _draws(loaded.compiled.with_data(**{OBSERVED_CALLS: calls}))
    fresh = _draws(compile_cache.compile_model(build_model(spec, other)).compiled)
    for name in fresh:
        np.testing.assert_array_equal(replaced[name], fresh[name])


def test_a_damaged_entry_is_compiled_again_and_replaced(small_study, cache_dir):
    spec = load_spec("beta-binomial")
    stored = compile_cache.compile_model(build_model(spec, small_study))
    entry = cache_dir / "compiled-models" / stored.key[:2] / stored.key
    (entry / "logp.nbc").write_bytes(b"not a compiled model")
    again = compile_cache.compile_model(build_model(spec, small_study))
    assert again.source.startswith("stored (cache unreadable: ")
    assert compile_cache.compile_model(build_model(spec, small_study)).source == "loaded"
    meta = json.loads((entry / "meta.json").read_text())
    assert meta["key"] == stored.key


def test_the_cache_can_be_turned_off(small_study, cache_dir, monkeypatch):
    monkeypatch.setenv(compile_cache.CACHE_SWITCH_ENV, "0")
    outcome = compile_cache.compile_model(build_model(load_spec("beta-binomial"), small_study))
    assert outcome.source == "compiled" and outcome.key is None
    assert not cache_dir.exists()


_CHILD = """
import json, time
from bayes_rr.inference import compile_cache
from bayes_rr.families import build_model
from bayes_rr.simulation.known_truth import simulate_beta_binomial
from bayes_rr.priors.spec import load_spec
model = build_model(load_spec("beta-binomial"), simulate_beta_binomial(12, 3, 2, seed=1).study)
start = time.perf_counter()
outcome = compile_cache.compile_model(model)
seconds = time.perf_counter() - start
import nutpie
idata = nutpie.sample(outcome.compiled, draws=50, tune=50, chains=1, seed=9, progress_bar=False)
print(json.dumps({"source": outcome.source, "seconds": seconds,
                  "rho": idata.posterior["rho"].to_numpy().ravel().tolist()}))
"""


def _child(cache_dir) -> dict:
    env = {**os.environ, compile_cache.CACHE_DIR_ENV: str(cache_dir)}
    done = subprocess.run([sys.executable, "-c", _CHILD], env=env, capture_output=True,
                          text=True, check=True)  # fmt: skip
    return json.loads(done.stdout.strip().splitlines()[-1])


def test_a_second_process_loads_what_the_first_compiled(cache_dir):
    """The point of the cache: across processes. The compile time of the second is not
    asserted (timings belong to the benchmark); what it did and what it drew are."""
    first = _child(cache_dir)
    second = _child(cache_dir)
    assert first["source"] == "stored"
    assert second["source"] == "loaded"
    assert first["rho"] == second["rho"]


def test_the_least_recently_used_entries_are_pruned(small_study, cache_dir, monkeypatch):
    """Beyond MAX_ENTRIES the entry used longest ago goes; a folder that is not an entry
    is never touched."""
    monkeypatch.setattr(compile_cache, "MAX_ENTRIES", 1)
    spec = load_spec("beta-binomial")
    root = cache_dir / "compiled-models"
    foreign = root / "notes"
    foreign.mkdir(parents=True)
    (foreign / "keep.txt").write_text("not the cache's")
    first = compile_cache.compile_model(build_model(spec, small_study))
    other = simulate_beta_binomial(13, 3, 2, seed=1).study
    second = compile_cache.compile_model(build_model(spec, other))
    assert (first.source, second.source) == ("stored", "stored")
    assert not (root / first.key[:2] / first.key).exists()
    assert (root / second.key[:2] / second.key / "meta.json").is_file()
    assert (foreign / "keep.txt").read_text() == "not the cache's"


def test_the_key_follows_the_cell_kernel_source(monkeypatch):
    """The crossed-logit's sampler model calls a numba kernel of this package; a changed
    kernel is another model to the cache, though the graph around it is the same."""
    from bayes_rr.families import build_sampling_model, cell_integral
    from bayes_rr.simulation.known_truth import simulate_crossed_logit

    spec = load_spec("crossed-logit")
    study = simulate_crossed_logit(10, 3, 2, mu=-0.5, sigma_part=1.5, sigma_appraiser=0.5,
                                   sigma_interaction=0.3, seed=3).study  # fmt: skip
    key = compile_cache.model_key(build_sampling_model(spec, study))
    assert compile_cache.model_key(build_sampling_model(spec, study)) == key
    monkeypatch.setattr(cell_integral, "kernel_digest", lambda: "an older kernel")
    assert compile_cache.model_key(build_sampling_model(spec, study)) != key
