"""Model families: how a spec and a study become a PyMC model.

Each family module has ``build(spec, study) -> pm.Model`` (a pure function)
with coords ``part``, ``appraiser`` and ``cell`` and a likelihood on cells.
The table of families, terms and default priors is ``bayes_rr.family_table``;
PyMC is imported only when a model is built.
"""

from __future__ import annotations

import importlib
from typing import TYPE_CHECKING

from bayes_rr.errors import SpecError

if TYPE_CHECKING:
    import pymc as pm

    from bayes_rr.data import StudyData
    from bayes_rr.spec import ModelSpec

_MODULES = {
    "logit": "bayes_rr.families.logit",
    "beta_binomial": "bayes_rr.families.beta_binomial",
    "reference_logit": "bayes_rr.families.reference_logit",
    "latent_class": "bayes_rr.families.latent_class",
    "call_curve": "bayes_rr.families.call_curve",
}


def build_model(spec: ModelSpec, study: StudyData) -> pm.Model:
    """Build the PyMC model of ``spec`` for ``study`` (nothing is sampled)."""
    if spec.family not in _MODULES:
        raise SpecError(f"{spec.source}: no builder for family {spec.family!r}")
    model = importlib.import_module(_MODULES[spec.family]).build(spec, study)
    if spec.earlier is not None:
        add_earlier_study(model, spec)
    return model


def add_earlier_study(model: pm.Model, spec: ModelSpec) -> None:
    """Multiply the stated priors by the earlier study's factors, each raised to the
    study's weight: ``weight * log N(u; mu, sigma)`` on the unconstrained scale ``u``."""
    import pymc as pm

    from bayes_rr.families.layout import STATUSES

    transforms = {
        "identity": lambda x: x,
        "log": pm.math.log,
        "logit": pm.math.logit,
    }
    weight = spec.earlier.weight
    with model:
        for factor in spec.earlier.factors:
            if factor.parameter not in model.named_vars:
                continue  # a term the new data cannot carry (e.g. no reference column)
            value = model[factor.parameter]
            if factor.status is not None:
                value = value[STATUSES.index(factor.status)]
            u = transforms[factor.scale](value)
            label = factor.parameter if factor.status is None else (
                f"{factor.parameter}_{factor.status}")  # fmt: skip
            pm.Potential(
                f"earlier_{label}", (weight * -0.5 * ((u - factor.mu) / factor.sigma) ** 2).sum()
            )
