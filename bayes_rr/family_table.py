"""The declarative table of model families, their terms and default priors.

One place for every default, with the reason for it. Defaults are weakly
informative on the logit scale: they rule out absurd call-rate patterns but
let a study of typical size (30-60 parts, 2-4 appraisers, 2-3 trials) speak.
This module never imports PyMC.
"""

from __future__ import annotations

from dataclasses import dataclass

from bayes_rr.priors import Prior


def _p(distribution: str, **params: float) -> Prior:
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
    """A model family: its terms, whether it has a concentration, and its description.

    ``intercepts``: named priors the family takes in the spec's ``[intercept]`` table
    instead of one ``prior`` (one per status of a part: ``accept_prior`` and
    ``reject_prior``; a call curve's ``bias_prior`` and ``log_width_prior``), with their
    defaults. ``has_prevalence``: a prior on the share of reject parts (``[prevalence]
    prior``). ``has_curve``: a ``[curve] link`` choice. ``needs``: what the data must
    hold (``"reference"``: a status per part; ``"reference_value"``: a measured value
    per part and a specification limit).
    """

    name: str
    description: str
    terms: dict[str, TermInfo]
    required_terms: tuple[str, ...]
    has_concentration: bool
    intercepts: dict[str, Prior] | None = None
    has_prevalence: bool = False
    has_curve: bool = False
    needs: tuple[str, ...] = ()


INTERCEPT_PRIOR = _p("normal", mu=0.0, sigma=1.5)
INTERCEPT_WHY = (
    "normal(0, 1.5) on the logit of the call rate of a typical part and appraiser: "
    "95% prior range of that rate about 0.05-0.95, flat-ish on the probability scale "
    "without piling mass at 0 and 1 as wider priors do."
)

PART_TERM = TermInfo(
    "part",
    "group",
    _p("half_normal", sigma=2.5),
    "half_normal(2.5) on the part scale: parts of attribute studies are chosen on both "
    "sides of the limit, so call rates from near 0 to near 1 across parts must be "
    "allowed (a part sd of 2.5 on the logit scale spans rates 0.01-0.99).",
)
APPRAISER_TERM = TermInfo(
    "appraiser",
    "group",
    _p("half_normal", sigma=1.0),
    "half_normal(1) on the appraiser scale: an appraiser's consistent leaning rarely "
    "multiplies the odds of a reject call by more than about 7 (logit shift 2); "
    "with 2-4 appraisers the data alone cannot estimate this scale well.",
)
INTERACTION_TERM = TermInfo(
    "interaction",
    "group",
    _p("half_normal", sigma=0.5),
    "half_normal(0.5) on the appraiser-by-part scale: part-specific disagreement "
    "beyond the appraiser's leaning is usually smaller than the leaning itself; it is "
    "only weakly identified from 2-3 trials per cell.",
)
REFERENCE_TERM = TermInfo(
    "reference",
    "fixed",
    _p("normal", mu=0.0, sigma=3.0),
    "normal(0, 3) on the logit difference between reference-reject and reference-accept "
    "parts: allows a working inspection (a difference of 4-8) without assuming it.",
)
STATUS_APPRAISER_TERM = TermInfo(
    "appraiser",
    "group",
    _p("half_normal", sigma=1.0),
    "half_normal(1) on each status's appraiser scale (accept parts, reject parts): an "
    "appraiser's leaning on good parts and on bad parts may differ (one is strict, another "
    "lenient); the two effects of an appraiser are correlated, with an LKJ(2) prior on "
    "the correlation (mildly favouring small correlations; 2-4 appraisers cannot estimate "
    "it well).",
)
ACCEPT_INTERCEPT_PRIOR = _p("normal", mu=-2.0, sigma=2.0)
REJECT_INTERCEPT_PRIOR = _p("normal", mu=2.0, sigma=2.0)
STATUS_INTERCEPT_WHY = (
    "normal(-2, 2) on the logit of a typical appraiser's reject rate on a typical good "
    "part, normal(2, 2) on a typical bad part: an inspection in use mostly accepts good "
    "parts and rejects bad ones (prior median false reject and false accept rates 0.12), "
    "but any rate from about 0.002 to 0.9 stays possible."
)
STATUS_INTERCEPTS = {"accept_prior": ACCEPT_INTERCEPT_PRIOR, "reject_prior": REJECT_INTERCEPT_PRIOR}
PREVALENCE_PRIOR = _p("beta", alpha=1.0, beta=1.0)
PREVALENCE_WHY = (
    "beta(1, 1) on the share of reject parts among the study's parts: uniform, since "
    "studies pick their share of bad parts on purpose."
)
# Call curve: everything on the scale of the reference values standardised by their
# standard deviation in the study (so the defaults suit any unit).
LIMIT_TERM = TermInfo(
    "limit",
    "group",
    _p("half_normal", sigma=0.25),
    "half_normal(0.25) on the spread of appraisers' effective limits, in standard "
    "deviations of the study's reference values: appraisers rarely place the limit more "
    "than half the parts' spread apart.",
)
WIDTH_TERM = TermInfo(
    "width",
    "group",
    _p("half_normal", sigma=0.5),
    "half_normal(0.5) on the spread of appraisers' log transition widths: one appraiser's "
    "zone of inconsistent calls may be a few times another's.",
)
CURVE_INTERCEPTS = {
    "bias_prior": _p("normal", mu=0.0, sigma=0.5),
    "log_width_prior": _p("normal", mu=-2.0, sigma=1.0),
}
CURVE_INTERCEPTS_WHY = (
    "normal(0, 0.5) on the typical appraiser's bias (effective limit minus the limit) in "
    "standard deviations of the reference values; normal(-2, 1) on the log of the typical "
    "transition width in the same units (median 0.14 sd, 95% range 0.02 to 0.95 sd)."
)
LINKS = ("logistic", "probit")
CONCENTRATION_PRIOR = _p("beta", alpha=1.0, beta=3.0)
CONCENTRATION_WHY = (
    "beta(1, 3) on rho = 1/(phi + 1), the share of a part's call variance due to "
    "appraisers differing: mean 0.25, most mass below 0.5, any value in (0, 1) possible."
)

FAMILIES: dict[str, FamilyInfo] = {
    "logit": FamilyInfo(
        "logit",
        "crossed hierarchical logit: logit p_ij = mu + a_i + b_j + c_ij (estimands.md family 2)",
        {t.name: t for t in (PART_TERM, APPRAISER_TERM, INTERACTION_TERM, REFERENCE_TERM)},
        ("part",),
        False,
    ),
    "beta_binomial": FamilyInfo(
        "beta_binomial",
        "beta-binomial, appraisers exchangeable within a part: "
        "p_ij ~ Beta(pi_i phi, (1 - pi_i) phi) (estimands.md family 1)",
        {t.name: t for t in (PART_TERM, REFERENCE_TERM)},
        ("part",),
        True,
    ),
    "reference_logit": FamilyInfo(
        "reference_logit",
        "reference-aware logit: logit p_ij = mu_r(i) + a_i + b_j,r(i) + c_ij with the part's "
        "known reference status r(i) (estimands.md family 3)",
        {t.name: t for t in (PART_TERM, STATUS_APPRAISER_TERM, INTERACTION_TERM)},
        (),
        False,
        intercepts=STATUS_INTERCEPTS,
        needs=("reference",),
    ),
    "latent_class": FamilyInfo(
        "latent_class",
        "latent class: each part's status r(i) unknown, P(reject part) = theta, summed out "
        "of the likelihood; logit p_ij = mu_r + a_i + b_j,r with mu_reject > mu_accept "
        "(estimands.md family 4)",
        {t.name: t for t in (PART_TERM, STATUS_APPRAISER_TERM)},
        (),
        False,
        intercepts=STATUS_INTERCEPTS,
        has_prevalence=True,
    ),
    "call_curve": FamilyInfo(
        "call_curve",
        "call curve: p_ij = F((x_i - t_j)/w_j) for a measured reference value x_i and a "
        "specification limit, with each appraiser's effective limit t_j and transition "
        "width w_j (estimands.md family 5)",
        {t.name: t for t in (LIMIT_TERM, WIDTH_TERM)},
        (),
        False,
        intercepts=CURVE_INTERCEPTS,
        has_curve=True,
        needs=("reference_value",),
    ),
}

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

SAMPLERS = ("nutpie", "pymc")
SHARING = ("shared", "per_part")


def default_model(study) -> tuple[str, str]:
    """The model ``fit`` uses without ``--model``, and why, in a sentence."""
    if study.reference is not None and study.reference.nunique() == 2:
        return "reference-logit", (
            "the data give each part's reference status, so the reference-logit model "
            "estimates false reject and false accept rates (--model to choose another)"
        )
    if study.reference_value is not None and study.limits != (None, None):
        return "call-curve", (
            "the data give a measured reference value per part and a limit, so the "
            "call-curve model estimates each appraiser's effective limit (--model to choose "
            "another)"
        )
    return "crossed-logit", "model crossed-logit (--model to choose another)"
