"""Family 2 of estimands.md: crossed hierarchical logit on cell counts."""

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

EFFECT_DIMS = {"part": "part", "appraiser": "appraiser", "interaction": "cell"}


def build(spec: ModelSpec, study: StudyData) -> pm.Model:
    """logit p_ij = mu + a_i + b_j + c_ij (+ beta r_i); s_ij ~ Binomial(n_ij, p_ij)."""
    cells = study.cells
    index = {
        "part": cells["part_index"].to_numpy(),
        "appraiser": cells["appraiser_index"].to_numpy(),
        "interaction": slice(None),
    }
    with pm.Model(coords=coords(study)) as model:
        eta = pymc_prior("intercept", spec.intercept)
        for term in spec.terms:
            if term.kind != "group":
                continue
            scale = pymc_prior(f"sigma_{term.name}", term.prior)
            effect = group_effect(
                f"{term.name}_effect",
                scale,
                EFFECT_DIMS[term.name],
                resolve_parameterization(term, study),
            )
            eta = eta + effect[index[term.name]]
        eta = eta + reference_term(spec, study, index["part"])
        pm.Binomial(
            "s",
            n=cells["n"].to_numpy(),
            logit_p=eta,
            observed=observed_calls(study),
            dims="cell",
        )
    return model
