"""Terms and default priors that several families share, each with the reason for it.

A family module declares its own terms from these (and its own defaults). Defaults are weakly
informative on the logit scale: they rule out absurd call-rate patterns but
let a study of typical size (30-60 parts, 2-4 appraisers, 2-3 trials) speak.
This module never imports PyMC.
"""

from __future__ import annotations

from dataclasses import dataclass

from bayes_rr.core.distributions import Prior

UNCONSTRAINED = {"real": "identity", "positive": "log", "unit": "logit"}
"""The scale on which each support is unconstrained (and approximated by a normal)."""


def prior(distribution: str, **params: float) -> Prior:
    return Prior(distribution, tuple(params.items()))


@dataclass(frozen=True)
class TermInfo:
    """A term a family may have.

    ``kind`` is ``"group"`` (a hierarchical effect with a scale prior and a
    parameterization) or ``"fixed"`` (one coefficient with a prior).
    """

    name: str
    kind: str
    default_prior: Prior
    why: str


@dataclass(frozen=True)
class FamilyInfo:
    """What a family declares: its terms, named intercepts and optional parts, each with
    its default prior, and what the data must hold.

    ``intercepts``: named priors the family takes in the spec's ``[intercept]`` table
    instead of one ``prior`` (one per status of a part: ``accept_prior`` and
    ``reject_prior``; a call curve's ``bias_prior`` and ``log_width_prior``), with their
    defaults. ``prevalence_prior``: the default prior on the share of reject parts
    (``[prevalence] prior``), None when the family has none; ``concentration_prior``
    likewise for ``[concentration]``; ``links``: the ``[curve] link`` choices (empty:
    no curve). ``needs``: what the data must hold (``"reference"``: a status per part;
    ``"reference_value"``: a measured value per part and a specification limit).
    ``reference_accuracy``: whether the spec may state the reference's own error rates
    (``[reference_accuracy]``: the reference as a fallible rater).
    """

    name: str
    description: str
    terms: dict[str, TermInfo]
    required_terms: tuple[str, ...] = ()
    intercepts: dict[str, Prior] | None = None
    prevalence_prior: Prior | None = None
    concentration_prior: Prior | None = None
    links: tuple[str, ...] = ()
    needs: tuple[str, ...] = ()
    reference_accuracy: bool = False

    @property
    def has_prevalence(self) -> bool:
        return self.prevalence_prior is not None

    @property
    def has_concentration(self) -> bool:
        return self.concentration_prior is not None

    @property
    def has_curve(self) -> bool:
        """Whether the spec takes ``[curve] link`` (call curve, latent trait)."""
        return bool(self.links)

    @property
    def measured_curve(self) -> bool:
        """Whether calls are placed along a measured value against a limit."""
        return "reference_value" in self.needs


INTERCEPT_PRIOR = prior("normal", mu=0.0, sigma=1.5)
INTERCEPT_WHY = (
    "normal(0, 1.5) on the logit of the call rate of a typical part and appraiser: "
    "95% prior range of that rate about 0.05-0.95, flat-ish on the probability scale "
    "without piling mass at 0 and 1 as wider priors do."
)

PART_TERM = TermInfo(
    "part",
    "group",
    prior("half_normal", sigma=2.5),
    "half_normal(2.5) on the part scale: parts of attribute studies are chosen on both "
    "sides of the limit, so call rates from near 0 to near 1 across parts must be "
    "allowed (a part sd of 2.5 on the logit scale spans rates 0.01-0.99).",
)
APPRAISER_TERM = TermInfo(
    "appraiser",
    "group",
    prior("half_normal", sigma=1.0),
    "half_normal(1) on the appraiser scale: an appraiser's consistent leaning rarely "
    "multiplies the odds of a reject call by more than about 7 (logit shift 2); "
    "with 2-4 appraisers the data alone cannot estimate this scale well.",
)
INTERACTION_TERM = TermInfo(
    "interaction",
    "group",
    prior("half_normal", sigma=0.5),
    "half_normal(0.5) on the appraiser-by-part scale: part-specific disagreement "
    "beyond the appraiser's leaning is usually smaller than the leaning itself; it is "
    "only weakly identified from 2-3 trials per cell.",
)
REFERENCE_TERM = TermInfo(
    "reference",
    "fixed",
    prior("normal", mu=0.0, sigma=3.0),
    "normal(0, 3) on the logit difference between reference-reject and reference-accept "
    "parts: allows a working inspection (a difference of 4-8) without assuming it.",
)
STATUS_APPRAISER_TERM = TermInfo(
    "appraiser",
    "group",
    prior("half_normal", sigma=1.0),
    "half_normal(1) on each status's appraiser scale (accept parts, reject parts): an "
    "appraiser's leaning on good parts and on bad parts may differ (one is strict, another "
    "lenient); the two effects of an appraiser are correlated, with an LKJ(2) prior on "
    "the correlation (mildly favouring small correlations; 2-4 appraisers cannot estimate "
    "it well).",
)
ACCEPT_INTERCEPT_PRIOR = prior("normal", mu=-2.0, sigma=2.0)
REJECT_INTERCEPT_PRIOR = prior("normal", mu=2.0, sigma=2.0)
STATUS_INTERCEPT_WHY = (
    "normal(-2, 2) on the logit of a typical appraiser's reject rate on a typical good "
    "part, normal(2, 2) on a typical bad part: an inspection in use mostly accepts good "
    "parts and rejects bad ones (prior median false reject and false accept rates 0.12), "
    "but any rate from about 0.002 to 0.9 stays possible."
)
STATUS_INTERCEPTS = {"accept_prior": ACCEPT_INTERCEPT_PRIOR, "reject_prior": REJECT_INTERCEPT_PRIOR}
PARAMETERIZATIONS = ("centered", "noncentered", "auto")
AUTO_MIN_CALLS = 100
AUTO_MIN_LEVELS = 5
"""With ``parameterization = "auto"`` a group term is centered when every level has at
least ``AUTO_MIN_CALLS`` calls and there are at least ``AUTO_MIN_LEVELS`` levels;
otherwise noncentered. Centering pays when the data pin each effect down far more
tightly than the scale spreads them (sd of a level's effect ~ 1/sqrt(calls p(1-p)));
with few levels the scale's posterior reaches down to 0, where a centered term
forms a funnel (measured on the demo study: 3 appraisers with 135 calls each gave
52-63 divergences centered, 1 noncentered). Measured the other way: 15 parts with
240 calls each sampled noncentered gave r_hat 1.011 on the intercept and 13
divergences; centered they pass."""

AUTO_MANY_LEVELS = 100
AUTO_MANY_LEVELS_MIN_CALLS = 20
"""A second way to centered under ``auto``: a term with at least ``AUTO_MANY_LEVELS``
levels is centered once every level has at least ``AUTO_MANY_LEVELS_MIN_CALLS`` calls
(or the term's own ``auto_min_calls``, if lower). So many levels hold the scale well
away from 0 (no funnel), and 20 calls pin a level down within about 1/sqrt(20 x 0.2) =
0.5 logits, against the spread of parts chosen across the limit (about 2). Measured on
150 parts x 8 appraisers x 3 trials (24 calls a part, target_accept 0.9, two simulated
studies): the smallest ESS over every estimand and scale rose from 1,410-1,829
(noncentered parts) to 4,284-4,429 (centered), at the same cost. With few levels the
same calls are not enough: 6 parts x 2 appraisers x 10 trials (20 calls a part)
centered gave 12 divergences at 0.9 and 3 at 0.95, noncentered none."""

SAMPLERS = ("nutpie", "pymc")
SHARING = ("shared", "per_part")
