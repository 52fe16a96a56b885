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
    return importlib.import_module(_MODULES[spec.family]).build(spec, study)
