"""Family 4 of estimands.md: two latent classes of parts, no reference needed.

Each part is a reject part with probability theta (``prevalence``); given its class r,
logit p_ij = mu_r + a_i + b_j,r, with mu_reject > mu_accept (an ordered pair, so the
labels cannot switch). The class is summed out of the likelihood per part, and so is the
part's effect (Gauss-Hermite quadrature): nothing discrete is sampled, and no part's
effect can be caught between the two modes "good part called strictly" and "bad part
called leniently". Parts with the same calls then share one likelihood term, weighted
by their number.
"""

from __future__ import annotations

import numpy as np
import pymc as pm
import pytensor.tensor as pt

from bayes_rr.data import StudyData
from bayes_rr.errors import DataError
from bayes_rr.families.common import (
    appraiser_by_status,
    coords,
    pymc_prior,
    status_intercepts,
)
from bayes_rr.spec import ModelSpec
from bayes_rr.wrong_calls import call_patterns, identification_problem, part_nodes


def build(spec: ModelSpec, study: StudyData) -> pm.Model:
    """log L = sum_k w_k log[(1 - theta) L_k(accept) + theta L_k(reject)], where L_k(r)
    integrates the part's effect a ~ N(0, sigma_part) by Gauss-Hermite quadrature."""
    problem = identification_problem(study)
    if problem:
        raise DataError(f"{study.source}: {problem}")
    patterns = call_patterns(study)
    u, log_w = part_nodes(spec.has("part"))
    n, s = patterns.n[None], patterns.s[None]  # (1, K, J) against nodes (Q, 1, 1)
    with pm.Model(coords=coords(study)) as model:
        mu = status_intercepts(spec, ordered=True)
        theta = pymc_prior("prevalence", spec.prevalence)
        effects = (0.0, 0.0)
        if spec.has("appraiser"):
            effects = appraiser_by_status(spec.term("appraiser"))
        a = 0.0
        if spec.has("part"):
            a = pymc_prior("sigma_part", spec.term("part").prior) * u[:, None, None]
        log_lik = []
        for status in (0, 1):
            eta = mu[status] + effects[status] + a  # (Q, K, J)
            # log expit(eta) = -log(1 + e^-eta), stable for any eta
            calls = (-s * pt.softplus(-eta) - (n - s) * pt.softplus(eta)).sum(axis=-1)
            log_lik.append(pt.logsumexp(calls + log_w[:, None], axis=0))
        mixed = pt.logaddexp(pt.log1p(-theta) + log_lik[0], pm.math.log(theta) + log_lik[1])
        pm.Potential("calls", (np.asarray(patterns.weight) * mixed).sum())
    return model
