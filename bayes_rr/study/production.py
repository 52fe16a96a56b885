"""What the user knows of the line: the share of bad parts it makes, how its parts are
shared among the appraisers, the distribution of the measured value (call curves), what
a wrong call and a call cost, and which inspection strategies to compare.

Read from a TOML file (``fit --production FILE``); every value is checked here, before
any sampling, with a message that quotes it. The formulas that use these values are in
``docs/statistics.md``, section "Production scope". Never imports PyMC.
"""

from __future__ import annotations

import math
import tomllib
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from bayes_rr.core.errors import DataError, SpecError

RANGE_PROB = 0.95
"""A ``bad_share = [low, high]`` pair is read as this central range of a Beta prior."""
KINDS = ("single", "confirm_same", "confirm_other", "k_of_n")
RULES = ("all", "majority")
MAX_REPEATS = 9
"""More repeats than this on one part is no inspection strategy anyone runs."""


@dataclass(frozen=True)
class Strategy:
    """An inspection strategy (docs/statistics.md, "Rates and figures of a strategy")."""

    kind: str
    k: int = 1
    n: int = 1
    rule: str = "all"

    @property
    def name(self) -> str:
        if self.kind == "single":
            return "single"
        if self.kind == "confirm_same":
            suffix = "_majority" if self.rule == "majority" else ""
            return f"confirm_same_{self.k}{suffix}"
        if self.kind == "confirm_other":
            return "confirm_other"
        return f"{self.k}_of_{self.n}"

    @property
    def description(self) -> str:
        if self.kind == "single":
            return "one call by one appraiser"
        if self.kind == "confirm_same":
            times = "once more" if self.k == 1 else f"up to {self.k} more times"
            if self.rule == "majority":
                return (
                    f"a reject is called {self.k} more times by the same appraiser; rejected "
                    "when most of the calls reject"
                )
            return f"a reject is called {times} by the same appraiser; rejected if all reject"
        if self.kind == "confirm_other":
            return "a reject is called once more by another appraiser; rejected if both reject"
        return f"{self.n} appraisers call each part; rejected when {self.k} or more reject"

    def as_dict(self) -> dict:
        return {"name": self.name, "kind": self.kind, "k": self.k, "n": self.n,
                "rule": self.rule, "description": self.description}  # fmt: skip


def default_strategies(appraisers: int) -> tuple[Strategy, ...]:
    """The strategies compared when the file names none: those the study's number of
    appraisers allows."""
    out = [Strategy("single"), Strategy("confirm_same", k=1), Strategy("confirm_same", k=2)]
    if appraisers >= 2:
        out += [Strategy("confirm_other"), Strategy("k_of_n", k=1, n=2),
                Strategy("k_of_n", k=2, n=2)]  # fmt: skip
    if appraisers >= 3:
        out.append(Strategy("k_of_n", k=2, n=3))
    return tuple(out)


@dataclass(frozen=True)
class Costs:
    """Cost of one good part rejected, one bad part shipped, one call."""

    false_reject: float
    escape: float
    call: float = 0.0

    def as_dict(self) -> dict:
        return {"false_reject": self.false_reject, "escape": self.escape, "call": self.call}


@dataclass(frozen=True)
class ProductionMix:
    """What the user states about production (docs/statistics.md, "What the user states").

    ``bad_share`` is a fixed share, or None with ``bad_share_beta`` (a, b) for a range;
    both None for a call curve, whose production distribution of the measured value
    (``mean``/``sd`` or ``values``) gives the share.
    """

    bad_share: float | None = None
    bad_share_range: tuple[float, float] | None = None
    bad_share_beta: tuple[float, float] | None = None
    appraiser_shares: tuple[tuple[str, float], ...] | None = None
    strata: tuple[tuple[str, float], ...] | None = None
    mean: float | None = None
    sd: float | None = None
    values: tuple[float, ...] | None = None
    costs: Costs | None = None
    strategies: tuple[Strategy, ...] = ()
    source: str = "<production>"

    @property
    def has_bad_share(self) -> bool:
        return self.bad_share is not None or self.bad_share_beta is not None

    def stratum_shares(self) -> dict[str, float]:
        return dict(self.strata or ())

    @property
    def has_measured(self) -> bool:
        return self.values is not None or self.mean is not None

    def bad_share_draws(self, size: int, seed: int) -> np.ndarray:
        """One draw of the bad share per posterior draw (a constant when it is fixed)."""
        if self.bad_share is not None:
            return np.full(size, self.bad_share)
        a, b = self.bad_share_beta
        return np.random.default_rng([seed, 20]).beta(a, b, size)

    def shares(self, appraisers: list[str]) -> np.ndarray:
        """The line's share of each of the study's appraisers (equal by default)."""
        if self.appraiser_shares is None:
            return np.full(len(appraisers), 1.0 / len(appraisers))
        given = dict(self.appraiser_shares)
        return np.array([given.get(name, 0.0) for name in appraisers])

    def describe(self) -> str:
        if self.strata is not None:
            groups = ", ".join(f"{name} {value:g}" for name, value in self.strata)
            share = f"the study's parts reweighted to production's strata ({groups})"
        elif self.bad_share is not None:
            share = f"bad share {self.bad_share:g}"
        elif self.bad_share_range is not None:
            low, high = self.bad_share_range
            share = f"bad share between {low:g} and {high:g} (95% range of a Beta prior)"
        elif self.values is not None:
            share = f"{len(self.values)} measured production values"
        else:
            share = f"measured value normal, mean {self.mean:g}, sd {self.sd:g}"
        if self.appraiser_shares is not None:
            parts = ", ".join(f"{name} {value:g}" for name, value in self.appraiser_shares)
            return f"{share}; parts shared among appraisers: {parts}"
        return f"{share}; parts shared equally among the appraisers"

    def as_dict(self) -> dict:
        return {
            "source": self.source,
            "bad_share": self.bad_share,
            "bad_share_range": None if self.bad_share_range is None else list(self.bad_share_range),
            "bad_share_beta": None if self.bad_share_beta is None else list(self.bad_share_beta),
            "strata": None if self.strata is None else dict(self.strata),
            "appraiser_shares": None
            if self.appraiser_shares is None
            else dict(self.appraiser_shares),
            "measured_value": None
            if not self.has_measured
            else {
                "mean": self.mean,
                "sd": self.sd,
                "values": None if self.values is None else len(self.values),
            },
            "costs": None if self.costs is None else self.costs.as_dict(),
            "strategies": [s.as_dict() for s in self.strategies],
            "description": self.describe(),
        }


# ---------------------------------------------------------------------------
# reading


def _fail(source: str, message: str) -> SpecError:
    return SpecError(f"{source}: {message}")


def _number(value: object, where: str, source: str, low: float, high: float | None) -> float:
    ok = not isinstance(value, bool) and isinstance(value, int | float)
    if ok and math.isfinite(value) and value >= low and (high is None or value <= high):
        return float(value)
    bound = f"between {low:g} and {high:g}" if high is not None else f"at least {low:g}"
    raise _fail(source, f"{where} = {value!r}: expected a number {bound}")


def beta_matching(low: float, high: float, prob: float = RANGE_PROB) -> tuple[float, float]:
    """Beta(a, b) whose central ``prob`` range is [low, high] (solved numerically)."""
    from scipy import optimize, stats

    tail = (1 - prob) / 2
    mean = (low + high) / 2
    sd = (high - low) / (2 * stats.norm.ppf(1 - tail))
    size = max(mean * (1 - mean) / sd**2 - 1, 1.0)

    def gap(log_ab):
        a, b = np.exp(log_ab)
        return [stats.beta.ppf(tail, a, b) / low - 1, stats.beta.ppf(1 - tail, a, b) / high - 1]

    fit = optimize.least_squares(gap, np.log([mean * size, (1 - mean) * size]))
    a, b = np.exp(fit.x)
    if max(abs(v) for v in gap(fit.x)) > 1e-4:
        raise ValueError(f"no Beta distribution has the 95% range [{low:g}, {high:g}]")
    return float(a), float(b)


def _bad_share(value: object, source: str) -> dict:
    if isinstance(value, list):
        if len(value) != 2:
            raise _fail(source, f"bad_share = {value!r}: expected one share or [low, high]")
        low = _number(value[0], "bad_share low end", source, 0.0, 1.0)
        high = _number(value[1], "bad_share high end", source, 0.0, 1.0)
        if not 0 < low < high < 1:
            raise _fail(
                source,
                f"bad_share = {value!r}: expected 0 < low < high < 1 (a 95% range of the share "
                "of bad parts); give one number for a known share",
            )
        try:
            beta = beta_matching(low, high)
        except ValueError as exc:
            raise _fail(source, f"bad_share = {value!r}: {exc}; narrow the range") from None
        return {"bad_share_range": (low, high), "bad_share_beta": beta}
    return {"bad_share": _number(value, "bad_share", source, 0.0, 1.0)}


def _shares(value: object, source: str, key: str = "appraiser_shares"):
    if not isinstance(value, dict) or not value:
        raise _fail(source, f"{key} = {value!r}: expected a table name = share")
    shares = tuple(
        (str(name), _number(share, f"{key}.{name}", source, 0.0, 1.0))
        for name, share in value.items()
    )
    total = sum(share for _, share in shares)
    if abs(total - 1) > 1e-6:
        raise _fail(source, f"{key} sum to {total:g}: expected 1")
    return shares


def _costs(value: object, source: str) -> Costs:
    if not isinstance(value, dict):
        raise _fail(source, f"costs = {value!r}: expected a [costs] table")
    unknown = sorted(set(value) - {"false_reject", "escape", "call"})
    if unknown:
        raise _fail(
            source, f"[costs]: unknown key(s) {unknown}; expected false_reject, escape, call"
        )
    for key in ("false_reject", "escape"):
        if key not in value:
            raise _fail(
                source, f"[costs]: {key} missing; give the cost of one {key.replace('_', ' ')}"
            )
    numbers = {key: _number(v, f"costs.{key}", source, 0.0, None) for key, v in value.items()}
    return Costs(**numbers)


def _strategy(table: object, k: int, source: str) -> Strategy:
    where = f"strategy {k}"
    if not isinstance(table, dict):
        raise _fail(source, f"{where} = {table!r}: expected a [[strategy]] table")
    unknown = sorted(set(table) - {"kind", "k", "n", "rule"})
    if unknown:
        raise _fail(source, f"{where}: unknown key(s) {unknown}; expected kind, k, n, rule")
    kind = table.get("kind")
    if kind not in KINDS:
        raise _fail(source, f"{where}: kind = {kind!r}: expected one of {KINDS}")
    rule = table.get("rule", "all")
    if rule not in RULES or (rule != "all" and kind != "confirm_same"):
        raise _fail(source, f"{where}: rule = {rule!r}: expected 'all', or 'majority' with "
                    "kind = 'confirm_same'")  # fmt: skip
    whole = {}
    for key in ("k", "n"):
        value = table.get(key, 1)
        if isinstance(value, bool) or not isinstance(value, int) or not 1 <= value <= MAX_REPEATS:
            raise _fail(source, f"{where}: {key} = {value!r}: expected a whole number 1 to "
                        f"{MAX_REPEATS}")  # fmt: skip
        whole[key] = value
    if kind == "k_of_n" and whole["k"] > whole["n"]:
        raise _fail(source, f"{where}: k = {whole['k']} > n = {whole['n']}: expected k <= n")
    if kind in ("single", "confirm_other"):
        return Strategy(kind)
    if kind == "confirm_same":
        return Strategy(kind, k=whole["k"], rule=rule)
    return Strategy(kind, k=whole["k"], n=whole["n"])


TOP_KEYS = {"bad_share", "appraiser_shares", "strata", "mean", "sd", "values", "costs", "strategy"}


def parse_production(text: str, source: str = "<production>", base: Path | None = None):
    """Validate the TOML text of a production file into a :class:`ProductionMix`.

    The keys may stand at the top or in a ``[production]`` table; ``values`` names a CSV
    of measured production values relative to the file's folder ``base``.
    """
    try:
        raw = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise _fail(source, f"not valid TOML ({exc})") from None
    table = dict(raw.pop("production", {}) or {})
    if not isinstance(table, dict):
        raise _fail(source, "[production] must be a table")
    table.update(raw)
    unknown = sorted(set(table) - TOP_KEYS)
    if unknown:
        raise _fail(source, f"unknown key(s) {unknown}; expected {sorted(TOP_KEYS)}")
    found: dict = {"source": source}
    if "bad_share" in table:
        found.update(_bad_share(table["bad_share"], source))
    if "appraiser_shares" in table:
        found["appraiser_shares"] = _shares(table["appraiser_shares"], source)
    if "strata" in table:
        found["strata"] = _shares(table["strata"], source, "strata")
        if "bad_share" in table:
            raise _fail(
                source,
                "bad_share and strata were both given; with strata the share of bad parts "
                "follows from each stratum's share and its parts' reference statuses: give one",
            )
    if "mean" in table or "sd" in table:
        if "mean" not in table or "sd" not in table:
            raise _fail(source, "give both mean and sd of the measured value in production")
        found["mean"] = _number(table["mean"], "mean", source, -math.inf, None)
        found["sd"] = _number(table["sd"], "sd", source, 0.0, None)
        if found["sd"] == 0:
            raise _fail(source, "sd = 0: expected a positive standard deviation")
    if "values" in table:
        found["values"] = _measured_values(table["values"], source, base)
    if "values" in found and "mean" in found:
        raise _fail(source, "give the measured value's mean and sd, or values, not both")
    if "bad_share" in table and ("mean" in found or "values" in found):
        raise _fail(
            source,
            "bad_share and a distribution of the measured value were both given; the "
            "distribution and the limit already fix the share of bad parts: give one",
        )
    if not {"bad_share", "strata"} & set(table) and "mean" not in found and "values" not in found:
        raise _fail(source, "no bad_share: give the share of bad parts in production "
                    "(bad_share = 0.02, or a 95% range bad_share = [0.01, 0.04])")  # fmt: skip
    if "costs" in table:
        found["costs"] = _costs(table["costs"], source)
    strategies = table.get("strategy", [])
    if not isinstance(strategies, list):
        raise _fail(source, "strategy: expected [[strategy]] tables")
    found["strategies"] = tuple(_strategy(t, k, source) for k, t in enumerate(strategies, 1))
    names = [s.name for s in found["strategies"]]
    if len(set(names)) < len(names):
        raise _fail(source, f"a strategy is listed twice ({names})")
    return ProductionMix(**found)


def _measured_values(value: object, source: str, base: Path | None) -> tuple[float, ...]:
    from bayes_rr.study.data import read_values

    if not isinstance(value, str) or not value:
        raise _fail(source, f"values = {value!r}: expected the path of a CSV of measured values")
    path = Path(value)
    if not path.is_absolute() and base is not None:
        path = base / path
    return tuple(float(v) for v in read_values(path))


def read_production(path: str | Path) -> ProductionMix:
    """Read and check a production file (``--production FILE``)."""
    path = Path(path)
    try:
        text = path.read_text(encoding="utf-8")
    except (OSError, UnicodeDecodeError) as exc:
        raise SpecError(f"{path}: cannot read the production file ({exc})") from None
    return parse_production(text, str(path), path.parent)


def check_against_study(
    mix: ProductionMix, appraisers: list[str], source: str, strata: list[str] | None = None
) -> None:
    """Refuse shares of appraisers the study lacks, strategies it cannot staff, and
    strata that differ from the data's (``strata``: the study's stratum names)."""
    if mix.strata is not None:
        if strata is None:
            raise DataError(
                f"{mix.source}: strata are given, but {source} has no stratum column; add one "
                "(the group each part was picked from) or leave strata out"
            )
        named = {name for name, _ in mix.strata}
        only_file, only_data = sorted(named - set(strata)), sorted(set(strata) - named)
        if only_file or only_data:
            raise DataError(
                f"{mix.source}: strata {only_file} are not in {source}, and its strata "
                f"{only_data} have no share; give a share to each stratum of the data, and "
                "only to those"
            )
    if mix.appraiser_shares is not None:
        named = [name for name, _ in mix.appraiser_shares]
        missing = sorted(set(named) - set(appraisers))
        if missing:
            raise DataError(
                f"{mix.source}: appraiser_shares names {missing}, not appraisers of {source} "
                f"({sorted(appraisers)}); the line's shares go to the study's appraisers"
            )
    for strategy in mix.strategies:
        need = (
            strategy.n
            if strategy.kind == "k_of_n"
            else 2
            if strategy.kind == "confirm_other"
            else 1
        )
        if need > len(appraisers):
            raise DataError(
                f"{mix.source}: strategy {strategy.name!r} needs {need} appraisers; {source} has "
                f"{len(appraisers)}"
            )
