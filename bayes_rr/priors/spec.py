"""Model specifications: TOML files parsed into frozen dataclasses and validated.

A spec is data, never code: it names a family from the family table, the
terms with their priors and parameterizations, and sampler defaults. Unknown
keys, unknown distributions and bad parameters raise :class:`SpecError`
naming the file, the key and the value. This module never imports PyMC.
"""

from __future__ import annotations

import hashlib
import tomllib
from dataclasses import dataclass
from importlib import resources
from pathlib import Path

from bayes_rr.core.distributions import Prior, make_prior
from bayes_rr.core.errors import SpecError
from bayes_rr.families import FAMILIES
from bayes_rr.families.terms import (
    AUTO_MIN_CALLS,
    INTERCEPT_PRIOR,
    PARAMETERIZATIONS,
    SAMPLERS,
    SHARING,
)

MAX_DRAWS = 100_000
"""Most draws (or warm-up draws) per chain: far beyond any study's needs, well below
what would exhaust memory before the memory check could say so."""
MAX_CHAINS = 64


@dataclass(frozen=True)
class TermSpec:
    """One term of a model.

    ``prior`` is the scale prior of a group term, or the coefficient prior of a
    fixed term.
    """

    name: str
    kind: str
    prior: Prior
    parameterization: str = "auto"
    auto_min_calls: int = AUTO_MIN_CALLS


@dataclass(frozen=True)
class ConcentrationSpec:
    """Beta-binomial concentration: a prior on rho = 1/(phi + 1), shared or per part."""

    prior: Prior
    sharing: str = "shared"


@dataclass(frozen=True)
class SamplerDefaults:
    """Sampler settings a spec suggests; command-line options override them."""

    sampler: str = "nutpie"
    draws: int = 1000
    tune: int = 1000
    chains: int = 4
    target_accept: float = 0.95


@dataclass(frozen=True)
class EarlierFactor:
    """What an earlier study said about one hyper-parameter: a normal factor
    N(mu, sigma) on the parameter's unconstrained scale (``identity``, ``log`` or
    ``logit``), multiplied into its stated prior with the study's weight."""

    parameter: str
    scale: str
    mu: float
    sigma: float
    status: str | None = None


@dataclass(frozen=True)
class EarlierStudy:
    """An earlier study carried in as prior (power-prior style: each factor is raised to
    ``weight``; weight 0 would be the stated priors alone, 1 the earlier study in full)."""

    weight: float
    factors: tuple[EarlierFactor, ...]
    fit: str = ""
    data_sha256: str = ""


@dataclass(frozen=True)
class ReferenceAccuracy:
    """The reference's own error rates (``[reference_accuracy]``): the reference is one
    more rater, fallible, and each part's true status is unknown.

    ``false_reject`` is P(reference calls bad | part good), ``false_accept`` is
    P(reference calls good | part bad): a prior on (0, 1), or a fixed number in [0, 0.5)
    (0: the reference is exact on that side). ``prevalence``: the prior on the share of
    bad parts among the study's parts, which the model now needs.
    """

    false_reject: Prior | float
    false_accept: Prior | float
    prevalence: Prior

    def rates(self) -> tuple[tuple[str, Prior | float], ...]:
        return (("false_reject", self.false_reject), ("false_accept", self.false_accept))

    @property
    def exact(self) -> bool:
        """Whether both rates are fixed at 0 (the reference taken as exact)."""
        return self.false_reject == 0.0 and self.false_accept == 0.0


REFERENCE_PREVALENCE = make_prior({"distribution": "beta", "alpha": 1.0, "beta": 1.0}, "prior")
"""Default prior on the share of bad parts when the reference is fallible: uniform, as
studies pick their share of bad parts on purpose."""
HIGHEST_REFERENCE_ERROR = 0.5
"""A reference wrong as often as right tells good from bad by nothing; above it, the
labels good and bad would swap."""


@dataclass(frozen=True)
class ModelSpec:
    """A validated model specification."""

    name: str
    description: str
    family: str
    intercept: Prior
    terms: tuple[TermSpec, ...]
    concentration: ConcentrationSpec | None
    sampler: SamplerDefaults
    source: str
    text: str
    intercepts: tuple[tuple[str, Prior], ...] = ()
    """Named intercept priors of families that take them (``accept_prior``, ...)."""
    link: str = "logistic"
    """The call curve's F: ``logistic`` or ``probit``."""
    prevalence: Prior | None = None
    """Prior of the share of reject parts (latent class family)."""
    suits: str = ""
    """Which data the model suits, in a sentence (shown by 'bayes-rr models')."""
    earlier: EarlierStudy | None = None
    """An earlier study carried in as prior (``[earlier_study]``), if any."""
    reference_accuracy: ReferenceAccuracy | None = None
    """The reference's stated error rates (``[reference_accuracy]``), or None when the
    reference is taken as the truth."""

    @property
    def sha256(self) -> str:
        return hashlib.sha256(self.text.encode()).hexdigest()

    @property
    def status_intercepts(self) -> tuple[Prior, Prior]:
        """(accept, reject) intercept priors of a status family."""
        named = dict(self.intercepts)
        return named["accept_prior"], named["reject_prior"]

    def intercept_prior(self, name: str) -> Prior:
        return dict(self.intercepts)[name]

    def term(self, name: str) -> TermSpec | None:
        return next((t for t in self.terms if t.name == name), None)

    def has(self, name: str) -> bool:
        return self.term(name) is not None


TOP_KEYS = {
    "name",
    "description",
    "suits",
    "family",
    "intercept",
    "terms",
    "concentration",
    "prevalence",
    "curve",
    "sampler",
    "earlier_study",
    "reference_accuracy",
}
EARLIER_KEYS = {"weight", "fit", "data_sha256", "factor"}
FACTOR_KEYS = {"parameter", "status", "scale", "mu", "sigma"}


def _check_keys(table: dict, allowed: set[str], where: str, source: str) -> None:
    unknown = sorted(set(table) - allowed)
    if unknown:
        raise SpecError(
            f"{source}: unknown key(s) {unknown} in {where or 'the top level'}; "
            f"expected some of {sorted(allowed)}"
        )


def _table(raw: dict, key: str, source: str, where: str) -> dict:
    value = raw.get(key, {})
    if not isinstance(value, dict):
        raise SpecError(f"{source}: {where}{key} = {value!r}: expected a table")
    return value


def _prior(raw: object, where: str, source: str, support: str) -> Prior:
    try:
        prior = make_prior(raw, where)
    except ValueError as exc:
        raise SpecError(f"{source}: {exc}") from None
    if prior.support != support:
        raise SpecError(
            f"{source}: {where}.distribution = {prior.distribution!r} has {prior.support} "
            f"support, but {where} needs a distribution on {support} values"
        )
    return prior


def _reference_rate(table: dict, side: str, source: str) -> Prior | float:
    """One error rate of ``[reference_accuracy]``: ``<side>_prior`` or a fixed ``<side>``."""
    given = [key for key in (side, f"{side}_prior") if key in table]
    if len(given) != 1:
        raise SpecError(
            f"{source}: [reference_accuracy] needs exactly one of {side!r} (a fixed rate, 0 "
            f"for exact) or '{side}_prior' (a distribution on 0-1); found {given or 'neither'}"
        )
    where = f"reference_accuracy.{given[0]}"
    if given[0] == side:
        value = table[side]
        ok = isinstance(value, int | float) and not isinstance(value, bool)
        if not ok or not 0 <= value < HIGHEST_REFERENCE_ERROR:
            raise SpecError(
                f"{source}: {where} = {value!r}: expected a rate from 0 (exact) up to below "
                f"{HIGHEST_REFERENCE_ERROR:g}; a reference wrong as often as right is no reference"
            )
        return float(value)
    prior = _prior(table[given[0]], where, source, "unit")
    median = float(prior.scipy().ppf(0.5))
    if not median < HIGHEST_REFERENCE_ERROR:
        raise SpecError(
            f"{source}: {where} has median {median:.3g}: a reference's error rate must be "
            f"typically below {HIGHEST_REFERENCE_ERROR:g}, or good and bad swap; check the "
            "distribution's parameters"
        )
    return prior


def _reference_accuracy(raw: dict, family: str, source: str) -> ReferenceAccuracy | None:
    if "reference_accuracy" not in raw:
        return None
    if not FAMILIES[family].info.reference_accuracy:
        takers = sorted(f for f, fam in FAMILIES.items() if fam.info.reference_accuracy)
        raise SpecError(
            f"{source}: [reference_accuracy] is for the {' or '.join(takers)} family, not "
            f"{family!r}; remove it"
        )
    table = _table(raw, "reference_accuracy", source, "")
    sides = ("false_reject", "false_accept")
    allowed = {*sides, *(f"{side}_prior" for side in sides), "prevalence_prior"}
    _check_keys(table, allowed, "[reference_accuracy]", source)
    prevalence = REFERENCE_PREVALENCE
    if "prevalence_prior" in table:
        prevalence = _prior(table["prevalence_prior"], "reference_accuracy.prevalence_prior",
                            source, "unit")  # fmt: skip
    return ReferenceAccuracy(
        _reference_rate(table, "false_reject", source),
        _reference_rate(table, "false_accept", source),
        prevalence,
    )


def _terms(raw: dict, family: str, source: str) -> tuple[TermSpec, ...]:
    info = FAMILIES[family].info
    table = _table(raw, "terms", source, "")
    _check_keys(table, set(info.terms), "[terms]", source)
    terms = []
    for name, body in table.items():
        if not isinstance(body, dict):
            raise SpecError(f"{source}: terms.{name} = {body!r}: expected a table")
        term_info = info.terms[name]
        where = f"terms.{name}"
        if term_info.kind == "group":
            _check_keys(body, {"scale_prior", "parameterization", "auto_min_calls"}, where, source)
            prior = (
                _prior(body["scale_prior"], f"{where}.scale_prior", source, "positive")
                if "scale_prior" in body
                else term_info.default_prior
            )
            param = body.get("parameterization", "auto")
            if param not in PARAMETERIZATIONS:
                raise SpecError(
                    f"{source}: {where}.parameterization = {param!r}: expected one of "
                    f"{list(PARAMETERIZATIONS)}"
                )
            min_calls = body.get("auto_min_calls", AUTO_MIN_CALLS)
            if isinstance(min_calls, bool) or not isinstance(min_calls, int) or min_calls < 1:
                raise SpecError(
                    f"{source}: {where}.auto_min_calls = {min_calls!r}: expected a whole "
                    "number of at least 1"
                )
            terms.append(TermSpec(name, "group", prior, param, min_calls))
        else:
            _check_keys(body, {"prior"}, where, source)
            prior = (
                _prior(body["prior"], f"{where}.prior", source, "real")
                if "prior" in body
                else term_info.default_prior
            )
            terms.append(TermSpec(name, "fixed", prior))
    missing = [t for t in info.required_terms if t not in table]
    if missing:
        raise SpecError(f"{source}: family {family!r} needs the term(s) {missing} in [terms]")
    return tuple(terms)


def _sampler(raw: dict, source: str) -> SamplerDefaults:
    table = _table(raw, "sampler", source, "")
    _check_keys(table, {"sampler", "draws", "tune", "chains", "target_accept"}, "[sampler]", source)
    defaults = SamplerDefaults()
    sampler = table.get("sampler", defaults.sampler)
    if sampler not in SAMPLERS:
        raise SpecError(f"{source}: sampler.sampler = {sampler!r}: expected one of {SAMPLERS}")
    values = {}
    for key, most in (("draws", MAX_DRAWS), ("tune", MAX_DRAWS), ("chains", MAX_CHAINS)):
        value = table.get(key, getattr(defaults, key))
        if isinstance(value, bool) or not isinstance(value, int) or not 1 <= value <= most:
            raise SpecError(
                f"{source}: sampler.{key} = {value!r}: expected a whole number from 1 to {most:,}"
            )
        values[key] = value
    target = table.get("target_accept", defaults.target_accept)
    if isinstance(target, bool) or not isinstance(target, int | float) or not 0.5 <= target < 1:
        raise SpecError(
            f"{source}: sampler.target_accept = {target!r}: expected a number in [0.5, 1)"
        )
    return SamplerDefaults(sampler, target_accept=float(target), **values)


def _finite(value: object, where: str, source: str) -> float:
    if (
        isinstance(value, bool)
        or not isinstance(value, int | float)
        or not (abs(value) < float("inf"))
    ):
        raise SpecError(f"{source}: {where} = {value!r}: expected a finite number")
    return float(value)


def _earlier(raw: dict, source: str) -> EarlierStudy | None:
    if "earlier_study" not in raw:
        return None
    table = _table(raw, "earlier_study", source, "")
    _check_keys(table, EARLIER_KEYS, "[earlier_study]", source)
    weight = _finite(table.get("weight"), "earlier_study.weight", source)
    if not 0 < weight <= 1:
        raise SpecError(
            f"{source}: earlier_study.weight = {weight!r}: expected a number in (0, 1] "
            "(1: the earlier study in full; smaller: an older or less relevant study)"
        )
    factors = []
    rows = table.get("factor", [])
    if not isinstance(rows, list):
        raise SpecError(
            f"{source}: earlier_study.factor = {rows!r}: expected [[earlier_study.factor]] tables"
        )
    for i, row in enumerate(rows):
        where = f"earlier_study.factor[{i}]"
        if not isinstance(row, dict):
            raise SpecError(f"{source}: {where} = {row!r}: expected a table")
        _check_keys(row, FACTOR_KEYS, where, source)
        missing = sorted({"parameter", "scale", "mu", "sigma"} - set(row))
        if missing:
            raise SpecError(f"{source}: {where} needs {missing}")
        sigma = _finite(row["sigma"], f"{where}.sigma", source)
        if sigma <= 0:
            raise SpecError(f"{source}: {where}.sigma = {sigma!r}: must be greater than 0")
        status = row.get("status")
        if status is not None and not isinstance(status, str):
            raise SpecError(f"{source}: {where}.status = {status!r}: expected a string")
        factors.append(
            EarlierFactor(
                str(row["parameter"]),
                str(row["scale"]),
                _finite(row["mu"], f"{where}.mu", source),
                sigma,
                status,
            )
        )
    for key in ("fit", "data_sha256"):
        if not isinstance(table.get(key, ""), str):
            raise SpecError(f"{source}: earlier_study.{key} = {table[key]!r}: expected a string")
    return EarlierStudy(weight, tuple(factors), table.get("fit", ""), table.get("data_sha256", ""))


def _check_earlier(spec: ModelSpec) -> None:
    """Every factor names a hyper-parameter of the spec, on that parameter's scale."""
    if spec.earlier is None:
        return
    family = FAMILIES[spec.family]
    known = sorted({h.label for h in family.hyper_parameters(spec)})
    for i, factor in enumerate(spec.earlier.factors):
        hyper = family.find_hyper_parameter(spec, factor.parameter, factor.status)
        where = f"{spec.source}: earlier_study.factor[{i}]"
        if hyper is None:
            label = factor.parameter if factor.status is None else (
                f"{factor.parameter}[{factor.status}]")  # fmt: skip
            raise SpecError(
                f"{where} is about {label!r}, which is not a hyper-parameter of this "
                f"{spec.family!r} spec; expected one of {known}"
            )
        if factor.scale != hyper.scale:
            raise SpecError(
                f"{where}.scale = {factor.scale!r}: {hyper.label} is approximated on the "
                f"{hyper.scale!r} scale"
            )


def parse_spec(text: str, source: str = "<spec>") -> ModelSpec:
    """Parse and validate the TOML text of a model specification."""
    try:
        raw = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise SpecError(f"{source}: not valid TOML ({exc})") from None
    _check_keys(raw, TOP_KEYS, "", source)
    family = raw.get("family")
    if family not in FAMILIES:
        raise SpecError(f"{source}: family = {family!r}: expected one of {sorted(FAMILIES)}")
    name = raw.get("name")
    if not isinstance(name, str) or not name.strip():
        raise SpecError(f"{source}: name = {name!r}: expected a non-empty string")
    for key in ("description", "suits"):
        if not isinstance(raw.get(key, ""), str):
            raise SpecError(f"{source}: {key} = {raw[key]!r}: expected a string")
    description, suits = raw.get("description", ""), raw.get("suits", "")
    info = FAMILIES[family].info
    intercept_table = _table(raw, "intercept", source, "")
    intercept, intercepts = INTERCEPT_PRIOR, ()
    if info.intercepts:
        _check_keys(intercept_table, set(info.intercepts), "[intercept]", source)
        intercepts = tuple(
            (
                key,
                _prior(intercept_table[key], f"intercept.{key}", source, "real")
                if key in intercept_table
                else default,
            )
            for key, default in info.intercepts.items()
        )
    else:
        _check_keys(intercept_table, {"prior"}, "[intercept]", source)
        if "prior" in intercept_table:
            intercept = _prior(intercept_table["prior"], "intercept.prior", source, "real")
    prevalence = None
    if info.has_prevalence:
        table = _table(raw, "prevalence", source, "")
        _check_keys(table, {"prior"}, "[prevalence]", source)
        prevalence = (
            _prior(table["prior"], "prevalence.prior", source, "unit")
            if "prior" in table
            else info.prevalence_prior
        )
    elif "prevalence" in raw:
        raise SpecError(
            f"{source}: [prevalence] is for the latent_class family, not {family!r}; remove it"
        )
    link = "logistic"
    if info.has_curve:
        table = _table(raw, "curve", source, "")
        _check_keys(table, {"link"}, "[curve]", source)
        link = table.get("link", link)
        if link not in info.links:
            raise SpecError(f"{source}: curve.link = {link!r}: expected one of {list(info.links)}")
    elif "curve" in raw:
        raise SpecError(
            f"{source}: [curve] is for the call_curve and latent_trait families, not {family!r}"
        )
    concentration = None
    if info.has_concentration:
        table = _table(raw, "concentration", source, "")
        _check_keys(table, {"prior", "sharing"}, "[concentration]", source)
        prior = (
            _prior(table["prior"], "concentration.prior", source, "unit")
            if "prior" in table
            else info.concentration_prior
        )
        sharing = table.get("sharing", "shared")
        if sharing not in SHARING:
            raise SpecError(
                f"{source}: concentration.sharing = {sharing!r}: expected one of {list(SHARING)}"
            )
        concentration = ConcentrationSpec(prior, sharing)
    elif "concentration" in raw:
        raise SpecError(
            f"{source}: [concentration] is for the beta_binomial family, not {family!r}; remove it"
        )
    spec = ModelSpec(
        name=name.strip(),
        description=description.strip(),
        family=family,
        intercept=intercept,
        terms=_terms(raw, family, source),
        concentration=concentration,
        sampler=_sampler(raw, source),
        source=source,
        text=text,
        intercepts=intercepts,
        link=link,
        prevalence=prevalence,
        suits=suits.strip(),
        earlier=_earlier(raw, source),
        reference_accuracy=_reference_accuracy(raw, family, source),
    )
    _check_earlier(spec)
    return spec


def models_dir() -> Path:
    """Folder of the bundled model specs (inside the installed package, or the repo's
    top-level ``models/`` when running from a source checkout)."""
    packaged = Path(str(resources.files("bayes_rr"))) / "models"
    if packaged.is_dir():
        return packaged
    return Path(__file__).resolve().parents[2] / "models"


def bundled_models() -> dict[str, Path]:
    """Bundled spec name -> file."""
    return {p.stem: p for p in sorted(models_dir().glob("*.toml"))}


def load_spec(name_or_path: str | Path) -> ModelSpec:
    """A bundled spec by name (``crossed-logit``) or the user's own spec file by path."""
    bundled = bundled_models()
    key = str(name_or_path)
    if key in bundled:
        path = bundled[key]
    else:
        path = Path(key)
        if not path.is_file():
            raise SpecError(
                f"model {key!r} is neither a bundled model ({', '.join(bundled)}) nor a file; "
                "see 'bayes-rr models'"
            )
    try:
        text = path.read_text(encoding="utf-8")
    except (OSError, UnicodeDecodeError) as exc:
        raise SpecError(f"{path}: cannot read the spec ({exc})") from None
    return parse_spec(text, source=path.name)
