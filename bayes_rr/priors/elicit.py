"""Priors from statements in the trade's words.

A statements file (TOML) names the model to start from and says, for each
quantity, a typical value and a bound that holds "almost surely" (with probability
``sure``, 0.95 unless given)::

    model = "reference-logit"

    [[statement]]
    about = "false_reject_rate"   # a typical appraiser on a typical good part
    typical = 0.05                # about 1 in 20 good parts rejected
    at_most = 0.2                 # almost surely under 0.2

Each statement sets one prior of the spec by matching two quantiles exactly: the
median to ``typical`` and the ``sure`` (or ``1 - sure``) quantile to the bound,
through a monotone map from the parameter to the quantity (so the quantity's
quantiles are the parameter's quantiles mapped). The mapping:

==================== ===================== =============================================
about                prior set             quantity as a function of the parameter
==================== ===================== =============================================
call_rate            intercept.prior       expit(mu): a typical part and appraiser's
                                           reject rate (crossed-logit, beta-binomial)
false_reject_rate    intercept.accept_     expit(mu_accept): a typical appraiser on a
                     prior                 typical good part (status families)
false_accept_rate    intercept.reject_     1 - expit(mu_reject): a typical appraiser on a
                     prior                 typical bad part (status families)
appraiser_difference terms.appraiser.      expit(logit(at) + 0.6745 sigma) - at: how far a
                     scale_prior           typical appraiser's rate lies from the average
                                           appraiser's (0.6745 sigma is the median |b| of
                                           b ~ N(0, sigma)), at the call rate ``at``
repeat_disagreement  terms.part.           E[2 p (1 - p)], logit p = logit(at) + a,
                     scale_prior           a ~ N(0, sigma): how often two calls of one part
                                           by one appraiser disagree, averaged over parts;
                                           wider part spread, fewer borderline parts
reference_false_     reference_accuracy.   the rate itself: P(reference calls bad | good
reject_rate          false_reject_prior    part), a beta prior (reference-logit: the
                                           reference becomes a fallible rater)
reference_false_     reference_accuracy.   P(reference calls good | bad part), a beta
accept_rate          false_accept_prior    prior, likewise
==================== ===================== =============================================

Rates map to a normal prior on the logit scale; scales to a gamma prior. The
mapping leaves out the other terms (the appraiser and interaction effects in
``repeat_disagreement``, say): the prior predictive check of a fit shows what all
the priors together imply. Quantile matching is done here with scipy; PreliZ
(made for this) was tried with the registry's version 0.24, which does not import
with the matplotlib this project pins (matplotlib.style.core is gone in 3.11).
This module never imports PyMC.
"""

from __future__ import annotations

import math
import tomllib
from dataclasses import dataclass, replace
from pathlib import Path

import numpy as np
from scipy import optimize, stats
from scipy.special import expit, logit

from bayes_rr.core import tomlio
from bayes_rr.core.distributions import Prior, make_prior
from bayes_rr.core.errors import SpecError
from bayes_rr.families import FAMILIES, family_of
from bayes_rr.priors.spec import ModelSpec, load_spec, parse_spec

MEDIAN_ABS_NORMAL = float(stats.norm.ppf(0.75))
"""Median of |b| for b ~ N(0, 1)."""
SCALE_RANGE = (1e-3, 20.0)


@dataclass(frozen=True)
class Statement:
    """One belief: ``about`` is about ``typical`` and at most (or at least) ``bound``
    with probability ``sure``."""

    about: str
    typical: float
    bound: float
    side: str  # "at_most" or "at_least"
    sure: float = 0.95
    at: float = 0.5


@dataclass(frozen=True)
class Kind:
    location: tuple[str, ...]
    what: str

    def families(self, name: str) -> tuple[str, ...]:
        """The families whose models take a statement of this kind."""
        return tuple(f for f, family in FAMILIES.items() if name in family.statements)


# Which family takes which kind is the family's own declaration (``Family.statements``).
KINDS = {
    "call_rate": Kind(("intercept", "prior"), "reject rate of a typical part and appraiser"),
    "false_reject_rate": Kind(("intercept", "accept_prior"),
                              "a typical appraiser's reject rate on a typical good part"),
    "false_accept_rate": Kind(("intercept", "reject_prior"),
                              "a typical appraiser's accept rate on a typical bad part"),
    "appraiser_difference": Kind(("terms", "appraiser", "scale_prior"),
                                 "how far a typical appraiser's rate lies from the average"),
    "repeat_disagreement": Kind(("terms", "part", "scale_prior"),
                                "how often two calls of a part by one appraiser disagree"),
    "reference_false_reject_rate": Kind(("reference_accuracy", "false_reject_prior"),
                                        "how often the reference calls a good part bad"),
    "reference_false_accept_rate": Kind(("reference_accuracy", "false_accept_prior"),
                                        "how often the reference calls a bad part good"),
}  # fmt: skip


# ---------------------------------------------------------------------------
# quantity <-> parameter


def appraiser_difference(sigma, at: float = 0.5):
    """Rate distance of a typical appraiser (|b| at its median) from the average."""
    return expit(logit(at) + MEDIAN_ABS_NORMAL * np.asarray(sigma)) - at


GRID = np.linspace(-9.0, 9.0, 901)
GRID_WEIGHTS = stats.norm.pdf(GRID) * (GRID[1] - GRID[0])


def repeat_disagreement(sigma, at: float = 0.5):
    """E[2 p (1 - p)] with logit p = logit(at) + a, a ~ N(0, sigma), for a number or an
    array of sigmas.

    By the trapezoid rule on a standard normal grid: for this smooth integrand its
    error falls exponentially with the step (the integrand's poles lie pi/sigma off
    the real axis), below 1e-9 for sigma up to 20; Gauss-Hermite rules of modest
    size are not accurate for large sigma.
    """
    sigma = np.asarray(sigma, dtype=float)
    p = expit(logit(at) + sigma[..., None] * GRID)
    value = (2 * p * (1 - p)) @ GRID_WEIGHTS
    return float(value) if value.ndim == 0 else value


def _invert(f, value: float, what: str) -> float:
    low, high = SCALE_RANGE
    f_low, f_high = f(low) - value, f(high) - value
    if f_low * f_high > 0:
        span = sorted((f(low), f(high)))
        raise SpecError(
            f"{what} = {value:g} is outside what this term can express ({span[0]:.3g} to "
            f"{span[1]:.3g}); check the number"
        )
    return float(optimize.brentq(lambda s: f(s) - value, low, high, xtol=1e-10))


def gamma_through(q_med: float, q_other: float, level_other: float) -> Prior:
    """The gamma prior with median ``q_med`` and ``level_other`` quantile ``q_other``."""
    target = q_other / q_med

    def ratio(log_alpha: float) -> float:
        alpha = math.exp(log_alpha)
        return stats.gamma.ppf(level_other, alpha) / stats.gamma.ppf(0.5, alpha) - target

    try:
        log_alpha = optimize.brentq(ratio, math.log(2e-3), math.log(5e3), xtol=1e-12)
    except ValueError:
        raise SpecError(
            f"no gamma prior has median {q_med:.4g} and {level_other:.1%} quantile "
            f"{q_other:.4g}: the typical value and the bound are too close or too far apart"
        ) from None
    alpha = math.exp(log_alpha)
    beta = stats.gamma.ppf(0.5, alpha) / q_med
    return make_prior({"distribution": "gamma", "alpha": alpha, "beta": beta}, "prior")


def beta_through(q_med: float, q_other: float, level_other: float) -> Prior:
    """The beta prior with median ``q_med`` and ``level_other`` quantile ``q_other``: on
    the logit scale the two quantiles fix a location and a spread; the beta's
    concentration is found so both quantiles hold (one equation in its log, with the
    mean set by the median)."""

    def quantiles(log_total: float, mean: float) -> tuple[float, float]:
        total = math.exp(log_total)
        dist = stats.beta(mean * total, (1 - mean) * total)
        return float(dist.ppf(0.5)), float(dist.ppf(level_other))

    def fit(log_total: float) -> tuple[float, float]:
        # the mean that puts the median at q_med for this concentration
        mean = optimize.brentq(lambda m: quantiles(log_total, m)[0] - q_med, 1e-9, 1 - 1e-9,
                               xtol=1e-14)  # fmt: skip
        return mean, quantiles(log_total, mean)[1] - q_other

    low, high = math.log(2e-3), math.log(2e4)
    try:
        log_total = optimize.brentq(lambda x: fit(x)[1], low, high, xtol=1e-12)
    except ValueError:
        raise SpecError(
            f"no beta prior has median {q_med:.4g} and {level_other:.1%} quantile "
            f"{q_other:.4g}: the typical value and the bound are too close or too far apart"
        ) from None
    mean = fit(log_total)[0]
    total = math.exp(log_total)
    return make_prior({"distribution": "beta", "alpha": mean * total,
                       "beta": (1 - mean) * total}, "prior")  # fmt: skip


def normal_through(m: float, q_other: float, level_other: float) -> Prior:
    sigma = abs(q_other - m) / abs(stats.norm.ppf(level_other))
    return make_prior({"distribution": "normal", "mu": m, "sigma": sigma}, "prior")


def prior_for(statement: Statement) -> Prior:
    """The prior that makes ``statement`` hold exactly (median and bound)."""
    s = statement
    upper = s.side == "at_most"
    level = s.sure if upper else 1 - s.sure
    where = f"statement about {s.about}"
    if s.about in ("call_rate", "false_reject_rate"):
        return normal_through(logit(s.typical), logit(s.bound), level)
    if s.about == "false_accept_rate":
        # a larger accept rate on bad parts is a smaller mu_reject
        return normal_through(logit(1 - s.typical), logit(1 - s.bound), 1 - level)
    if s.about.startswith("reference_"):
        return beta_through(s.typical, s.bound, level)
    if s.about == "appraiser_difference":
        f = lambda sigma: float(appraiser_difference(sigma, s.at))  # noqa: E731
        return gamma_through(_invert(f, s.typical, f"{where}: typical"),
                             _invert(f, s.bound, f"{where}: bound"), level)  # fmt: skip
    # repeat disagreement falls as the part scale grows: the bound's level flips
    f = lambda sigma: repeat_disagreement(sigma, s.at)  # noqa: E731
    return gamma_through(_invert(f, s.typical, f"{where}: typical"),
                         _invert(f, s.bound, f"{where}: bound"), 1 - level)  # fmt: skip


def implied(statement: Statement, prior: Prior, draws: int = 20_000, seed: int = 0) -> dict:
    """The statement's quantity under ``prior``, by sampling: median and bound quantile."""
    rng = np.random.default_rng(seed)
    values = prior.scipy().rvs(size=draws, random_state=rng)
    s = statement
    if s.about in ("call_rate", "false_reject_rate"):
        quantity = expit(values)
    elif s.about.startswith("reference_"):
        quantity = values
    elif s.about == "false_accept_rate":
        quantity = 1 - expit(values)
    elif s.about == "appraiser_difference":
        quantity = appraiser_difference(values, s.at)
    else:
        quantity = np.concatenate(
            [repeat_disagreement(chunk, s.at) for chunk in np.array_split(values, 10)]
        )
    level = s.sure if s.side == "at_most" else 1 - s.sure
    return {
        "median": float(np.median(quantity)),
        "bound_quantile": float(np.quantile(quantity, level)),
        "draws": draws,
    }


# ---------------------------------------------------------------------------
# statements file -> spec


def _unit(value: object, where: str, source: str) -> float:
    ok = isinstance(value, int | float) and not isinstance(value, bool)
    if not ok or not 0 < value < 1:
        raise SpecError(f"{source}: {where} = {value!r}: expected a number between 0 and 1")
    return float(value)


def parse_statements(text: str, source: str = "<statements>") -> tuple[str, str, list[Statement]]:
    """(model, name, statements) of a statements file."""
    try:
        raw = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise SpecError(f"{source}: not valid TOML ({exc})") from None
    unknown = sorted(set(raw) - {"model", "name", "statement"})
    if unknown:
        raise SpecError(f"{source}: unknown key(s) {unknown}; expected model, name, [[statement]]")
    model = raw.get("model")
    if not isinstance(model, str) or not model:
        raise SpecError(f"{source}: model = {model!r}: expected a bundled model name or spec file")
    name = raw.get("name", "")
    if not isinstance(name, str):
        raise SpecError(f"{source}: name = {name!r}: expected a string")
    tables = raw.get("statement")
    if not isinstance(tables, list) or not tables:
        raise SpecError(f"{source}: no [[statement]] table; see 'bayes-rr prior --help'")
    out = []
    for k, table in enumerate(tables, 1):
        where = f"statement {k}"
        allowed = {"about", "typical", "at_most", "at_least", "sure", "at"}
        extra = sorted(set(table) - allowed)
        if extra:
            raise SpecError(
                f"{source}: {where}: unknown key(s) {extra}; expected {sorted(allowed)}"
            )
        about = table.get("about")
        if about not in KINDS:
            raise SpecError(f"{source}: {where}: about = {about!r}: expected one of {list(KINDS)}")
        sides = [side for side in ("at_most", "at_least") if side in table]
        if len(sides) != 1:
            raise SpecError(f"{source}: {where}: give exactly one of 'at_most' or 'at_least'")
        typical = _unit(table.get("typical"), f"{where}.typical", source)
        bound = _unit(table[sides[0]], f"{where}.{sides[0]}", source)
        sure = _unit(table.get("sure", 0.95), f"{where}.sure", source)
        at = _unit(table.get("at", 0.5), f"{where}.at", source)
        if sure <= 0.5:
            raise SpecError(f"{source}: {where}.sure = {sure!r}: expected more than 0.5")
        beyond = bound > typical if sides[0] == "at_most" else bound < typical
        if not beyond:
            relation = "above" if sides[0] == "at_most" else "below"
            raise SpecError(
                f"{source}: {where}: {sides[0]} = {bound!r} must lie {relation} typical = "
                f"{typical!r}"
            )
        out.append(Statement(about, typical, bound, sides[0], sure, at))
    seen = [s.about for s in out]
    twice = sorted({a for a in seen if seen.count(a) > 1})
    if twice:
        raise SpecError(f"{source}: more than one statement about {twice}; keep one each")
    return model, name, out


def _set_prior(spec: ModelSpec, location: tuple[str, ...], prior: Prior) -> ModelSpec:
    if location[0] == "reference_accuracy":
        from bayes_rr.priors.spec import REFERENCE_PREVALENCE, ReferenceAccuracy

        # a statement about one side leaves the other exact until stated
        accuracy = spec.reference_accuracy or ReferenceAccuracy(0.0, 0.0, REFERENCE_PREVALENCE)
        side = location[1].removesuffix("_prior")
        return replace(spec, reference_accuracy=replace(accuracy, **{side: prior}))
    if location[0] == "intercept" and location[1] == "prior":
        return replace(spec, intercept=prior)
    if location[0] == "intercept":
        named = tuple((k, prior if k == location[1] else v) for k, v in spec.intercepts)
        return replace(spec, intercepts=named)
    terms = tuple(replace(t, prior=prior) if t.name == location[1] else t for t in spec.terms)
    return replace(spec, terms=terms)


def elicit(text: str, source: str = "<statements>") -> tuple[ModelSpec, list[dict]]:
    """The spec the statements give, and per statement the prior set and the check."""
    model, name, statements = parse_statements(text, source)
    spec = load_spec(model)
    rows = []
    for statement in statements:
        kind = KINDS[statement.about]
        if statement.about not in family_of(spec).statements:
            raise SpecError(
                f"{source}: a statement about {statement.about} needs a model of family "
                f"{' or '.join(kind.families(statement.about))}; {spec.name!r} is "
                f"{spec.family!r}"
            )
        if kind.location[0] == "terms" and not spec.has(kind.location[1]):
            raise SpecError(
                f"{source}: a statement about {statement.about} sets the {kind.location[1]} "
                f"term's prior, which the {spec.name!r} model does not have"
            )
        try:
            prior = prior_for(statement)
        except ValueError as exc:
            # the numbers are valid alone but give a prior no fit can use
            raise SpecError(
                f"{source}: the statement about {statement.about} (typical "
                f"{statement.typical:g}, {statement.side.replace('_', ' ')} {statement.bound:g}, "
                f"sure {statement.sure:g}) needs a prior outside what the model takes ({exc}); "
                "together they ask for a prior far wider or narrower than any study supports; "
                "check the typical value, the bound and sure"
            ) from None
        spec = _set_prior(spec, kind.location, prior)
        check = implied(statement, prior)
        rows.append(
            {"about": statement.about, "what": kind.what, "sets": ".".join(kind.location),
             "prior": prior.text(), "typical": statement.typical, "bound": statement.bound,
             "side": statement.side, "sure": statement.sure, "at": statement.at, **{
                 f"implied_{k}": v for k, v in check.items()}}
        )  # fmt: skip
    header = [tomlio.comment(f"Priors from statements ({source}), written by bayes-rr prior.")]
    for row in rows:
        header.append(
            tomlio.comment(
                f"{row['about']}: typical {row['typical']:g}, {row['side'].replace('_', ' ')} "
                f"{row['bound']:g} with probability {row['sure']:g} -> {row['sets']} = "
                f"{row['prior']}"
            )
        )
    out_text = "\n".join(header) + "\n\n" + spec_toml(spec, name or f"{spec.name}-elicited")
    return parse_spec(out_text, source=source), rows


# ---------------------------------------------------------------------------
# spec -> TOML


def _prior_table(prior: Prior) -> dict:
    return {"distribution": prior.distribution, **{k: float(v) for k, v in prior.params}}


def spec_toml(spec: ModelSpec, name: str | None = None) -> str:
    """TOML text of ``spec`` (without comments; an earlier study is not written), through
    the serializer so a user's name or description stays a string."""
    table: dict = {"name": name or spec.name, "description": spec.description}
    if spec.suits:
        table["suits"] = spec.suits
    table["family"] = spec.family
    if spec.intercepts:
        table["intercept"] = {k: _prior_table(v) for k, v in spec.intercepts}
    else:
        table["intercept"] = {"prior": _prior_table(spec.intercept)}
    terms = {}
    for term in spec.terms:
        if term.kind == "group":
            terms[term.name] = {
                "scale_prior": _prior_table(term.prior),
                "parameterization": term.parameterization,
                "auto_min_calls": int(term.auto_min_calls),
            }
        else:
            terms[term.name] = {"prior": _prior_table(term.prior)}
    if terms:
        table["terms"] = terms
    if spec.concentration is not None:
        table["concentration"] = {
            "prior": _prior_table(spec.concentration.prior),
            "sharing": spec.concentration.sharing,
        }
    if spec.prevalence is not None:
        table["prevalence"] = {"prior": _prior_table(spec.prevalence)}
    if spec.reference_accuracy is not None:
        accuracy = spec.reference_accuracy
        block = {}
        for side, rate in accuracy.rates():
            if isinstance(rate, float):
                block[side] = float(rate)
            else:
                block[f"{side}_prior"] = _prior_table(rate)
        block["prevalence_prior"] = _prior_table(accuracy.prevalence)
        table["reference_accuracy"] = block
    if family_of(spec).info.has_curve:
        table["curve"] = {"link": spec.link}
    sampler = spec.sampler
    table["sampler"] = {
        "sampler": sampler.sampler, "draws": int(sampler.draws), "tune": int(sampler.tune),
        "chains": int(sampler.chains), "target_accept": float(sampler.target_accept),
    }  # fmt: skip
    return tomlio.dumps(table)


def load_statements(path: str | Path) -> tuple[ModelSpec, list[dict]]:
    path = Path(path)
    try:
        text = path.read_text(encoding="utf-8")
    except (OSError, UnicodeDecodeError) as exc:
        raise SpecError(f"{path}: cannot read the statements file ({exc})") from None
    return elicit(text, path.name)
