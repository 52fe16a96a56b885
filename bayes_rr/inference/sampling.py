"""Sampling: the only module that runs a sampler, and the convergence gate.

nutpie is the default sampler (it compiles the model with numba and adapts the
mass matrix quickly); PyMC's NUTS is the fallback. The same seed, data and
spec give the same draws.
"""

from __future__ import annotations

import math
import os
import time
from dataclasses import asdict, dataclass, field, replace

import numpy as np
import xarray as xr

from bayes_rr.core.errors import SamplingError, SpecError
from bayes_rr.families import family_of
from bayes_rr.families.terms import SAMPLERS
from bayes_rr.priors.spec import MAX_CHAINS, MAX_DRAWS, ModelSpec, SamplerDefaults

MEMORY_SHARE = 0.4
"""Share of the machine's memory a fit may plan to use (the rest is for the system,
the sampler's own buffers and other jobs on a shared machine)."""
R_HAT_MAX = 1.01
ESS_MIN = 400
BFMI_MIN = 0.3
DIVERGENCE_SHARE_WARN = 0.001
"""Up to this share of post-warm-up draws may diverge with a warning instead of a failure."""


@dataclass(frozen=True)
class SamplerSettings:
    """Settings of one sampling run."""

    # The spec's defaults are the one source of these five values.
    sampler: str = SamplerDefaults.sampler
    draws: int = SamplerDefaults.draws
    tune: int = SamplerDefaults.tune
    chains: int = SamplerDefaults.chains
    target_accept: float = SamplerDefaults.target_accept
    seed: int = 20240601
    cores: int | None = None
    progress: bool = False

    def __post_init__(self) -> None:
        if self.sampler not in SAMPLERS:
            raise SpecError(f"sampler {self.sampler!r}: expected one of {list(SAMPLERS)}")
        limits = (("draws", 10, MAX_DRAWS), ("tune", 1, MAX_DRAWS), ("chains", 1, MAX_CHAINS))
        for key, least, most in limits:
            value = getattr(self, key)
            if isinstance(value, bool) or not isinstance(value, int) or not least <= value <= most:
                raise SpecError(
                    f"{key} = {value!r}: expected a whole number from {least} to {most:,}"
                )
        if (
            isinstance(self.seed, bool)
            or not isinstance(self.seed, int)
            or not (0 <= self.seed < 2**32)
        ):
            raise SpecError(f"seed = {self.seed!r}: expected a whole number from 0 to 2**32 - 1")
        if not 0.5 <= self.target_accept < 1:
            raise SpecError(
                f"target_accept = {self.target_accept!r}: expected a number in [0.5, 1)"
            )

    @classmethod
    def from_spec(cls, spec: ModelSpec, **overrides) -> SamplerSettings:
        """Spec defaults, overridden by the given non-None values."""
        base = cls(**asdict(spec.sampler))
        return replace(base, **{k: v for k, v in overrides.items() if v is not None})

    def as_dict(self) -> dict:
        return asdict(self)


def machine_memory_bytes() -> int:
    """Physical memory of this machine (a generous guess where the OS does not say)."""
    try:
        return int(os.sysconf("SC_PAGE_SIZE") * os.sysconf("SC_PHYS_PAGES"))
    except (ValueError, OSError, AttributeError):
        return 16 * 2**30


def planned_memory_bytes(
    parts: int, appraisers: int, cells: int, settings: SamplerSettings, family: str = "logit"
) -> int:
    """A generous estimate of the memory a fit of this size needs at its peak.

    The family says how many floats a draw needs (``Family.memory_per_draw``); doubled
    for the copies made while summarising and writing. Measured peaks stay below it.
    """
    per_draw = family_of(family).memory_per_draw(parts, appraisers, cells)
    return int(16 * per_draw * settings.draws * settings.chains)


def check_memory(
    parts: int,
    appraisers: int,
    cells: int,
    settings: SamplerSettings,
    family: str = "logit",
    *,
    why: str = "",
) -> None:
    """Refuse, before anything is compiled (or before a second stage is sampled), a fit
    that would not fit in memory. ``why`` opens the message (what led to these draws)."""
    need = planned_memory_bytes(parts, appraisers, cells, settings, family)
    budget = MEMORY_SHARE * machine_memory_bytes()
    if need > budget:
        raise SpecError(
            f"{why}{settings.chains} chains x {settings.draws:,} draws of a study of {parts} "
            f"parts x {appraisers} appraisers need about {need / 2**30:.1f} GiB, more than the "
            f"{budget / 2**30:.1f} GiB budget ({MEMORY_SHARE:.0%} of this machine's memory); "
            "use fewer --draws or --chains"
        )


@dataclass(frozen=True)
class SampleRun:
    """An InferenceData and how long each stage took (seconds)."""

    idata: object
    timings: dict = field(default_factory=dict)
    compiled: object = None
    """nutpie's compiled model, for another run of the same model without compiling."""
    compile_source: str | None = None
    """How the compiled model was obtained (``compile_cache.CompileOutcome``); None when it
    was given or the sampler compiles itself."""


def sample_model(model, settings: SamplerSettings, compiled=None) -> SampleRun:
    """Sample ``model`` (the cell log likelihood is added by the estimands step).

    Raises ``KeyboardInterrupt`` when a signal came during sampling, even where the
    sampler caught it and returned the draws it had (nutpie and PyMC both do), and
    :class:`SamplingError` for any sample shorter than asked for.
    """
    import pymc as pm

    from bayes_rr.core import interrupts

    timings = {}
    compile_source = None
    start = time.perf_counter()
    if settings.sampler == "nutpie":
        import nutpie

        if compiled is None:
            from bayes_rr.inference.compile_cache import compile_model

            outcome = compile_model(model)
            compiled, compile_source = outcome.compiled, outcome.source
        timings["compile_s"] = time.perf_counter() - start
        interrupts.checkpoint("sampling", f"{settings.chains} chains x {settings.draws} draws")
        start = time.perf_counter()
        idata = nutpie.sample(
            compiled,
            draws=settings.draws,
            tune=settings.tune,
            chains=settings.chains,
            cores=settings.cores or min(settings.chains, 2),
            seed=settings.seed,
            target_accept=settings.target_accept,
            progress_bar=settings.progress,
            save_warmup=False,
        )
    else:
        interrupts.checkpoint("sampling", f"{settings.chains} chains x {settings.draws} draws")
        idata = pm.sample(
            draws=settings.draws,
            tune=settings.tune,
            chains=settings.chains,
            cores=settings.cores or min(settings.chains, 2),
            random_seed=settings.seed,
            target_accept=settings.target_accept,
            progressbar=settings.progress,
            compute_convergence_checks=False,
            model=model,
        )
    timings["sample_s"] = time.perf_counter() - start
    interrupts.raise_if_interrupted()
    got = (idata.posterior.sizes.get("chain", 0), idata.posterior.sizes.get("draw", 0))
    if got != (settings.chains, settings.draws):
        raise SamplingError(
            f"the sampler returned {got[0]} chains x {got[1]} draws instead of "
            f"{settings.chains} x {settings.draws}; nothing was written; run the fit again"
        )
    return SampleRun(idata, timings, compiled, compile_source)


@dataclass(frozen=True)
class StudySample:
    """A sample of the stated model (the sampler's draws completed, see
    :func:`bayes_rr.families.complete_draws`) and how it was obtained."""

    run: SampleRun
    integrate: bool
    """Whether effects were integrated out (False after a failed rule check: the next
    stage of the same fit samples them too)."""
    form: str
    """In words, what the sampler's model sampled."""
    rule_check: dict
    """The check of the rule that integrated effects out ({} when none did), and when
    it failed the check that made the fit run again with them sampled."""
    settings: SamplerSettings | None = None
    """The settings of the sample kept (the target acceptance raised after divergences)."""
    retried: str = ""
    """Why the sample was drawn again, in words ("" when it was not)."""


RETRY_TARGET_ACCEPT = 0.95
"""A sample with divergent transitions at a lower target acceptance is drawn again at
this one (smaller steps): a spec may run at 0.8, where a well-conditioned posterior
mixes about twice as fast a gradient, without accepting divergences."""


def sample_study(spec: ModelSpec, study, settings: SamplerSettings, *, integrate: bool = True,
                 compiled=None, key: str | None = None) -> StudySample:  # fmt: skip
    """Sample the family's sampler model (``build_sampling_model``) and complete its
    draws into the stated model's. When a rule that integrated effects out fails its
    check at the largest scales drawn, the fit runs again with every effect sampled.

    ``compiled`` is a compiled model of the same form to reuse; ``key`` (``design_key``)
    remembers compiled models within the process (nutpie only).
    """
    from bayes_rr.families import build_sampling_model, complete_draws, sampled_form

    model = None
    if compiled is None and key is not None and settings.sampler == "nutpie":
        compiled = cached_compiled(_form_key(key, integrate), study.cells["s"].to_numpy())
    start = time.perf_counter()
    if compiled is None:
        model = build_sampling_model(spec, study, integrate)
    build_s = time.perf_counter() - start
    run = sample_model(model, settings, compiled)
    run.timings["build_s"] = build_s
    if key is not None and settings.sampler == "nutpie":
        remember_compiled(_form_key(key, integrate), run.compiled)
    divergent = int(run.idata.sample_stats["diverging"].sum())
    if divergent and settings.target_accept < RETRY_TARGET_ACCEPT:
        safer = replace(settings, target_accept=RETRY_TARGET_ACCEPT)
        again = sample_study(spec, study, safer, integrate=integrate, compiled=run.compiled,
                             key=key)  # fmt: skip
        _add_timings(again.run.timings, run.timings)
        why = (f"{divergent} divergent transitions at target_accept {settings.target_accept}: "
               f"drawn again at {RETRY_TARGET_ACCEPT}")  # fmt: skip
        return replace(again, retried=why)
    start = time.perf_counter()
    posterior, check = complete_draws(run.idata.posterior, spec, study, settings.seed)
    run.timings["complete_s"] = time.perf_counter() - start
    if check and not check["ok"] and integrate:
        again = sample_study(spec, study, settings, integrate=False, key=key)
        _add_timings(again.run.timings, run.timings)
        failed = {**check, "then": "the fit ran again with the effects sampled"}
        return replace(again, rule_check=failed)
    idata = run.idata
    idata.posterior = posterior
    return StudySample(run, integrate, sampled_form(spec, study, integrate), check, settings)


def _add_timings(total: dict, more: dict) -> None:
    for name, value in more.items():
        total[name] = total.get(name, 0.0) + value


def _form_key(key: str, integrate: bool) -> str:
    return key if integrate else f"{key}|sampled"


# ---------------------------------------------------------------------------
# compiled models reused within a process

COMPILED_CACHE_SIZE = 8
"""Compiled models kept per process: one per (spec, design) in a run of many fits."""
_COMPILED: dict[str, object] = {}


def design_key(spec: ModelSpec, study) -> str:
    """Hash of everything a compiled model depends on except the reject counts: the
    spec, the coords, each cell's indices and number of calls, the reference columns
    and the limits. Two studies with the same key differ only in their calls."""
    import hashlib

    cells = study.cells
    digest = hashlib.sha256()
    digest.update(spec.sha256.encode())
    digest.update(repr((study.parts, study.appraisers, study.limits)).encode())
    for column in ("part_index", "appraiser_index", "n"):
        digest.update(np.ascontiguousarray(cells[column].to_numpy(dtype=np.int64)).tobytes())
    for extra in (study.reference, study.reference_value, getattr(study, "partial_status", None)):
        digest.update(b"-" if extra is None else extra.to_numpy(dtype=float).tobytes())
    return digest.hexdigest()


def cached_compiled(key: str, calls: np.ndarray):
    """The compiled model of ``key`` with ``calls`` as its reject counts, or None."""
    from bayes_rr.families.pymc_parts import OBSERVED_CALLS

    compiled = _COMPILED.get(key)
    if compiled is None:
        return None
    return compiled.with_data(**{OBSERVED_CALLS: calls})


def remember_compiled(key: str, compiled) -> None:
    """Keep a compiled model whose reject counts are replaceable (least recent out)."""
    from bayes_rr.families.pymc_parts import OBSERVED_CALLS

    if compiled is None or OBSERVED_CALLS not in getattr(compiled, "shared_data", {}):
        return  # e.g. the latent class model, whose likelihood is built from the calls
    _COMPILED.pop(key, None)
    _COMPILED[key] = compiled
    while len(_COMPILED) > COMPILED_CACHE_SIZE:
        _COMPILED.pop(next(iter(_COMPILED)))


def forget_compiled() -> None:
    """Drop every compiled model of this process."""
    _COMPILED.clear()


# ---------------------------------------------------------------------------
# convergence gate


@dataclass(frozen=True)
class Diagnostics:
    """Result of the convergence gate."""

    ok: bool
    divergences: int
    draws: int
    max_r_hat: float
    min_ess_bulk: float
    min_ess_tail: float
    min_bfmi: float
    reasons: tuple[str, ...]
    warnings: tuple[str, ...]
    advice: tuple[str, ...]
    worst: dict
    modes: dict | None = None
    """Chains settled in separate modes (see :func:`separate_modes`); more draws cannot
    help then."""

    def as_dict(self) -> dict:
        out = asdict(self)
        for key in ("reasons", "warnings", "advice"):
            out[key] = list(out[key])
        out["thresholds"] = {
            "r_hat_max": R_HAT_MAX,
            "ess_min": ESS_MIN,
            "bfmi_min": BFMI_MIN,
            "divergence_share_with_warning": DIVERGENCE_SHARE_WARN,
        }
        return out


def _chains(numbers: list[int]) -> str:
    """ "chain 4 settles" or "chains 1, 2 and 3 settle" (numbered from 1)."""
    names = [str(n + 1) for n in numbers]
    if len(names) == 1:
        return f"chain {names[0]} settles"
    return f"chains {', '.join(names[:-1])} and {names[-1]} settle"


def _extreme(rows, field: str, pick) -> tuple[float, str]:
    values = [(getattr(r, field), r) for r in rows if math.isfinite(getattr(r, field))]
    if not values:
        return float("nan"), ""
    value, row = pick(values, key=lambda item: item[0])
    where = row.key if row.level == "parameter" else f"{row.scope} {row.level} {row.key}"
    if row.part or row.appraiser:
        where += f" ({row.part or row.appraiser})"
    return float(value), where


MODE_GAP = 4.0
"""Chains settle in separate modes when their means fall into groups whose gap is more
than this many of the chains' own (pooled) standard deviations, each group agreeing
within one: chains that merely mix slowly wander over the gap instead."""


def separate_modes(hyper: xr.Dataset) -> dict | None:
    """The hyper-parameter whose chains settle farthest apart in separate groups, or None.

    Returns the parameter's label, the groups' chain numbers and their means, and the
    gap in pooled within-chain standard deviations.
    """
    found = None
    for name, values in hyper.data_vars.items():
        if "chain" not in values.dims or values.sizes["chain"] < 2:
            continue
        draws = values.transpose("chain", "draw", ...).to_numpy()
        draws = draws.reshape(draws.shape[0], draws.shape[1], -1)
        labels = [""] * draws.shape[2]
        extra = [d for d in values.dims if d not in ("chain", "draw")]
        if extra:
            stacked = values.stack(element=extra).coords["element"].to_numpy()
            labels = [f"[{', '.join(str(v) for v in np.atleast_1d(e))}]" for e in stacked]
        for k in range(draws.shape[2]):
            x = draws[:, :, k]
            means, within = x.mean(axis=1), float(np.sqrt(np.mean(x.var(axis=1))))
            if not within > 0:
                continue
            order = np.argsort(means)
            steps = np.diff(means[order])
            cut = int(np.argmax(steps))
            groups = (order[: cut + 1], order[cut + 1 :])
            spread = max(np.ptp(means[g]) for g in groups)
            gap = float(steps[cut] / within)
            if gap > MODE_GAP and spread <= within and (found is None or gap > found["gap"]):
                found = {
                    "label": f"{name}{labels[k]}",
                    "chains": [sorted(int(c) for c in g) for g in groups],
                    "means": [float(means[g].mean()) for g in groups],
                    "gap": gap,
                }
    return found


def convergence_gate(
    rows, sample_stats: xr.Dataset, modes: dict | None = None, mode_advice: tuple = ()
) -> Diagnostics:
    """r_hat <= 1.01, bulk and tail ESS >= 400 on every summarised estimand and
    hyper-parameter (``rows``: :class:`~bayes_rr.results.estimands.SummaryRow`), no divergences
    beyond a small share (with a warning), E-BFMI >= 0.3 in every chain.

    ``modes`` (from :func:`separate_modes`): chains settled in separate modes, which no
    longer run can join; the message names the quantity and gives ``mode_advice``."""
    max_rhat, rhat_at = _extreme(rows, "r_hat", max)
    min_bulk, bulk_at = _extreme(rows, "ess_bulk", min)
    min_tail, tail_at = _extreme(rows, "ess_tail", min)
    diverging = sample_stats["diverging"].to_numpy().astype(bool)
    divergences = int(diverging.sum())
    n_draws = int(diverging.size)
    energy = sample_stats["energy"].to_numpy()
    bfmi = np.square(np.diff(energy, axis=1)).mean(axis=1) / np.var(energy, axis=1)
    min_bfmi = float(bfmi.min())
    reasons, warnings, advice = [], [], []
    if not max_rhat <= R_HAT_MAX:
        reasons.append(f"max r_hat {max_rhat:.3f} > {R_HAT_MAX} ({rhat_at})")
    if not min_bulk >= ESS_MIN:
        reasons.append(f"min bulk ESS {min_bulk:.0f} < {ESS_MIN} ({bulk_at})")
    if not min_tail >= ESS_MIN:
        reasons.append(f"min tail ESS {min_tail:.0f} < {ESS_MIN} ({tail_at})")
    if divergences > DIVERGENCE_SHARE_WARN * n_draws:
        reasons.append(f"{divergences} divergent transitions in {n_draws} draws")
    elif divergences:
        warnings.append(
            f"{divergences} divergent transition(s) in {n_draws} draws (under "
            f"{DIVERGENCE_SHARE_WARN:.1%}): results usable, but check the pair plots"
        )
    if not min_bfmi >= BFMI_MIN:
        reasons.append(f"min E-BFMI {min_bfmi:.2f} < {BFMI_MIN}")
    if modes is not None and reasons:
        first, second = modes["chains"]
        reasons.insert(0, (
            f"the posterior has more than one mode: {_chains(first)} at "
            f"{modes['label']} = {modes['means'][0]:.3g} and {_chains(second)} at "
            f"{modes['means'][1]:.3g} ({modes['gap']:.0f} of their own standard deviations "
            "apart); running longer cannot join them"
        ))  # fmt: skip
        advice.extend(mode_advice)
        advice.append(
            "fit the alternatives and weigh them by PSIS-LOO ('bayes-rr compare'); the "
            "results stay withheld until one mode is left"
        )
    elif reasons:
        advice.append("run longer: more --tune and --draws (e.g. twice as many)")
        if divergences:
            advice.append("raise --target-accept (e.g. 0.95 or 0.99)")
            advice.append("try another parameterization of the group terms in the model spec")
        if min_bfmi < BFMI_MIN:
            advice.append("use the noncentered parameterization for weakly informed terms")
    return Diagnostics(
        ok=not reasons,
        divergences=divergences,
        draws=n_draws,
        max_r_hat=max_rhat,
        min_ess_bulk=min_bulk,
        min_ess_tail=min_tail,
        min_bfmi=min_bfmi,
        reasons=tuple(reasons),
        warnings=tuple(warnings),
        advice=tuple(advice),
        worst={"r_hat": rhat_at, "ess_bulk": bulk_at, "ess_tail": tail_at},
        modes=modes if reasons else None,
    )
