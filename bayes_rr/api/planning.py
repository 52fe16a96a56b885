"""Many fits from Python: plan the next study, check that intervals are calibrated.

Both run on a Dask cluster (local by default) and write a run folder, as the commands
``bayes-rr plan`` and ``bayes-rr calibrate`` do; they return the run's JSON document.
"""

from __future__ import annotations

from collections.abc import Sequence
from pathlib import Path


def _counts(values: int | str | Sequence[int], name: str, least: int, most: int):
    from bayes_rr.simulation.designs import parse_counts

    if not isinstance(values, (int, str)):
        values = ",".join(str(v) for v in values)
    return parse_counts(values, name, least, most)


def plan_request(
    model: str | Path | None = None,
    *,
    parts: int | str | Sequence[int] = (20, 40),
    appraisers: int | str | Sequence[int] = 3,
    trials: int | str | Sequence[int] = 2,
    part_mix: float | None = None,
    sims: int = 50,
    seed: int = 1,
    prior_from: str | Path | None = None,
    criteria: str | Path | None = None,
    target_width: float | None = None,
    target_assurance: float | None = None,
    target_key: str | None = None,
    draws: int | None = None,
    production=None,
    option_prefix: str = "",
):
    """The :class:`~bayes_rr.simulation.plan.PlanRequest` of a plan, checked (counts as
    numbers, lists or text such as ``"20,40"``; ``option_prefix`` names them in messages,
    ``"--"`` for the command line). ``model`` defaults to the earlier fit's model with
    ``prior_from``, else to crossed-logit."""
    from bayes_rr.priors.spec import load_spec
    from bayes_rr.results.decisions import check_keys, load_criteria
    from bayes_rr.simulation.designs import MAX_APPRAISERS, MAX_PARTS, MAX_TRIALS, design_grid
    from bayes_rr.simulation.plan import PlanRequest

    if model is None and prior_from is not None:
        from bayes_rr.io.fit_folder import load_fit

        spec = load_fit(prior_from).spec  # the earlier fit's own model
    else:
        spec = load_spec("crossed-logit" if model is None else model)
    wanted = load_criteria(criteria) if criteria is not None else ()
    check_keys(wanted)
    grid = design_grid(
        _counts(parts, f"{option_prefix}parts", 2, MAX_PARTS),
        _counts(appraisers, f"{option_prefix}appraisers", 1, MAX_APPRAISERS),
        _counts(trials, f"{option_prefix}trials", 1, MAX_TRIALS),
        part_mix,
    )
    earlier = None if prior_from is None else str(prior_from)
    if isinstance(production, (str, Path)):
        from bayes_rr.study.production import read_production

        production = read_production(production)
    return PlanRequest(spec, tuple(grid), sims, seed, wanted, target_width, target_assurance,
                       target_key, earlier_folder=earlier, draws=draws,
                       production=production)  # fmt: skip


def plan(
    out: str | Path,
    model: str | Path | None = None,
    *,
    workers: int | None = None,
    scheduler: str | None = None,
    progress: bool = False,
    **design,
) -> dict:
    """Expected interval widths (and, with criteria, assurance) of each design of the
    grid ``parts`` x ``appraisers`` x ``trials``; writes ``plan.json`` into ``out`` and
    returns it (``document["designs"]`` is a row per design). ``design`` takes the
    keywords of :func:`plan_request`: ``parts``, ``appraisers``, ``trials``, ``part_mix``,
    ``sims``, ``seed``, ``prior_from``, ``criteria``, ``target_width``,
    ``target_assurance``, ``target_key``, ``draws``, ``production`` (a production file:
    the fits give production figures that criteria and targets may name)."""
    from bayes_rr.simulation.plan import run_plan

    request = plan_request(model, **design)
    return run_plan(request, Path(out), workers=workers, scheduler=scheduler, progress=progress)


def calibrate(
    out: str | Path,
    model: str | Path = "crossed-logit",
    *,
    parts: int = 20,
    appraisers: int = 3,
    trials: int = 2,
    part_mix: float | None = None,
    sims: int = 100,
    seed: int = 1,
    draws: int | None = None,
    workers: int | None = None,
    scheduler: str | None = None,
    progress: bool = False,
) -> dict:
    """Simulation-based calibration of the model at one design; writes
    ``calibration.json`` into ``out`` and returns it (``document["verdict"]``)."""
    from bayes_rr.priors.spec import load_spec
    from bayes_rr.simulation.calibrate import CalibrationRequest, run_calibration
    from bayes_rr.simulation.designs import Design

    request = CalibrationRequest(
        load_spec(model), Design(parts, appraisers, trials, part_mix), sims, seed, draws=draws
    )
    return run_calibration(request, Path(out), workers=workers, scheduler=scheduler,
                           progress=progress)  # fmt: skip
