"""The fit step: spec + study -> model -> draws -> estimands -> gate -> summaries.

:func:`fit_study` is what ``bayes-rr fit`` calls; it returns a
:class:`FitResult` that :mod:`bayes_rr.io.fit_folder` writes to a folder.
"""

from __future__ import annotations

import platform
import sys
import time
from dataclasses import asdict, dataclass, replace
from datetime import UTC, datetime
from importlib import metadata

import numpy as np
import xarray as xr

from bayes_rr import __version__
from bayes_rr.core import DEFAULT_PROB, interrupts
from bayes_rr.core.jsonio import jsonable
from bayes_rr.families import family_of
from bayes_rr.inference.sampling import (
    Diagnostics,
    SamplerSettings,
    cached_compiled,
    check_memory,
    convergence_gate,
    design_key,
    sample_study,
    separate_modes,
)
from bayes_rr.priors.spec import ModelSpec
from bayes_rr.results.estimands import (
    SummaryRow,
    compute_estimands,
    latent_draws,
    log_likelihood_dataset,
    summarize,
)
from bayes_rr.results.limitations import Limitation, design_limitations
from bayes_rr.results.readings import (  # noqa: F401 (HYPER_PARAMETERS re-exported)
    HYPER_PARAMETERS,
    mark_limited,
    plain_readings,
    wrong_call_summary,
)
from bayes_rr.study.data import StudyData
from bayes_rr.workflow.preflight import Preflight, preflight

PACKAGES = ("pymc", "pytensor", "nutpie", "arviz", "numpy", "scipy", "pandas", "xarray")


@dataclass(frozen=True)
class FitResult:
    """Everything a fit produced; nothing here is recomputed later."""

    study: StudyData
    spec: ModelSpec
    settings: SamplerSettings
    idata: object
    estimands: xr.Dataset
    diagnostics: Diagnostics
    estimand_rows: tuple[SummaryRow, ...]
    parameter_rows: tuple[SummaryRow, ...]
    prob: float
    interval: str
    provenance: dict
    limitations: tuple[Limitation, ...] = ()
    wrong_calls: dict | None = None
    """Rates in words, appraisers who stand out, and (latent class) identification;
    None for a model without wrong-call rates."""
    criteria: tuple[dict, ...] = ()
    """Acceptance criteria with the probability that each is met (see decisions)."""
    comparisons: dict | None = None
    """The study's appraisers compared (see decisions.compare_appraisers)."""
    prior_sensitivity: dict | None = None
    """Power-scaling prior sensitivity of the study- and system-level results."""
    prior_from: dict | None = None
    """The earlier study carried in as prior and how well it was approximated."""
    production: dict | None = None
    """What was assumed of production, the strategies compared and the decision
    (results.production.production_document); None without a production file."""
    preflight: Preflight | None = None
    """Options and columns the model does not use, and warnings about the data against
    the model, found before sampling."""
    reference_comparison: dict | None = None
    """With a fallible reference: the rates against it and against the reference taken
    as exact, and the parts whose reference the calls doubt
    (results.reference_shift.reference_comparison)."""


def package_versions() -> dict[str, str]:
    versions = {"python": sys.version.split()[0], "bayes_rr": __version__}
    for name in PACKAGES:
        try:
            versions[name] = metadata.version(name)
        except metadata.PackageNotFoundError:
            versions[name] = "not installed"
    return versions


def _observed_groups(study: StudyData) -> tuple[xr.Dataset, xr.Dataset]:
    cells = study.cells
    labels = [f"{p} | {a}" for p, a in zip(cells["part"], cells["appraiser"], strict=True)]
    coords = {"cell": labels}
    observed = xr.Dataset({"s": ("cell", cells["s"].to_numpy())}, coords=coords)
    constant = {
        "n": ("cell", cells["n"].to_numpy()),
        "part_index": ("cell", cells["part_index"].to_numpy()),
        "appraiser_index": ("cell", cells["appraiser_index"].to_numpy()),
        "cell_part": ("cell", cells["part"].to_numpy().astype(str)),
        "cell_appraiser": ("cell", cells["appraiser"].to_numpy().astype(str)),
    }
    constant_ds = xr.Dataset(constant, coords=coords)
    if study.reference is not None:
        constant_ds["reference"] = xr.DataArray(
            study.reference.to_numpy(), dims="part", coords={"part": list(study.parts)}
        )
    return observed, constant_ds


def fit_study(
    study: StudyData,
    spec: ModelSpec,
    settings: SamplerSettings,
    *,
    prob: float = DEFAULT_PROB,
    interval: str = "eti",
    production=None,
    criteria: tuple = (),
    prior_from: dict | None = None,
    two_stage: bool = False,
) -> FitResult:
    """Sample the posterior of ``spec`` for ``study`` and compute every estimand.

    ``production`` (:class:`bayes_rr.study.production.ProductionMix`, the families with
    wrong-call rates) adds the production-scope rows, the strategies compared and, with
    costs or production criteria, the decision (docs/statistics.md). ``criteria``
    (:class:`bayes_rr.results.decisions.Criterion`) are evaluated on the draws. ``prior_from``
    (:func:`bayes_rr.priors.earlier.as_dict`) records the earlier study a spec carries.
    ``two_stage`` samples FIRST_STAGE_DRAWS a chain first and ``settings.draws`` (the
    cap) only when that sample fails the convergence gate; the gate is the same either
    way, and the provenance records the draws used.

    Refuses (``SpecError``) a run that would not fit in memory, before compiling.
    An interrupt (``KeyboardInterrupt``) at any point stops the fit; a sample that a
    library cut short is never summarised.
    """
    from bayes_rr.families.pymc_parts import parameterizations

    _check_production(production, criteria, spec, study)
    checked = preflight(study, spec, production)
    requested = settings
    stages = [settings]
    if two_stage and settings.draws > FIRST_STAGE_DRAWS:
        stages = [replace(settings, draws=FIRST_STAGE_DRAWS), settings]
    # The memory a fit needs follows the draws it takes: the first stage now, the full
    # number only when the gate asks for it (checked again then).
    size = (len(study.parts), len(study.appraisers), len(study.cells))
    check_memory(*size, stages[0], spec.family)
    if criteria:
        _check_criteria(criteria, spec, study, settings.seed)
    started = datetime.now(UTC)
    interrupts.checkpoint("compiling", f"the {spec.name} model")
    t0 = time.perf_counter()
    # A study of a design compiled before in this process (many simulated studies,
    # a batch of one station's files) only swaps its calls into that compiled model.
    key = design_key(spec, study)
    compiled = None
    if settings.sampler == "nutpie":
        compiled = cached_compiled(key, study.cells["s"].to_numpy())
    reused = compiled is not None
    timings = {"cache_lookup_s": time.perf_counter() - t0}
    compile_source = "reused in this process" if reused else None
    integrate = True
    retries: list[str] = []
    for number in range(1, len(stages) + 1):
        stage = stages[number - 1]
        if number > 1:
            check_memory(*size, stage, spec.family, why=_SECOND_STAGE)
        sample = sample_study(spec, study, stage, integrate=integrate, compiled=compiled, key=key)
        run, integrate = sample.run, sample.integrate
        if sample.retried:
            retries.append(sample.retried)
            # the later stage keeps the raised target acceptance
            stage = sample.settings
            stages = [replace(s, target_accept=stage.target_accept) for s in stages]
        compiled = run.compiled
        compile_source = compile_source or run.compile_source
        for key_, value in run.timings.items():
            timings[key_] = timings.get(key_, 0.0) + value
        summary = _summarise(run.idata, spec, study, stage, prob, interval, production, criteria)
        for key_, value in summary.timings.items():
            timings[key_] = timings.get(key_, 0.0) + value
        # The first stage's sample is kept when it passes the gate, or when its chains
        # sit in separate modes (more draws cannot join them); otherwise the same
        # compiled model runs again with the full number of draws.
        if summary.diagnostics.ok or summary.diagnostics.modes or number == len(stages):
            break
    settings = stage
    posterior, estimands, idata = summary.posterior, summary.estimands, summary.idata
    limitations, estimand_rows = summary.limitations, summary.estimand_rows
    parameter_rows, diagnostics = summary.parameter_rows, summary.diagnostics
    t0 = time.perf_counter()
    wrong_calls = wrong_call_summary(estimands, estimand_rows, spec, prob, diagnostics.ok)
    from bayes_rr.results.decisions import compare_appraisers

    repeated = study.cells.groupby("appraiser")["n"].max().gt(1)
    repeated = {str(name): bool(flag) for name, flag in repeated.items()}
    comparisons = compare_appraisers(estimands, prob, repeated=repeated) if diagnostics.ok else None
    from bayes_rr.priors.sensitivity import prior_sensitivity

    sensitivity = prior_sensitivity(posterior, estimands, idata.log_likelihood, spec)
    criteria_rows = ()
    if criteria:
        from bayes_rr.results.decisions import evaluate_criteria

        criteria_rows = tuple(evaluate_criteria(criteria, estimands))
    timings["summaries_s"] += time.perf_counter() - t0
    shift = None
    accuracy = spec.reference_accuracy
    if accuracy is not None and not accuracy.exact and diagnostics.ok:
        t0 = time.perf_counter()
        shift = _against_exact_reference(study, spec, requested, estimand_rows, prob,
                                         interval, two_stage)  # fmt: skip
        timings["exact_reference_fit_s"] = time.perf_counter() - t0
    provenance = {
        "started": started.isoformat(),
        "finished": datetime.now(UTC).isoformat(),
        "data_sha256": study.sha256,
        "data_source": study.source,
        "spec_name": spec.name,
        "spec_source": spec.source,
        "spec_sha256": spec.sha256,
        "spec_text": spec.text,
        "parameterizations": parameterizations(spec, study),
        "sampled_form": sample.form,
        "integration_rule_check": jsonable(sample.rule_check) or None,
        "sampled_again": retries,
        "production": None if production is None else jsonable(production.as_dict()),
        "seed": settings.seed,
        "sampler_settings": settings.as_dict(),
        "compiled_model_reused": reused,
        "compiled_model_source": compile_source,
        "stages": [{"draws": stage.draws, "chains": stage.chains} for stage in stages[:number]],
        "timings": timings,
        "versions": package_versions(),
        "platform": platform.platform(),
    }
    return FitResult(
        study=study,
        spec=spec,
        settings=settings,
        idata=idata,
        estimands=estimands,
        diagnostics=diagnostics,
        estimand_rows=estimand_rows,
        parameter_rows=parameter_rows,
        prob=prob,
        interval=interval,
        provenance=provenance,
        limitations=limitations,
        wrong_calls=wrong_calls,
        criteria=criteria_rows,
        comparisons=comparisons,
        prior_sensitivity=sensitivity,
        prior_from=prior_from,
        production=summary.production,
        preflight=checked,
        reference_comparison=shift,
    )


EXACT_REFERENCE_MARK = "\n# compared with: the same model, the reference taken as exact\n"


def _against_exact_reference(study, spec, settings, rows, prob, interval, two_stage) -> dict:
    """The same model with the reference taken as the truth, fitted with the same
    settings, and the rates of both side by side. The exact spec's text is marked so
    that it never shares a compiled model with the fallible one."""
    from bayes_rr.results.reference_shift import reference_comparison

    exact_spec = replace(spec, reference_accuracy=None, text=spec.text + EXACT_REFERENCE_MARK)
    exact = fit_study(study, exact_spec, settings, prob=prob, interval=interval,
                      two_stage=two_stage)  # fmt: skip
    return reference_comparison(
        [asdict(r) for r in rows],
        [asdict(r) for r in exact.estimand_rows],
        exact.diagnostics.ok,
        study.appraisers,
    )


def _has_status(study) -> bool:
    return study.reference is not None or study.partial_status is not None


def _check_production(production, criteria, spec, study) -> None:
    """Refuse, before sampling, a production file the model cannot use and production
    criteria without one."""
    from bayes_rr.core.errors import SpecError

    if production is not None:
        if not family_of(spec).takes_production:
            raise SpecError(
                f"{production.source}: production figures need a model with wrong-call rates "
                f"(reference-logit, latent-class, call-curve, latent-trait), not "
                f"{spec.name!r}; leave out the production file, or fit one of those"
            )
        if family_of(spec).production_needs_reference and not _has_status(study):
            raise SpecError(
                f"{production.source}: the {spec.name!r} model gives production figures only "
                "when some parts have a reference status (they place the limit on its scale); "
                "add a reference column, or leave the production file out"
            )
        from bayes_rr.study.production import check_against_study

        strata = None if study.stratum is None else sorted(set(study.stratum))
        check_against_study(production, list(study.appraisers), study.source, strata)
        if production.strata is not None and family_of(spec).stratified_calls is None:
            raise SpecError(
                f"{production.source}: strata are reweighted from the study's parts of known "
                f"status; the {spec.name!r} model has none (use reference-logit, with a "
                "reference status per part), or leave strata out"
            )
        measured_model = "reference_value" in family_of(spec).info.needs
        if production.has_measured and not measured_model:
            raise SpecError(
                f"{production.source}: a distribution of the measured value is used by the "
                f"call-curve model only, not by {spec.name!r}; give bad_share instead"
            )
        if measured_model and not production.has_measured:
            raise SpecError(
                f"{production.source}: the {spec.name!r} model needs the distribution of the "
                "measured value in production (mean and sd, or values), not a bad share"
            )
    wanted = [c for c in criteria if c.scope == "production"]
    if wanted and production is None:
        raise SpecError(
            f"criterion {wanted[0].key!r} has scope 'production', but no production file was "
            "given; add --production FILE (docs/statistics.md, production scope)"
        )


def _check_criteria(criteria, spec, study, seed: int) -> None:
    """Refuse, before sampling, a criterion this model will not give: the estimands of
    two prior draws carry exactly the names a fit's estimands will."""
    from bayes_rr.priors.prior_draws import draw_prior
    from bayes_rr.results.decisions import check_available, check_keys

    check_keys(criteria)
    prior = draw_prior(spec, study, 2, seed)
    with np.errstate(all="ignore"):
        estimands = compute_estimands(prior, spec, study, seed)
    check_available(criteria, estimands, spec.name)


FIRST_STAGE_DRAWS = 1000
_SECOND_STAGE = (
    f"the first {FIRST_STAGE_DRAWS:,} draws a chain did not pass the convergence gate, and "
)
"""Draws a chain of a two-stage fit's first stage: enough for the gate's ESS of 400 in
most studies (the demo's minimum bulk ESS at 4 x 1000 draws is about 700)."""


@dataclass(frozen=True)
class _Summarised:
    posterior: xr.Dataset
    estimands: xr.Dataset
    idata: object
    limitations: tuple
    estimand_rows: tuple
    parameter_rows: tuple
    diagnostics: Diagnostics
    timings: dict
    production: dict | None


def _summarise(raw, spec, study, settings, prob, interval, production, criteria=()) -> _Summarised:
    """Estimands, summary rows and the convergence gate of one sample."""
    import arviz as az

    interrupts.checkpoint("summarising")
    # Keep the constrained parameters only: the sampler's unconstrained copies
    # (``*_log__``) are an implementation detail.
    posterior = raw.posterior[[v for v in raw.posterior.data_vars if not v.endswith("__")]]
    t0 = time.perf_counter()
    latent = latent_draws(posterior, spec, study, seed=settings.seed)
    line = None
    if production is not None:
        from bayes_rr.results.production import line_result

        line = line_result(posterior, spec, study, production, settings.seed)
        latent = replace(latent, extra={**latent.extra, **line.variables})
    estimands = compute_estimands(posterior, spec, study, settings.seed, latent=latent)
    observed, constant = _observed_groups(study)
    idata = az.InferenceData(
        posterior=posterior,
        sample_stats=raw.sample_stats,
        log_likelihood=log_likelihood_dataset(posterior, latent, study),
        observed_data=observed,
        constant_data=constant,
    )
    timings = {"estimands_s": time.perf_counter() - t0}
    t0 = time.perf_counter()
    hyper = posterior[[v for v in HYPER_PARAMETERS if v in posterior]]
    limitations = tuple(design_limitations(study, spec))
    estimand_rows = tuple(mark_limited(summarize(estimands, prob, interval), limitations))
    parameter_rows = tuple(summarize(hyper, prob, interval, level="parameter"))
    diagnostics = convergence_gate(
        estimand_rows + parameter_rows,
        idata.sample_stats,
        modes=separate_modes(hyper),
        mode_advice=family_of(spec).mode_advice,
    )
    document = None
    if line is not None:
        from bayes_rr.results.production import production_document

        document = production_document(line, prob, tuple(criteria), (posterior, spec, study))
    timings["summaries_s"] = time.perf_counter() - t0
    return _Summarised(posterior, estimands, idata, limitations, estimand_rows,
                       parameter_rows, diagnostics, timings, document)  # fmt: skip
