"""Model families: one module a family, each behind one interface
(:class:`bayes_rr.families.base.Family`), registered in :data:`FAMILIES`.

A family module declares its terms and default priors (``INFO``), builds its PyMC
model (PyMC is imported only then), draws its prior forward in numpy, turns posterior
draws into call probabilities and its own estimands, gives the call probabilities the
predictive check replicates, and lists its hyper-parameters. Shared pieces:
``terms`` (terms and defaults several families use), ``base`` (the interface),
``forward`` (numpy prior draws), ``pymc_parts`` (PyMC pieces), ``layout``
(coordinates), ``status`` (the two status families), ``curves`` (call curves).

May import: ``core``, ``study``. Never imports PyMC at import time.
"""

from __future__ import annotations

from typing import TYPE_CHECKING

import numpy as np

from bayes_rr.core.errors import SpecError
from bayes_rr.families import (
    beta_binomial,
    call_curve,
    crossed_logit,
    latent_class,
    latent_trait,
    reference_logit,
)
from bayes_rr.families.base import Family

if TYPE_CHECKING:
    import pymc as pm
    import xarray as xr

    from bayes_rr.priors.spec import ModelSpec
    from bayes_rr.study.data import StudyData

FAMILIES: dict[str, Family] = {
    module.FAMILY.name: module.FAMILY
    for module in (
        beta_binomial,
        crossed_logit,
        reference_logit,
        latent_class,
        call_curve,
        latent_trait,
    )
}
"""The one table of families: adding a family adds its module here."""


def family_of(spec_or_name: ModelSpec | str) -> Family:
    """The family of a spec (or of a family name)."""
    name = spec_or_name if isinstance(spec_or_name, str) else spec_or_name.family
    if name not in FAMILIES:
        raise SpecError(f"family {name!r}: expected one of {sorted(FAMILIES)}")
    return FAMILIES[name]


def build_model(spec: ModelSpec, study: StudyData) -> pm.Model:
    """Build the PyMC model of ``spec`` for ``study`` (nothing is sampled)."""
    model = family_of(spec).build(spec, study)
    if spec.earlier is not None:
        from bayes_rr.families.pymc_parts import add_earlier_study

        add_earlier_study(model, spec)
    return model


def build_sampling_model(spec: ModelSpec, study: StudyData, integrate: bool = True) -> pm.Model:
    """The PyMC model the sampler runs for ``spec`` and ``study``: the family's
    reparameterized model when it has one (``Family.build_sampled``), else ``build``'s.
    ``integrate=False`` keeps every effect sampled (the refit after a failed rule check).
    """
    family = family_of(spec)
    if family.build_sampled is None:
        return build_model(spec, study)
    model = family.build_sampled(spec, study, integrate)
    if spec.earlier is not None:
        from bayes_rr.families.pymc_parts import add_earlier_study

        add_earlier_study(model, spec)
    return model


def sampled_form(spec: ModelSpec, study: StudyData, integrate: bool = True) -> str:
    """In words, how the sampler's model differs from the stated one."""
    family = family_of(spec)
    if family.sampled_form is None:
        return "as stated"
    return family.sampled_form(spec, study, integrate)


COMPLETION_SEED_OFFSET = 7919
"""Added to the fit's seed for the draws made after sampling (a stream of its own)."""


def complete_draws(posterior: xr.Dataset, spec: ModelSpec, study: StudyData,
                   seed: int) -> tuple[xr.Dataset, dict]:  # fmt: skip
    """The stated model's draws from the sampler's (``Family.complete``), with the check
    of any rule that integrated effects out (an empty dict when there was none)."""
    family = family_of(spec)
    if family.complete is None:
        return posterior, {}
    rng = np.random.default_rng(seed + COMPLETION_SEED_OFFSET)
    return family.complete(posterior, spec, study, rng)


def default_model(study) -> tuple[str, str]:
    """The model ``fit`` uses without ``--model``, and why, in a sentence."""
    if study.reference is not None and study.reference.nunique() == 2:
        return "reference-logit", (
            "the data give each part's reference status, so the reference-logit model "
            "estimates false reject and false accept rates (--model to choose another)"
        )
    if getattr(study, "partial_status", None) is not None:
        known = int(study.partial_status.notna().sum())
        return "latent-class", (
            f"the data give the reference status of {known} of {len(study.parts)} parts, so "
            "the latent-class model uses those and infers the others' from the calls "
            "(--model to choose another)"
        )
    if study.reference_value is not None and study.limits != (None, None):
        return "call-curve", (
            "the data give a measured reference value per part and a limit, so the "
            "call-curve model estimates each appraiser's effective limit (--model to choose "
            "another)"
        )
    return "crossed-logit", "model crossed-logit (--model to choose another)"
