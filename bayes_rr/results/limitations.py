"""What a study's design (and a model's terms) cannot answer.

Some questions have no answer in some data: with one appraiser nothing shows
how appraisers differ; with one call per appraiser and part nothing shows an
appraiser disagreeing with themself; when every call is the same the data say
almost nothing; a model without appraiser terms has no reproducibility by
construction. A Bayesian fit still returns numbers in these cases, set by the
prior (or zero by the model's construction). This module names such results so
that the terminal, summary.json and the report mark them and withhold the
plain-language readings that rest on them. It reads the design only: no draws.
"""

from __future__ import annotations

from dataclasses import asdict, dataclass

from bayes_rr.families import family_of
from bayes_rr.study.data import StudyData

SPLIT_KEYS = (
    "repeatability_variance",
    "reproducibility_variance",
    "repeatability_sd",
    "reproducibility_sd",
    "repeatability_share",
    "reproducibility_share",
    "repeat_disagreement",
    "appraiser_bias_variance",
    "interaction_variance",
)
REPRODUCIBILITY_KEYS = (
    "reproducibility_variance",
    "reproducibility_sd",
    "reproducibility_share",
    "appraiser_bias_variance",
    "interaction_variance",
)
ALL_SCOPES = ("study", "population")

PRIOR = "prior"
"""The result is set by the prior: the data hold (almost) no information on it."""
CONSTRUCTION = "construction"
"""The result is fixed (zero, or one for a share) by the design or the model, not
measured."""


@dataclass(frozen=True)
class Limitation:
    """Results that the design or the model cannot inform.

    ``keys`` and ``scopes`` name the affected estimands (``keys == ("*",)`` means
    every one); ``effect`` is :data:`PRIOR` or :data:`CONSTRUCTION`; ``sentence`` says why in
    plain words.
    """

    code: str
    keys: tuple[str, ...]
    scopes: tuple[str, ...]
    effect: str
    sentence: str

    def covers(self, key: str, scope: str | None) -> bool:
        return ("*" in self.keys or key in self.keys) and (scope is None or scope in self.scopes)

    def as_dict(self) -> dict:
        out = asdict(self)
        out["keys"], out["scopes"] = list(self.keys), list(self.scopes)
        return out


def design_limitations(study: StudyData, spec=None) -> list[Limitation]:
    """The limitations of ``study`` (and of ``spec``'s terms, when given)."""
    out: list[Limitation] = []
    calls = study.calls["call"]
    if calls.nunique() == 1:
        which = "reject" if int(calls.iloc[0]) == 1 else "accept"
        out.append(
            Limitation(
                "no_variation",
                ("*",),
                ALL_SCOPES,
                PRIOR,
                f"Every call in the study is {which}, so the data cannot show any "
                "inconsistency: every result below is set by the priors.",
            )
        )
        return out
    if len(study.appraisers) < 2:
        out.append(
            Limitation(
                "one_appraiser",
                (*REPRODUCIBILITY_KEYS, "repeatability_share"),
                ("study",),
                CONSTRUCTION,
                "With one appraiser nobody can differ from anybody: for the study's "
                "appraiser, reproducibility is zero (and repeatability all of the "
                "inconsistency) by construction, not measured.",
            )
        )
        out.append(
            Limitation(
                "one_appraiser_population",
                ("*",),
                ("population",),
                PRIOR,
                "With one appraiser the data say nothing about how a new appraiser would "
                "differ: every result for a new appraiser is set by the prior on the "
                "appraiser scale.",
            )
        )
    if int(study.cells["n"].max()) < 2:
        out.append(
            Limitation(
                "one_trial",
                SPLIT_KEYS,
                ALL_SCOPES,
                PRIOR,
                "No appraiser called any part twice, so the data show the total inconsistency "
                "but not how it splits into repeatability and reproducibility: that split is "
                "set by the model's priors.",
            )
        )
    terms = family_of(spec).info.terms if spec is not None else {}
    if "appraiser" in terms and "interaction" in terms:
        missing = [t for t in ("appraiser", "interaction") if not spec.has(t)]
        if len(missing) == 2:
            out.append(
                Limitation(
                    "no_appraiser_terms",
                    REPRODUCIBILITY_KEYS,
                    ALL_SCOPES,
                    CONSTRUCTION,
                    f"The model {spec.name!r} has no appraiser or appraiser-by-part term, so "
                    "reproducibility is zero by the model's construction, not measured.",
                )
            )
        elif missing:
            key = "appraiser_bias_variance" if missing[0] == "appraiser" else "interaction_variance"
            out.append(
                Limitation(
                    f"no_{missing[0]}_term",
                    (key,),
                    ALL_SCOPES,
                    CONSTRUCTION,
                    f"The model {spec.name!r} has no {missing[0]} term, so its part of "
                    "reproducibility is zero by the model's construction.",
                )
            )
    return out


def limitation_for(limitations: list[Limitation], key: str, scope: str | None):
    """The first limitation covering ``key`` in ``scope``, or None."""
    return next((lim for lim in limitations if lim.covers(key, scope)), None)


def note_for(limitation: Limitation) -> str:
    """The short note put on a summary row the limitation covers."""
    if limitation.effect == CONSTRUCTION:
        return f"fixed by construction ({limitation.code.replace('_', ' ')})"
    return f"set by the prior ({limitation.code.replace('_', ' ')})"
