"""Family 1 of estimands.md: beta-binomial, appraisers exchangeable within a part."""

from __future__ import annotations

import pymc as pm

from bayes_rr.data import StudyData
from bayes_rr.families.common import (
    coords,
    group_effect,
    observed_calls,
    pymc_prior,
    reference_term,
    resolve_parameterization,
)
from bayes_rr.spec import ModelSpec


def build(spec: ModelSpec, study: StudyData) -> pm.Model:
    """logit pi_i = mu + a_i (+ beta r_i); s_ij ~ BetaBinomial(n_ij, pi_i phi, (1-pi_i) phi),
    with rho = 1/(phi + 1) shared or per part."""
    cells = study.cells
    part = cells["part_index"].to_numpy()
    term = spec.term("part")
    assert spec.concentration is not None  # the spec layer requires it for this family
    with pm.Model(coords=coords(study)) as model:
        eta = pymc_prior("intercept", spec.intercept)
        scale = pymc_prior("sigma_part", term.prior)
        effect = group_effect("part_effect", scale, "part", resolve_parameterization(term, study))
        eta = eta + effect[part] + reference_term(spec, study, part)
        pi = pm.math.invlogit(eta)
        if spec.concentration.sharing == "per_part":
            rho = pymc_prior("rho", spec.concentration.prior, dims="part")[part]
        else:
            rho = pymc_prior("rho", spec.concentration.prior)
        phi = 1.0 / rho - 1.0
        pm.BetaBinomial(
            "s",
            alpha=pi * phi,
            beta=(1.0 - pi) * phi,
            n=cells["n"].to_numpy(),
            observed=observed_calls(study),
            dims="cell",
        )
    return model
