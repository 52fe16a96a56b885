"""Draws from a spec's prior, in numpy: the prior predictive check without PyMC.

Each family's parameters are drawn forward, with the names, dimensions and
parameterisation the family builders give them (``bayes_rr.families``), so that the
estimands read prior draws exactly as they read posterior draws. The tests compare
these draws with ``pymc.sample_prior_predictive`` of the built model, variable by
variable. This module never imports PyMC.

One deliberate difference: the latent class family orders its two intercepts
(reject above accept). The prior density it samples is the normal pair restricted to
that order; PyMC's forward draws ignore the order, so here draws out of order are
rejected and drawn again.
"""

from __future__ import annotations

import numpy as np
import xarray as xr

from bayes_rr.families import family_of
from bayes_rr.families.layout import coords, curve_design
from bayes_rr.priors.spec import ModelSpec
from bayes_rr.study.data import StudyData


def draw_prior(spec: ModelSpec, study: StudyData, draws: int, seed: int) -> xr.Dataset:
    """``draws`` draws of the stated priors of ``spec`` on ``study``'s design, one chain.

    The earlier-study factors of a spec are not drawn here (``checks.prior_predictive``
    resamples these draws with the factors as weights).
    """
    rng = np.random.default_rng([seed, 11])
    variables = family_of(spec).prior_draws(spec, study, rng, draws)
    names = coords(study)
    data_vars = {}
    for name, (dims, values) in variables.items():
        data_vars[name] = (("chain", "draw", *dims), np.asarray(values)[None])
    ds = xr.Dataset(data_vars, coords={"chain": [0], "draw": np.arange(draws)})
    used = {d for dims, _ in variables.values() for d in dims}
    extra = {d: names[d] for d in used if d in names}
    if "side" in used:
        extra["side"] = [name for name, _, _ in curve_design(study, spec.name)["sides"]]
    return ds.assign_coords(extra)
