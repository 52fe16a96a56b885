"""Commands of many fits on Dask: plan, calibrate, batch."""

from __future__ import annotations

from pathlib import Path
from typing import Annotated

import typer
from rich.table import Table

from bayes_rr.cli.shell import Col, err, handles_errors, main, out
from bayes_rr.cli.terminal import _print_failures
from bayes_rr.core import interrupts

# ---------------------------------------------------------------------------
# many fits on Dask: plan, calibrate, batch

Workers = Annotated[
    int | None,
    Col(
        "--workers",
        min=1,
        max=512,
        help="Worker processes of the local Dask cluster (default: one a core).",
    ),
]
Scheduler = Annotated[
    str | None,
    Col(
        "--scheduler",
        help="Address of a running Dask scheduler (e.g. tcp://host:8786) "
        "instead of a cluster on this machine.",
    ),
]
RunOut = Annotated[
    Path, typer.Option("--out", help="Folder for the run (new, or this run's own to resume).")
]
Seed = Annotated[
    int,
    Col("--seed", min=0, max=2**32 - 1, help="Seed of the whole run (same seed, same results)."),
]


def _resumable(out_dir: Path, run, request, *, workers, scheduler, quiet: bool):
    """``run(request, out_dir, ...)`` on Dask; an interrupt keeps the results written so
    far and says how to go on."""
    try:
        return run(request, out_dir, workers=workers, scheduler=scheduler, progress=not quiet)
    except KeyboardInterrupt:
        from bayes_rr.simulation.runner import TASKS_DIR

        done = len(list((out_dir / TASKS_DIR).glob("*[0-9a-z].json"))) if out_dir.is_dir() else 0
        err.print(
            f"interrupted: {done} task results are kept in {out_dir}; run the same "
            "command again to go on from there",
            soft_wrap=True,
        )
        raise typer.Exit(interrupts.INTERRUPT_EXIT_CODE) from None


@handles_errors
def plan(
    out_dir: RunOut,
    model: Annotated[
        str | None,
        Col(
            "--model",
            help="Bundled model name or a spec file (default crossed-logit, or "
            "the model of --prior-from).",
        ),
    ] = None,
    parts: Annotated[
        str, Col("--parts", help="Parts to try, e.g. 20,40,60 (default 20,40).")
    ] = "20,40",
    appraisers: Annotated[
        str, Col("--appraisers", help="Appraisers to try, e.g. 2,3 (default 3).")
    ] = "3",
    trials: Annotated[str, Col("--trials", help="Trials to try, e.g. 2,3 (default 2).")] = "2",
    part_mix: Annotated[
        float | None,
        Col(
            "--part-mix",
            help="reference-logit: share of parts whose status is reject (default 0.5); "
            "latent-class: share of reject parts (default: drawn); call-curve: share of "
            "values beyond the limit (default 0.5); other models: share of borderline "
            "parts, rejected 10-90% of the time (default: as the prior gives them).",
        ),
    ] = None,
    sims: Annotated[int, Col("--sims", help="Simulated studies per design (default 50).")] = 50,
    seed: Seed = 1,
    prior_from: Annotated[
        Path | None,
        Col("--prior-from", help="An earlier fit folder: simulate from its posterior."),
    ] = None,
    production: Annotated[
        Path | None,
        Col(
            "--production",
            help="What you know of the line (TOML, as for fit): plans for escapes per million.",
        ),
    ] = None,
    criteria: Annotated[
        Path | None, Col("--criteria", help="Acceptance criteria (TOML): gives assurance.")
    ] = None,
    target_width: Annotated[
        float | None, Col("--target-width", help="Wanted median width of --target-key's interval.")
    ] = None,
    target_assurance: Annotated[
        float | None,
        Col("--target-assurance", help="Wanted share of studies meeting every criterion."),
    ] = None,
    target_key: Annotated[
        str | None,
        Col(
            "--target-key",
            help="Result the width target is for (default: "
            "false accept rate with a reference, else reproducibility variance).",
        ),
    ] = None,
    draws: Annotated[int | None, Col("--draws", help="Draws a chain per simulated fit.")] = None,
    workers: Workers = None,
    scheduler: Scheduler = None,
    quiet: Annotated[bool, typer.Option("--quiet", help="No progress bar.")] = False,
) -> None:
    """Plan the next study: expected interval widths (and assurance) for each design."""
    from bayes_rr.api.planning import plan_request
    from bayes_rr.simulation.plan import run_plan

    request = plan_request(
        model, parts=parts, appraisers=appraisers, trials=trials, part_mix=part_mix,
        sims=sims, seed=seed, prior_from=prior_from, criteria=criteria,
        target_width=target_width, target_assurance=target_assurance, target_key=target_key,
        draws=draws, production=production, option_prefix="--",
    )  # fmt: skip
    spec, wanted = request.spec, request.criteria
    document = _resumable(
        out_dir, run_plan, request, workers=workers, scheduler=scheduler, quiet=quiet
    )
    table = Table(
        title=f"Expected {request.prob:.0%} interval widths (median over the "
        f"simulated studies) with the model {spec.name}"
    )
    keys = list(dict.fromkeys(k for row in document["designs"] for k in row["expected_width"]))
    designs = document["designs"]
    # one column per design: the results' names are long, the designs few
    table.add_column("result (scope)")
    for row in designs:
        table.add_column(f"{row['parts']}x{row['appraisers']}x{row['trials']}", justify="right")
    from bayes_rr.core import glossary

    for key in keys:
        scope, _, short = key.split("__")
        cells = [_with_se(row["expected_width"].get(key), row.get("expected_width_se", {})
                          .get(key), percent=False) for row in designs]  # fmt: skip
        table.add_row(f"{glossary.name(short)} ({scope})", *cells)
    if wanted:
        table.add_row("assurance", *[_with_se(r["assurance"], r.get("assurance_se"),
                                              percent=True) for r in designs])  # fmt: skip
    table.add_row("fits ok", *[f"{r['fits_converged']}/{r['sims']}" for r in designs])
    reached = [r["borderline_share_reached"] for r in designs]
    if part_mix is not None and any(share is not None for share in reached):
        table.add_row("borderline share reached",
                      *["-" if s is None else f"{s:.0%}" for s in reached])  # fmt: skip
    out.print(table)
    out.print(
        "each figure over its Monte Carlo standard error (the simulated studies' own "
        "noise; more --sims shrink it)"
    )
    if document.get("criteria_hold_probability") is not None and target_assurance is None:
        out.print(
            "the earlier fit puts every criterion on its required side with posterior "
            f"probability {document['criteria_hold_probability']:.2f} (an assurance ceiling)"
        )
    out.print(document["recommendation"])
    _print_failures(document["failures"])
    out.print(f"plan written to {out_dir / 'plan.json'} (figure: plan_widths.png)")


def _with_se(value: float | None, se: float | None, *, percent: bool) -> str:
    """A plan figure over its Monte Carlo standard error."""
    if value is None:
        return "-"
    if percent:
        return f"{value:.0%}" + ("" if se is None else f"\n±{se:.0%}")
    shown = f"{value:.3g}"
    return shown if se is None or se != se else f"{shown}\n±{se:.1g}"


@handles_errors
def calibrate(
    out_dir: RunOut,
    model: Annotated[str, Col("--model", help="Bundled model name or a spec file.")] = (
        "beta-binomial"
    ),
    parts: Annotated[int, Col("--parts", min=2, max=2000, help="Parts of the design.")] = 20,
    appraisers: Annotated[int, Col("--appraisers", min=1, max=50, help="Appraisers.")] = 3,
    trials: Annotated[int, Col("--trials", min=1, max=20, help="Trials.")] = 2,
    part_mix: Annotated[
        float | None,
        Col(
            "--part-mix",
            help="reference-logit: share of reference-reject parts; call-curve: share of "
            "values beyond the limit (other models draw their parts from the prior).",
        ),
    ] = None,
    sims: Annotated[int, Col("--sims", help="Simulated studies (at least 10).")] = 100,
    seed: Seed = 1,
    draws: Annotated[int | None, Col("--draws", help="Draws a chain per fit.")] = None,
    workers: Workers = None,
    scheduler: Scheduler = None,
    quiet: Annotated[bool, typer.Option("--quiet", help="No progress bar.")] = False,
) -> None:
    """Check that the model's intervals are calibrated (simulation-based calibration)."""
    from bayes_rr.priors.spec import load_spec
    from bayes_rr.simulation.calibrate import CalibrationRequest, run_calibration
    from bayes_rr.simulation.designs import Design

    request = CalibrationRequest(
        load_spec(model), Design(parts, appraisers, trials, part_mix), sims, seed, draws=draws
    )
    document = _resumable(
        out_dir, run_calibration, request, workers=workers, scheduler=scheduler, quiet=quiet
    )
    table = Table(
        title=f"Calibration of {document['spec_name']} on {parts} parts x "
        f"{appraisers} appraisers x {trials} trials ({document['sims']} studies)"
    )
    labels = [_calibration_label(row["name"]) for row in document["parameters"]]
    table.caption = (
        "ranks p: uniformity of the truth's rank among the draws (Kolmogorov-Smirnov); "
        "50%/90% held: share of studies whose interval held the truth; in band: the rank "
        "ECDF inside its simultaneous 95% band"
    )
    table.add_column("quantity")
    for col in ("ranks p", "50% held", "90% held", "in band"):
        table.add_column(col, justify="right", no_wrap=True)
    for row, label in zip(document["parameters"], labels, strict=True):
        table.add_row(
            label,
            f"{row['rank_uniformity_p']:.3f}",
            f"{row['coverage_50']:.0%}",
            f"{row['coverage_90']:.0%}",
            "yes" if row["ecdf_within_band"] else "NO",
        )
    out.print(table)
    out.print(document["verdict"])
    _print_failures(document["failures"])
    out.print(
        f"calibration written to {out_dir / 'calibration.json'} (figure: calibration_ranks.png)"
    )


def _calibration_label(name: str) -> str:
    """A result key in words ('false reject rate, system (study)'); a parameter as is."""
    from bayes_rr.core import glossary

    parts = name.split("__")
    if len(parts) != 3:
        return name
    scope, level, key = parts
    where = "" if level == "study" else f", {level}"
    return f"{glossary.name(key)}{where} ({scope})"


@handles_errors
def batch(
    studies: Annotated[
        str,
        typer.Argument(help="A folder of study files, or a quoted glob such as 'stations/*.csv'."),
    ],
    out_dir: RunOut,
    model: Annotated[
        str | None,
        Col("--model", help="Model for every study (default: chosen per file as 'fit' does)."),
    ] = None,
    seed: Seed = 20240601,
    draws: Annotated[int | None, Col("--draws", help="Draws a chain (default: as 'fit').")] = None,
    workers: Workers = None,
    scheduler: Scheduler = None,
    quiet: Annotated[bool, typer.Option("--quiet", help="No progress bar.")] = False,
) -> None:
    """Fit every study file the same way and tabulate them (CSV and HTML)."""
    from bayes_rr.simulation.batch import BatchRequest, find_study_files, run_batch

    request = BatchRequest(find_study_files(studies), model, seed, draws)
    document = _resumable(
        out_dir, run_batch, request, workers=workers, scheduler=scheduler, quiet=quiet
    )
    converged = sum(1 for r in document["rows"] if r["converged"])
    out.print(
        f"{len(document['rows'])} studies fitted ({converged} passed the convergence "
        f"gate), {len(document['failures'])} could not be"
    )
    _print_failures(document["failures"])
    out.print(
        f"table written to {out_dir / 'batch.csv'} and {out_dir / 'batch.html'}; "
        f"a fit folder per study in {out_dir / 'fits'}"
    )
    if document["failures"]:
        raise typer.Exit(1)


if __name__ == "__main__":
    main()
