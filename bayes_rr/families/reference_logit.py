"""Family 3 of estimands.md: the logit model with the part's known reference status.

logit p_ij = mu_r(i) + a_i + b_j,r(i) + c_ij: a typical appraiser's call rate on good
parts (mu_accept) and on bad parts (mu_reject), parts differing within their status
(a_i), each appraiser leaning differently on good and on bad parts (b_j,accept and
b_j,reject, correlated), and appraiser-by-part disagreement (c_ij).
"""

from __future__ import annotations

import pymc as pm

from bayes_rr.data import StudyData
from bayes_rr.errors import DataError
from bayes_rr.families.common import (
    appraiser_by_status,
    by_status,
    coords,
    group_effect,
    observed_calls,
    pymc_prior,
    resolve_parameterization,
    status_intercepts,
)
from bayes_rr.spec import ModelSpec


def reference_status(study: StudyData, spec: ModelSpec):
    """The parts' reference status (0 accept, 1 reject); both must occur."""
    if study.reference is None:
        raise DataError(
            f"{study.source}: the model {spec.name!r} needs each part's reference status "
            "(a 'reference' column, or --reference-col); without one use latent-class"
        )
    status = study.reference.to_numpy().astype(int)
    if status.min() == status.max():
        which = "reject" if status[0] else "accept"
        raise DataError(
            f"{study.source}: every part has reference status {which!r}; the model "
            f"{spec.name!r} needs parts of both statuses to estimate both error rates"
        )
    return status


def build(spec: ModelSpec, study: StudyData) -> pm.Model:
    """s_ij ~ Binomial(n_ij, expit(mu_r(i) + a_i + b_j,r(i) + c_ij))."""
    status = reference_status(study, spec)
    cells = study.cells
    part = cells["part_index"].to_numpy()
    app = cells["appraiser_index"].to_numpy()
    with pm.Model(coords=coords(study)) as model:
        mu = status_intercepts(spec)
        eta = by_status(mu[0], mu[1], status[part])
        if spec.has("part"):
            term = spec.term("part")
            scale = pymc_prior("sigma_part", term.prior)
            effect = group_effect("part_effect", scale, "part",
                                  resolve_parameterization(term, study))  # fmt: skip
            eta = eta + effect[part]
        if spec.has("appraiser"):
            accept, reject = appraiser_by_status(spec.term("appraiser"))
            eta = eta + by_status(accept[app], reject[app], status[part])
        if spec.has("interaction"):
            term = spec.term("interaction")
            scale = pymc_prior("sigma_interaction", term.prior)
            eta = eta + group_effect("interaction_effect", scale, "cell",
                                     resolve_parameterization(term, study))  # fmt: skip
        pm.Binomial("s", n=cells["n"].to_numpy(), logit_p=eta, observed=observed_calls(study),
                    dims="cell")  # fmt: skip
    return model
