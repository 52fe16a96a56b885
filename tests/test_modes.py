"""Chains settled in separate modes are named as such, not answered with "run longer"."""

import numpy as np
import pytest
import xarray as xr

from bayes_rr.inference.sampling import convergence_gate, separate_modes
from bayes_rr.results.estimands import SummaryRow


def _posterior(chains: np.ndarray, name: str = "sigma_part") -> xr.Dataset:
    return xr.Dataset({name: (("chain", "draw"), chains)})


def _stats(chains: int, draws: int) -> xr.Dataset:
    rng = np.random.default_rng(0)
    return xr.Dataset({
        "diverging": (("chain", "draw"), np.zeros((chains, draws), dtype=bool)),
        "energy": (("chain", "draw"), rng.standard_normal((chains, draws))),
    })  # fmt: skip


def _row(r_hat: float) -> SummaryRow:
    return SummaryRow("prevalence", None, "parameter", None, None, 0.3, 0.3, 0.1, 0.1, 0.5,
                      r_hat, 50.0, 50.0)  # fmt: skip


def test_two_pairs_of_chains_in_two_places_are_two_modes():
    # the shape the dental data's latent class fit showed: two chains near 1.2, two near 2.3
    rng = np.random.default_rng(1)
    chains = np.concatenate([1.2 + 0.1 * rng.standard_normal((2, 1000)),
                             2.3 + 0.1 * rng.standard_normal((2, 1000))])  # fmt: skip
    found = separate_modes(_posterior(chains[[0, 2, 1, 3]]))
    assert found is not None and found["label"] == "sigma_part"
    assert found["chains"] == [[0, 2], [1, 3]]
    assert found["means"] == pytest.approx([1.2, 2.3], abs=0.02)
    diagnostics = convergence_gate([_row(1.74)], _stats(4, 1000), found, ("drop the part term",))
    assert not diagnostics.ok
    assert diagnostics.reasons[0].startswith("the posterior has more than one mode")
    assert (
        "sigma_part" in diagnostics.reasons[0] and "chains 1 and 3 settle" in diagnostics.reasons[0]
    )
    assert "drop the part term" in diagnostics.advice
    assert not any("run longer" in a for a in diagnostics.advice)


def test_slowly_mixing_chains_of_one_mode_are_not_called_modes():
    # AR(1) chains with autocorrelation 0.99 around one value: slow, but one mode
    rng = np.random.default_rng(2)
    chains = np.zeros((4, 2000))
    for t in range(1, 2000):
        chains[:, t] = 0.99 * chains[:, t - 1] + 0.14 * rng.standard_normal(4)
    assert separate_modes(_posterior(chains)) is None
    diagnostics = convergence_gate([_row(1.05)], _stats(4, 2000))
    assert any("run longer" in a for a in diagnostics.advice)


def test_modes_of_one_element_of_a_vector_are_named_with_it():
    rng = np.random.default_rng(3)
    values = 0.1 * rng.standard_normal((4, 500, 2))
    values[2:, :, 1] += 3.0
    found = separate_modes(xr.Dataset(
        {"intercept": (("chain", "draw", "status"), values)},
        coords={"status": ["accept", "reject"]},
    ))  # fmt: skip
    assert found["label"] == "intercept[reject]"


@pytest.mark.slow
def test_the_dental_latent_class_fit_with_its_part_term_is_named_bimodal():
    """The bundled latent-class model (with the part term) on the dental data (Espeland and
    Handelman 1989): chains settle at sigma_part near 1.2 and near 2.3 (as an independent
    audit found); the gate says so, gives the family's advice and withholds the results."""
    from test_wrong_calls import dental_study

    from bayes_rr.inference.sampling import SamplerSettings
    from bayes_rr.priors.spec import load_spec
    from bayes_rr.workflow.fit import fit_study

    spec = load_spec("latent-class")
    result = fit_study(dental_study(), spec, SamplerSettings.from_spec(spec, seed=1),
                       two_stage=True)  # fmt: skip
    diagnostics = result.diagnostics
    assert not diagnostics.ok
    assert diagnostics.modes is not None and diagnostics.modes["label"] == "sigma_part"
    assert sorted(diagnostics.modes["means"]) == pytest.approx([1.2, 2.3], abs=0.25)
    assert "more than one mode" in diagnostics.reasons[0]
    assert any("remove [terms.part]" in a for a in diagnostics.advice)
    assert [s["draws"] for s in result.provenance["stages"]] == [1000]
