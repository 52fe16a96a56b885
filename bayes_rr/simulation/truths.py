"""Studies simulated from the model with the truth they came from.

The truth is drawn from the model's prior (calibration, planning) or, for planning
after an earlier study, the hyper-parameters are the earlier fit's posterior draws and
the new study's parts and appraisers are drawn from the population they describe.
The calls are drawn by PyMC from the same model the fit uses, so simulation and
analysis cannot drift apart.
"""

from __future__ import annotations

import logging
from contextlib import contextmanager
from dataclasses import dataclass

import numpy as np
import xarray as xr

from bayes_rr.core.errors import SpecError
from bayes_rr.priors.spec import ModelSpec
from bayes_rr.simulation.designs import (
    POOL_FACTOR,
    Design,
    parts_from_prior,
    pick_parts,
    skeleton_study,
)
from bayes_rr.study.data import StudyData, study_from_cells

GROUP_DIMS = ("part", "appraiser", "cell")


@dataclass(frozen=True)
class SimulatedDesign:
    """``sims`` studies of one design.

    Attributes
    ----------
    design
        The design.
    layout
        The study's layout (every call an accept): the simulated calls fill it in.
    calls
        Reject counts, (sims, cells), in the order of ``layout.cells``.
    truth
        The parameters each study was drawn from (chain 1, draw = sims); None when the
        parts were picked from a pool to reach a part mix (the truth then is a pool's).
    borderline_share
        Per study, the share of borderline parts reached (None without a part mix).
    """

    design: Design
    layout: StudyData
    calls: np.ndarray
    truth: xr.Dataset | None
    borderline_share: np.ndarray | None = None

    def study(self, index: int) -> StudyData:
        """The ``index``-th simulated study."""
        return with_calls(self.layout, self.calls[index], f"simulated study {index + 1} "
                          f"of design {self.design.label}")  # fmt: skip

    def truth_of(self, index: int) -> xr.Dataset:
        """The parameters of the ``index``-th study as a one-draw posterior."""
        if self.truth is None:
            raise ValueError("the parts were picked from a pool: no per-study truth kept")
        return self.truth.isel(draw=[index]).assign_coords(draw=[0])


def with_calls(layout: StudyData, calls: np.ndarray, source: str) -> StudyData:
    """The layout with these reject counts."""
    cells = layout.cells
    shape = (len(layout.parts), len(layout.appraisers))
    n = np.zeros(shape, dtype=int)
    s = np.zeros(shape, dtype=int)
    n[cells["part_index"], cells["appraiser_index"]] = cells["n"]
    s[cells["part_index"], cells["appraiser_index"]] = calls
    reference = None if layout.reference is None else layout.reference.to_numpy()
    values = None if layout.reference_value is None else layout.reference_value.to_numpy()
    return study_from_cells(layout.parts, layout.appraisers, n, s, reference=reference,
                            reference_value=values, limits=layout.limits,
                            source=source)  # fmt: skip


@contextmanager
def _quiet_pymc():
    # PyMC logs the variables it draws: noise in a run of many simulations.
    import pymc  # noqa: F401  (PyMC sets its logger's level when first imported)

    logger = logging.getLogger("pymc")
    level = logger.level
    logger.setLevel(logging.WARNING)
    try:
        yield
    finally:
        logger.setLevel(level)


def hyper_names(model) -> list[str]:
    """Free variables of the model that belong to no part, appraiser or cell."""
    dims = model.named_vars_to_dims
    return [v.name for v in model.free_RVs
            if not set(dims.get(v.name, ()) or ()) & set(GROUP_DIMS)]  # fmt: skip


def _forward_prior(model, sims: int, seed: int) -> tuple[xr.Dataset, np.ndarray]:
    import pymc as pm

    with _quiet_pymc():
        idata = pm.sample_prior_predictive(draws=sims, model=model, random_seed=seed)
    calls = idata.prior_predictive["s"].to_numpy().reshape(sims, -1)
    return idata.prior, calls


def _forward_earlier(model, hypers: xr.Dataset, seed: int) -> tuple[xr.Dataset, np.ndarray]:
    """New parts, appraisers and calls given the earlier fit's hyper-parameter draws."""
    import pymc as pm

    names = hyper_names(model)
    missing = [n for n in names if n not in hypers]
    if missing:
        raise SpecError(
            f"the earlier fit has no draws of {missing}: it was fitted with another model; "
            "plan with the earlier fit's own model"
        )
    fixed = set(names)
    drawn = [v.name for v in model.free_RVs if v.name not in fixed]
    drawn += [v.name for v in model.deterministics] + ["s"]
    with _quiet_pymc():
        out = pm.sample_posterior_predictive(
            hypers[names], model=model, var_names=drawn, random_seed=seed, progressbar=False
        ).posterior_predictive
    sims = hypers.sizes["draw"]
    calls = out["s"].to_numpy().reshape(sims, -1)
    return xr.merge([hypers[names], out.drop_vars("s")]), calls


def earlier_hypers(posterior: xr.Dataset, sims: int, seed: int) -> xr.Dataset:
    """``sims`` draws picked at random from an earlier fit's posterior (chain 1)."""
    stacked = posterior.stack(sample=("chain", "draw"))
    rng = np.random.default_rng([seed, 11])
    picked = rng.choice(stacked.sizes["sample"], size=sims, replace=False)
    out = stacked.isel(sample=picked).drop_vars(["sample", "chain", "draw"])
    out = out.rename({"sample": "draw"}).assign_coords(draw=np.arange(sims))
    return out.expand_dims(chain=[0]).transpose("chain", "draw", ...)


def simulate_design(
    spec: ModelSpec,
    design: Design,
    sims: int,
    seed: int,
    *,
    earlier_posterior: xr.Dataset | None = None,
) -> SimulatedDesign:
    """``sims`` studies of ``design`` with their truth.

    Without a reference column, a set ``design.part_mix`` picks each study's parts from
    a pool of candidates drawn from the same population (:data:`POOL_FACTOR` per part)
    so that that share of them is borderline.
    """
    from bayes_rr.families import build_model, family_of
    from bayes_rr.families.base import part_linear_predictor

    if spec.earlier is not None and earlier_posterior is None:
        raise SpecError(
            f"{spec.source}: this spec carries an earlier study as factors, which cannot be "
            "drawn from directly; plan with --prior-from EARLIER_FIT instead"
        )
    sides = _sides(earlier_posterior)
    layout = skeleton_study(design, spec, sides=sides)
    pooled = design.part_mix is not None and parts_from_prior(spec)
    drawn_layout = skeleton_study(design, spec, parts=design.parts * POOL_FACTOR) if pooled \
        else layout  # fmt: skip
    stated = spec if spec.earlier is None else _without_earlier(spec)
    family = family_of(spec)
    if family.simulate_calls is not None:
        truth, calls = _forward_numpy(family, stated, layout, design, sims, seed,
                                      earlier_posterior)  # fmt: skip
        return SimulatedDesign(design, layout, calls.astype(int), truth)
    model = build_model(stated, drawn_layout)
    if earlier_posterior is None:
        truth, calls = _forward_prior(model, sims, seed)
    else:
        truth, calls = _forward_earlier(model, earlier_hypers(earlier_posterior, sims, seed),
                                        seed)  # fmt: skip
    if not pooled:
        return SimulatedDesign(design, layout, calls.astype(int), truth)
    typical = 1.0 / (1.0 + np.exp(-part_linear_predictor(truth, drawn_layout)))
    rng = np.random.default_rng([seed, 13])
    per_part = calls.reshape(sims, len(drawn_layout.parts), design.appraisers)
    picked_calls, reached = [], []
    for k in range(sims):
        parts, share = pick_parts(typical[k], design.parts, design.part_mix, rng)
        picked_calls.append(per_part[k, parts].reshape(-1))
        reached.append(share)
    return SimulatedDesign(design, layout, np.asarray(picked_calls, dtype=int), None,
                           np.asarray(reached))  # fmt: skip


def _sides(earlier_posterior: xr.Dataset | None) -> tuple[str, ...]:
    """The limits of simulated studies with measured values: the earlier fit's, so that
    its draws (one per limit) fit the new studies; an upper limit otherwise."""
    if earlier_posterior is not None and "side" in earlier_posterior.coords:
        return tuple(str(side) for side in earlier_posterior["side"].to_numpy())
    return ("upper",)


def _forward_numpy(family, spec: ModelSpec, layout: StudyData, design: Design, sims: int,
                   seed: int, earlier_posterior: xr.Dataset | None):  # fmt: skip
    """Truth and calls from a family's own simulator: the hyper-parameters from the prior
    (numpy forward draws) or from the earlier fit's posterior."""
    from bayes_rr.priors.prior_draws import draw_prior

    if earlier_posterior is None:
        truth = draw_prior(spec, layout, sims, seed)
    else:
        hypers = [name for name in earlier_posterior.data_vars
                  if not set(earlier_posterior[name].dims) & set(GROUP_DIMS)]  # fmt: skip
        truth = earlier_hypers(earlier_posterior[hypers], sims, seed)
    rng = np.random.default_rng([seed, 19])
    return family.simulate_calls(spec, layout, truth, rng, design.part_mix)


def _without_earlier(spec: ModelSpec) -> ModelSpec:
    import dataclasses

    return dataclasses.replace(spec, earlier=None)
