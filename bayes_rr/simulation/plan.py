"""Planning the next study: for each design of a grid, simulate studies from the prior
(or from an earlier fit's posterior), fit each, and tabulate the interval widths to
expect and, with acceptance criteria, the assurance (the share of studies in which
every criterion is met)."""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import numpy as np

from bayes_rr.core import DEFAULT_PROB
from bayes_rr.core.errors import SpecError
from bayes_rr.core.glossary import result_label
from bayes_rr.families import family_of
from bayes_rr.priors.spec import ModelSpec
from bayes_rr.simulation.designs import Design, check_simulated
from bayes_rr.simulation.quick import PLAN_KEYS, interval, quick_fit, simulation_settings
from bayes_rr.simulation.runner import Task, run_folder, run_tasks
from bayes_rr.simulation.seeds import derived_seed, signature
from bayes_rr.simulation.truths import simulate_design

PLAN_FILE = "plan.json"
FIGURE_FILE = "plan_widths.png"
MAX_SIMS = 10_000


@dataclass(frozen=True)
class PlanRequest:
    """What to plan: the model, the designs, how many simulations, and the target."""

    spec: ModelSpec
    designs: tuple[Design, ...]
    sims: int
    seed: int
    criteria: tuple = ()
    target_width: float | None = None
    target_assurance: float | None = None
    target_key: str | None = None
    prob: float = DEFAULT_PROB
    earlier_folder: str | None = None
    draws: int | None = None
    tune: int | None = None
    production: object | None = None
    """A ProductionMix: the simulated fits give production figures, and criteria and
    targets may name them."""


def default_target_key(spec: ModelSpec) -> str:
    """The result that usually decides a design: the false accept rate when parts have a
    reference status, otherwise the reproducibility variance (few appraisers pin it
    down slowest)."""
    return family_of(spec).default_plan_target


def resolve_target_key(key: str | None, spec: ModelSpec) -> str:
    """A full result name from a short key (``repeatability_variance``) or a full one."""
    if key is None:
        return default_target_key(spec)
    names = {name: name for name in PLAN_KEYS}
    for name in PLAN_KEYS:
        names.setdefault(name.split("__")[-1], name)
    if key not in names:
        short = sorted({n.split("__")[-1] for n in PLAN_KEYS})
        raise SpecError(f"--target-key {key!r}: expected one of {short} (or a full name)")
    return names[key]


def check_request(request: PlanRequest) -> None:
    check_simulated(request.spec, request.designs[0].part_mix if request.designs else None)
    if not 2 <= request.sims <= MAX_SIMS:
        raise SpecError(f"--sims {request.sims}: expected a whole number from 2 to {MAX_SIMS}")
    if request.target_width is not None and not request.target_width > 0:
        raise SpecError(f"--target-width {request.target_width!r}: expected a positive width")
    if request.target_assurance is not None:
        if not 0 < request.target_assurance < 1:
            raise SpecError(f"--target-assurance {request.target_assurance!r}: expected a "
                            "share between 0 and 1")  # fmt: skip
        if not request.criteria:
            raise SpecError("--target-assurance needs --criteria FILE: assurance is the share "
                            "of simulated studies in which every criterion is met")  # fmt: skip
    if request.target_width is not None and request.target_assurance is not None:
        raise SpecError("give --target-width or --target-assurance, not both")
    _check_appraiser_criteria(request)
    _check_production(request)


def _check_appraiser_criteria(request: PlanRequest) -> None:
    named = [c.appraiser for c in request.criteria if c.appraiser is not None]
    if named:
        raise SpecError(
            f"a criterion names the appraiser {named[0]!r}: simulated studies have appraisers "
            "of their own, not the study's; plan with criteria on the study or the system, "
            "and judge one appraiser in the fit (bayes-rr fit --criteria)"
        )


def _check_production(request: PlanRequest) -> None:
    """A production file suits a model with wrong-call rates and no strata (simulated
    studies have none); production criteria and targets need one."""
    from bayes_rr.families import family_of

    mix = request.production
    wanted = [c.key for c in request.criteria if c.scope == "production"]
    if request.target_key and resolve_target_key(request.target_key, request.spec).startswith(
        "production__"
    ):
        wanted.append(request.target_key)
    if mix is None:
        if wanted:
            raise SpecError(f"{wanted[0]!r} is a production figure: give --production FILE")
        return
    if not family_of(request.spec).takes_production:
        raise SpecError(f"{mix.source}: production figures need a model with wrong-call "
                        f"rates, not {request.spec.name!r}")  # fmt: skip
    if family_of(request.spec).production_needs_reference:
        raise SpecError(f"{mix.source}: simulated {request.spec.name!r} studies have no "
                        "reference status to place the limit; plan without production "
                        "figures")  # fmt: skip
    if mix.strata is not None:
        raise SpecError(f"{mix.source}: simulated studies have no strata; give bad_share "
                        "for planning")  # fmt: skip


def plan_task(payload: dict) -> dict:
    """One simulated study fitted: the widths of the planned results and whether every
    criterion was met."""
    fit, estimands = quick_fit(payload["study"], payload["spec"], payload["settings"],
                               PLAN_KEYS, payload.get("production"))  # fmt: skip
    widths = {}
    for key in PLAN_KEYS:
        if key in fit.draws:
            low, high = interval(fit.draws[key], payload["prob"])
            widths[key] = high - low
    met = None
    probabilities = []
    if payload["criteria"]:
        from bayes_rr.results.decisions import evaluate_criteria

        rows = evaluate_criteria(payload["criteria"], estimands)
        probabilities = [row["probability"] for row in rows]
        met = all(row["met"] for row in rows)
    return {
        "widths": widths,
        "criteria_met": met,
        "criteria_probabilities": probabilities,
        "converged": fit.ok,
        "max_r_hat": fit.max_r_hat,
        "min_ess": fit.min_ess,
        "seconds": fit.seconds,
        "compiled_reused": fit.compiled_reused,
    }


def _tasks(request: PlanRequest, earlier_posterior, analysis_spec: ModelSpec):
    tasks, simulated = [], []
    for d, design in enumerate(request.designs):
        sim = simulate_design(request.spec, design, request.sims, derived_seed(request.seed, d),
                              earlier_posterior=earlier_posterior)  # fmt: skip
        simulated.append(sim)
        for k in range(request.sims):
            seed = derived_seed(request.seed, d, k)
            settings = simulation_settings(analysis_spec, seed, draws=request.draws,
                                           tune=request.tune)  # fmt: skip
            payload = {"spec": analysis_spec, "study": sim.study(k), "settings": settings,
                       "criteria": request.criteria, "prob": request.prob,
                       "production": request.production}  # fmt: skip
            describe = {**design.as_dict(), "simulation": k + 1, "seed": seed}
            tasks.append(Task(f"d{d:02d}-s{k:04d}", payload, describe))
    return tasks, simulated


def _summarise_design(design: Design, results: list[dict], failures: int, reached) -> dict:
    converged = [r for r in results if r["converged"]]
    widths, ranges, width_se = {}, {}, {}
    for key in PLAN_KEYS:
        values = np.array([r["widths"][key] for r in converged if key in r["widths"]])
        values = values[np.isfinite(values)]
        if values.size:
            widths[key] = float(np.median(values))
            ranges[key] = [float(values.min()), float(values.max())]
            width_se[key] = median_se(values)
    met = [r["criteria_met"] for r in results if r["criteria_met"] is not None]
    total = len(results) + failures
    assurance = (sum(met) / total) if met else None
    return {
        **design.as_dict(),
        "calls": design.parts * design.appraisers * design.trials,
        "sims": len(results) + failures,
        "fits_converged": len(converged),
        "fits_failed": failures,
        "expected_width": widths,
        "expected_width_se": width_se,
        "width_range": ranges,
        # a failed or unconverged fit cannot show a criterion met: it counts as not met
        "assurance": assurance,
        "assurance_se": None if assurance is None else binomial_se(assurance, total),
        "borderline_share_reached": None if reached is None else float(np.median(reached)),
        "seconds_per_fit": float(np.median([r["seconds"] for r in results])) if results
        else None,
    }  # fmt: skip


BOOTSTRAP_RESAMPLES = 400


def median_se(values: np.ndarray, seed: int = 0) -> float:
    """Monte Carlo standard error of a median over simulated studies: the sd of the
    medians of bootstrap resamples (fixed seed, so a plan's figures repeat)."""
    if values.size < 2:
        return float("nan")
    rng = np.random.default_rng(seed)
    picks = rng.integers(0, values.size, size=(BOOTSTRAP_RESAMPLES, values.size))
    return float(np.median(values[picks], axis=1).std(ddof=1))


def binomial_se(share: float, count: int) -> float:
    """Monte Carlo standard error of a share of ``count`` simulated studies, in the
    Agresti-Coull form (two successes and two failures added), so that a share of 0 or
    1 from few studies does not claim an error of 0."""
    if not count:
        return float("nan")
    adjusted = (share * count + 2) / (count + 4)
    return float(np.sqrt(adjusted * (1 - adjusted) / (count + 4)))


def criteria_hold_probability(criteria, estimands) -> float | None:
    """The share of an earlier fit's posterior draws in which every criterion holds (its
    quantity on the required side of the threshold). Studies simulated from that
    posterior can show the criteria met only about as often as they hold, so this
    bounds the assurance of every design. None when the earlier fit does not give every
    criterion's quantity (a production criterion of a fit without production)."""
    from bayes_rr.core.errors import SpecError
    from bayes_rr.results.decisions import criterion_draws

    if not criteria or estimands is None:
        return None
    holds = None
    for criterion in criteria:
        try:
            draws = criterion_draws(estimands, criterion)
        except SpecError:
            return None
        with np.errstate(invalid="ignore"):
            side = draws < criterion.threshold if criterion.direction == "below" else (
                draws > criterion.threshold)  # fmt: skip
        holds = side if holds is None else holds & side
    return float(np.mean(holds))


def recommendation(
    rows: list[dict], request: PlanRequest, key: str, holds: float | None = None
) -> str:
    """The smallest design (fewest calls) that reaches the target, in one sentence;
    when the earlier fit puts the criteria out of reach (``holds``, see
    :func:`criteria_hold_probability`), that instead of "try larger designs"."""

    def name(row: dict) -> str:
        return (f"{row['parts']} parts x {row['appraisers']} appraisers x {row['trials']} "
                f"trials ({row['calls']} calls)")  # fmt: skip

    if request.target_assurance is not None:
        goal = request.target_assurance
        good = [r for r in rows if r["assurance"] is not None and r["assurance"] >= goal]
        if good:
            return (f"The smallest design whose simulated studies meet every criterion in at "
                    f"least {goal:.0%} of cases is {name(good[0])}: assurance "
                    f"{good[0]['assurance']:.0%}.")  # fmt: skip
        best = max(rows, key=lambda r: r["assurance"] or 0)
        highest = best["assurance"] or 0
        if holds is not None and holds < goal:
            return (f"No design can reach an assurance of {goal:.0%}: the earlier fit puts "
                    f"every criterion on its required side with posterior probability only "
                    f"{holds:.2f}, and a new study shows the criteria met only about as often "
                    f"as they hold (the highest assurance here is {highest:.0%} with "
                    f"{name(best)}). The inspection, not the study's size, is what to "
                    "change.")  # fmt: skip
        return (f"No design of the grid reaches an assurance of {goal:.0%}; the highest is "
                f"{highest:.0%} with {name(best)}. Try larger designs.")  # fmt: skip
    label = result_label(key)
    if request.target_width is not None:
        goal = request.target_width
        good = [r for r in rows if key in r["expected_width"] and r["expected_width"][key] <= goal]
        if good:
            return (f"The smallest design whose median {request.prob:.0%} interval for the "
                    f"{label} is at most {goal:g} wide is {name(good[0])} (median width "
                    f"{good[0]['expected_width'][key]:.3g}).")  # fmt: skip
        known = [r for r in rows if key in r["expected_width"]]
        if not known:
            return f"No fit gave the {label}: check the model and the fits' failures."
        best = min(known, key=lambda r: r["expected_width"][key])
        return (f"No design of the grid reaches a median width of {goal:g} for the {label}; "
                f"the narrowest is {best['expected_width'][key]:.3g} with {name(best)}. Try "
                "larger designs.")  # fmt: skip
    return ("No target was given (--target-width or --target-assurance): read the widths "
            "against the precision the decision needs.")  # fmt: skip


def run_plan(
    request: PlanRequest, out: str | Path, *, workers: int | None = None,
    scheduler: str | None = None, progress: bool = True, client=None,
) -> dict:  # fmt: skip
    """Run the plan on Dask and write ``plan.json`` and the width figure into ``out``."""
    from bayes_rr import __version__
    from bayes_rr.core.jsonio import dumps, write_bytes_atomic, write_text_atomic
    from bayes_rr.io.fit_folder import GENERATOR
    from bayes_rr.simulation.figures import width_figure

    check_request(request)
    key = resolve_target_key(request.target_key, request.spec)
    out = Path(out)
    earlier_posterior, analysis_spec, earlier, holds = None, request.spec, None, None
    if request.earlier_folder is not None:
        from bayes_rr.io.fit_folder import load_fit
        from bayes_rr.priors.earlier import prior_from_fit

        loaded = load_fit(request.earlier_folder)
        holds = criteria_hold_probability(request.criteria, _estimands_group(loaded.idata))
        analysis_spec, _ = prior_from_fit(loaded, 1.0, request.spec)
        earlier_posterior = loaded.idata.posterior
        earlier = {"folder": str(request.earlier_folder), "data_sha256": loaded.run["data_sha256"]}
    settings = simulation_settings(analysis_spec, 0, draws=request.draws, tune=request.tune)
    run_settings = {
        "command": "plan", "spec_sha256": request.spec.sha256, "spec_name": request.spec.name,
        "designs": [d.as_dict() for d in request.designs], "sims": request.sims,
        "seed": request.seed, "prob": request.prob, "earlier": earlier,
        "criteria": [c.__dict__ for c in request.criteria],
        "production": None if request.production is None else request.production.as_dict(),
        "sampler": {"draws": settings.draws, "tune": settings.tune, "chains": settings.chains},
    }  # fmt: skip
    with run_folder(out, "plan", signature(run_settings), client=client,
                    scheduler=scheduler) as client:  # fmt: skip
        tasks, simulated = _tasks(request, earlier_posterior, analysis_spec)
        outcome = run_tasks(
            plan_task, tasks, out, client=client, workers=workers, scheduler=scheduler,
            progress=progress, what="simulated fits",
        )  # fmt: skip
        rows = []
        for d, design in enumerate(request.designs):
            prefix = f"d{d:02d}-"
            results = [v for k, v in sorted(outcome.results.items()) if k.startswith(prefix)]
            failed = sum(1 for k in outcome.failures if k.startswith(prefix))
            rows.append(_summarise_design(design, results, failed, simulated[d].borderline_share))
        document = {
            "generator": f"{GENERATOR} {__version__}",
            **run_settings,
            "target": {
                "key": key,
                "width": request.target_width,
                "assurance": request.target_assurance,
            },
            "designs": rows,
            "recommendation": recommendation(rows, request, key, holds),
            "criteria_hold_probability": holds,
            "failures": list(outcome.failures.values()),
            "resumed_tasks": outcome.resumed,
            "notes": _notes(request, analysis_spec),
        }
        figure = width_figure(rows, request.prob)
        write_bytes_atomic(out / FIGURE_FILE, figure)
        write_text_atomic(out / PLAN_FILE, dumps(document) + "\n")
        return document


def _estimands_group(idata):
    try:
        return idata["estimands"]
    except (KeyError, AttributeError):
        return None


def _notes(request: PlanRequest, spec: ModelSpec) -> list[str]:
    from bayes_rr.simulation.designs import PART_MIX_HELP
    from bayes_rr.simulation.quick import SIM_ESS_MIN, SIM_R_HAT_MAX

    source = ("the earlier fit's posterior (new parts and appraisers from the population it "
              "describes)" if request.earlier_folder else "the model's prior")  # fmt: skip
    return [
        f"Studies were simulated from {source} and fitted with the model {spec.name}.",
        f"Widths are of {request.prob:.0%} equal-tailed intervals, over the fits that met the "
        f"simulation gate (r_hat <= {SIM_R_HAT_MAX}, bulk ESS >= {SIM_ESS_MIN}); a fit that "
        "failed or missed the gate counts as not meeting the criteria.",
        "Part mix: " + PART_MIX_HELP,
        "A plan is only as good as the prior it simulates from: a prior wider than the "
        "truth plans for studies larger than needed, a narrower one for too small ones.",
    ]
