"""One name and one meaning per result, used by the terminal, summary.json and the
report alike (so a quantity never goes by several names)."""

from __future__ import annotations

# key -> (name, meaning)
GLOSSARY: dict[str, tuple[str, str]] = {
    "call_rate": ("reject-call rate", "the probability that a call on a part is reject"),
    "rr_variance": (
        "total variance T",
        "the variance of one 0/1 call, pi(1 - pi): repeatability plus reproducibility",
    ),
    "repeatability_variance": (
        "repeatability variance R",
        "the part of T from an appraiser disagreeing with themself: the mean of p(1 - p)",
    ),
    "reproducibility_variance": (
        "reproducibility variance V",
        "the part of T from appraisers differing: the variance of p over appraisers",
    ),
    "rr_sd": ("total standard deviation", "the square root of T"),
    "repeatability_sd": ("repeatability standard deviation", "the square root of R"),
    "reproducibility_sd": ("reproducibility standard deviation", "the square root of V"),
    "reproducibility_share": (
        "reproducibility share V/T",
        "the share of the calls' inconsistency due to appraisers differing",
    ),
    "repeatability_share": (
        "repeatability share R/T",
        "the share of the calls' inconsistency due to appraisers' own inconsistency",
    ),
    "repeat_disagreement": (
        "repeat disagreement 2R",
        "the probability that two calls by one appraiser on one part disagree",
    ),
    "cross_disagreement": (
        "cross disagreement 2T",
        "the probability that two calls on one part by two appraisers disagree",
    ),
    "appraiser_bias_variance": (
        "V from appraisers' leaning",
        "the part of V from appraisers leaning the same way on every part",
    ),
    "interaction_variance": (
        "V from part-specific disagreement",
        "the part of V from appraisers disagreeing differently on different parts",
    ),
    "false_reject_rate": ("false reject rate", "the share of good parts called reject"),
    "false_accept_rate": ("false accept rate", "the share of bad parts called accept"),
    "reference_agreement": (
        "agreement with the reference",
        "the share of calls that match the part's reference status",
    ),
    "effective_limit": (
        "effective limit",
        "the measured value at which the appraiser rejects half the time",
    ),
    "bias": ("limit bias", "effective limit minus the specification limit"),
    "transition_width": (
        "transition width",
        "the distance along the judged property (the measured value, or the latent scale) "
        "from 10% to 90% reject probability, whatever the curve's link: the zone where "
        "calls are unreliable",
    ),
    "limit_spread": (
        "spread of effective limits",
        "the standard deviation of the appraisers' effective limits",
    ),
    "threshold": (
        "threshold",
        "the position on the latent scale at which the appraiser rejects half the time, in "
        "sds of the parts' positions",
    ),
    "threshold_spread": (
        "spread of thresholds",
        "the standard deviation of the appraisers' thresholds on the latent scale",
    ),
    "spread_to_width": (
        "threshold spread over width",
        "the spread of the thresholds over the typical transition width: how far apart "
        "appraisers place their thresholds, in units of their zone of unreliable calls",
    ),
    "latent_limit": (
        "limit on the latent scale",
        "the position that separates good parts from bad ones, placed by the parts whose "
        "reference status is known, in sds of the parts' positions",
    ),
    "reject_prevalence": (
        "share of bad parts",
        "the share of bad parts: among the study's parts (study) or among parts like them "
        "(population), when the status is not known for every part",
    ),
    "reject_probability": (
        "probability the part is bad",
        "the posterior probability that the part's true status is bad",
    ),
    "reference_wrong_probability": (
        "probability the reference is wrong",
        "the posterior probability that the part's reference status is not its true "
        "status (a fallible reference: the reference's stated error rates and every "
        "appraiser's calls weighed together)",
    ),
    "reference_false_reject_rate": (
        "reference's false reject rate",
        "the probability that the reference calls a good part bad (its stated prior "
        "updated by the calls)",
    ),
    "reference_false_accept_rate": (
        "reference's false accept rate",
        "the probability that the reference calls a bad part good (its stated prior "
        "updated by the calls)",
    ),
    "part_position": (
        "part position",
        "the part's place on the latent scale of the judged property, in sds of the parts",
    ),
    "bad_share": ("bad share", "the share of bad parts among the parts production makes"),
    "escaped_per_million": (
        "escaped bad parts per million",
        "bad parts called accept and shipped, per million parts made",
    ),
    "rejected_good_per_million": (
        "rejected good parts per million",
        "good parts called reject, per million parts made",
    ),
    "shipped_bad_share": (
        "bad share among shipped parts",
        "the chance that a part the inspection accepts is bad",
    ),
    "calls_per_part": (
        "calls per part",
        "the expected number of calls an inspection strategy spends on one part",
    ),
    "cost_per_1000": (
        "cost per 1,000 parts",
        "rejected good parts, escapes and calls, at the stated costs, per 1,000 parts made",
    ),
    "probability_cheapest": (
        "probability cheapest",
        "the posterior probability that the strategy has the least cost",
    ),
}

SCOPES = {
    "study": "the study's appraisers",
    "population": "a new appraiser from the same population",
    "production": "the study's appraisers on the line's parts, as the production file states them",
}
"""Scopes in words (docs/statistics.md): results about the appraisers who took part, or about
an appraiser not in the study."""


def name(key: str) -> str:
    """The result's name (the key itself, spaced, when the glossary has none)."""
    base, _, rest = key.partition("[")
    found = GLOSSARY.get(base)
    label = found[0] if found else base.replace("_", " ")
    return f"{label} [{rest}" if rest else label


def meaning(key: str) -> str:
    found = GLOSSARY.get(key.partition("[")[0])
    return found[1] if found else ""


def as_dict() -> dict:
    """The glossary block of summary.json."""
    return {
        "results": {k: {"name": n, "meaning": m} for k, (n, m) in GLOSSARY.items()},
        "scopes": dict(SCOPES),
    }


def result_label(variable: str) -> str:
    """``study__study__repeatability_variance`` -> "repeatability variance (study)"."""
    scope, _, key = variable.split("__")
    return f"{name(key)} ({scope})"
