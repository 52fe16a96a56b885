"""Commands that fit a study and work on fit folders: fit, check, compare, report."""

from __future__ import annotations

import sys
from pathlib import Path
from typing import Annotated

import typer
from rich.table import Table

from bayes_rr.cli.shell import Col, DataArg, Prob, _in_terminal, data_options, handles_errors, out
from bayes_rr.cli.terminal import FitDir, print_checks, print_fit
from bayes_rr.core import DEFAULT_PROB, interrupts
from bayes_rr.core.errors import DataError
from bayes_rr.core.jsonio import dumps
from bayes_rr.families import default_model
from bayes_rr.inference.sampling import MAX_CHAINS, MAX_DRAWS
from bayes_rr.study.data import ReadOptions


def production_input(path: Path | None, mean: float | None, sd: float | None, values: Path | None):
    """What the options say of production (a ProductionMix), or None: a production file,
    or (call curve) the measured value's distribution given on the command line."""
    from bayes_rr.study.production import ProductionMix, read_production

    short = mean is not None or sd is not None or values is not None
    if path is not None:
        if short:
            raise DataError(
                "give --production FILE or --production-mean/-sd/-values, not both; the file "
                "takes mean, sd and values too"
            )
        return read_production(path)
    if values is not None:
        if mean is not None or sd is not None:
            raise DataError("give --production-values or --production-mean/-sd, not both")
        from bayes_rr.study.data import read_values

        return ProductionMix(values=read_values(values), source=str(values))
    if mean is None and sd is None:
        return None
    if mean is None or sd is None or not sd > 0:
        raise DataError(
            f"--production-mean {mean} --production-sd {sd}: give both, with a positive sd"
        )
    return ProductionMix(mean=mean, sd=sd, source="--production-mean/--production-sd")


def run_fit(
    data: Path,
    options: ReadOptions,
    model: str | None,
    out_dir: Path,
    *,
    draws: int | None = None,
    tune: int | None = None,
    chains: int | None = None,
    seed: int | None = None,
    target_accept: float | None = None,
    sampler: str | None = None,
    prob: float = DEFAULT_PROB,
    interval: str = "eti",
    quiet: bool = False,
    overwrite: bool = False,
    production=None,
    criteria: Path | None = None,
    prior_from: Path | None = None,
    prior_weight: float = 1.0,
    keep_all_draws: bool = False,
) -> tuple[dict, dict]:
    """Read, fit, write; return summary.json's and classical.json's content (the library
    function behind 'fit').

    The output folder is checked before anything is read, so a run never samples
    only to find that it cannot write, or would replace what it must not.

    ``prior_from`` (an earlier fit folder) carries that fit's posterior in as prior,
    discounted by ``prior_weight``; the earlier fit's model is used unless ``model``
    names one of the same family and terms, and its criteria unless ``criteria`` is
    given.
    """
    from bayes_rr.io.fit_folder import check_output_dir
    from bayes_rr.priors.spec import load_spec

    if interval not in ("hdi", "eti"):
        raise DataError(f"--interval {interval!r}: expected 'hdi' or 'eti'")
    protected = (data,) if prior_from is None else (data, prior_from)
    check_output_dir(out_dir, overwrite, protected=protected)
    from bayes_rr.results.decisions import check_keys, criteria_from_rows, load_criteria

    wanted = load_criteria(criteria) if criteria is not None else ()
    check_keys(wanted)
    spec = None
    if model is not None:
        spec = load_spec(model)  # a bad spec is reported before the data are read
    earlier = None
    if prior_from is not None:
        from bayes_rr.io.fit_folder import load_fit
        from bayes_rr.priors.earlier import as_dict, prior_from_fit

        loaded = load_fit(prior_from)
        spec, approximations = prior_from_fit(
            loaded, prior_weight, load_spec(model) if model is not None else None
        )
        earlier = as_dict(spec.earlier, approximations)
        out.print(
            f"model: {spec.name}, with the earlier fit {prior_from} as prior "
            f"(weight {prior_weight:g})"
        )
        if criteria is None and loaded.summary.get("criteria"):
            wanted = criteria_from_rows(loaded.summary["criteria"], str(prior_from))
            check_keys(wanted)
            out.print(f"criteria: the {len(wanted)} of the earlier fit")
    from bayes_rr.inference.sampling import SamplerSettings
    from bayes_rr.io.fit_folder import summary_document, write_fit
    from bayes_rr.io.output_safety import claimed
    from bayes_rr.study.classical import classical_statistics
    from bayes_rr.study.data import read_study
    from bayes_rr.workflow.fit import fit_study
    from bayes_rr.workflow.preflight import preflight

    # Claimed before the long work: a second run into the same folder is refused now,
    # not after both have sampled.
    with claimed(out_dir):
        interrupts.checkpoint("reading", str(data))
        study = read_study(data, options)
        if model is None and prior_from is None:
            model, why = default_model(study)
            out.print(f"model: {why}")
            spec = load_spec(model)
        settings = SamplerSettings.from_spec(
            spec,
            draws=draws,
            tune=tune,
            chains=chains,
            seed=seed,
            target_accept=target_accept,
            sampler=sampler,
            progress=_in_terminal(quiet),
        )
        checked = preflight(study, spec, production)
        for line in checked.ignored_options:
            out.print(f"not used: {line}")
        for line in checked.warnings:
            out.print(f"warning: {line}")
        classical = classical_statistics(study, prob).as_dict()
        result = fit_study(
            study, spec, settings, prob=prob, interval=interval, production=production,
            criteria=wanted, prior_from=earlier, two_stage=draws is None,
        )  # fmt: skip
        interrupts.checkpoint("writing", str(out_dir))
        write_fit(result, out_dir, overwrite=overwrite, classical=classical, protected=protected,
                  keep_all_draws=keep_all_draws)  # fmt: skip
        return summary_document(result), classical


@handles_errors
@data_options
def fit(
    data: DataArg,
    out_dir: Annotated[Path, typer.Option("--out", help="Folder for the results (new or empty).")],
    model: Annotated[
        str | None,
        Col(
            "--model",
            help="Bundled model name (see 'bayes-rr models') or a spec file. Default: "
            "reference-logit when the data give a reference status, else crossed-logit.",
        ),
    ] = None,
    # Ranges are checked by SamplerSettings (one line naming the limit), not by typer.
    draws: Annotated[
        int | None,
        Col(
            "--draws",
            help=f"Draws per chain (10 to {MAX_DRAWS:,}). Without it: 1,000 first, and the "
            "model's own number only if the convergence gate asks for more.",
        ),
    ] = None,
    tune: Annotated[
        int | None, Col("--tune", help=f"Warm-up draws per chain (1 to {MAX_DRAWS:,}).")
    ] = None,
    chains: Annotated[
        int | None, Col("--chains", help=f"Number of chains (1 to {MAX_CHAINS}).")
    ] = None,
    seed: Annotated[
        int | None,
        Col("--seed", help="Random seed, 0 to 2**32 - 1 (same seed, same numbers)."),
    ] = None,
    target_accept: Annotated[
        float | None, Col("--target-accept", min=0.5, max=0.999, help="NUTS target acceptance.")
    ] = None,
    sampler: Annotated[
        str | None, Col("--sampler", help="'nutpie' (default, fast) or 'pymc'.")
    ] = None,
    prob: Prob = DEFAULT_PROB,
    interval: Annotated[
        str,
        typer.Option(
            help="'eti' (equal-tailed: the default, carries through square roots and other "
            "monotone maps) or 'hdi' (highest density) intervals."
        ),
    ] = "eti",
    quiet: Annotated[bool, typer.Option("--quiet", help="No progress bar.")] = False,
    overwrite: Annotated[
        bool,
        typer.Option(
            "--overwrite", help="Replace an earlier fit folder (never a folder of other files)."
        ),
    ] = False,
    production: Annotated[
        Path | None,
        Col(
            "--production",
            help="What you know of the line (TOML): bad_share, costs, strategies. Gives "
            "escapes per million and compares inspection strategies (models with wrong-call "
            "rates; see the README).",
        ),
    ] = None,
    production_mean: Annotated[
        float | None,
        Col("--production-mean", help="call-curve: mean of the reference value in production."),
    ] = None,
    production_sd: Annotated[
        float | None,
        Col("--production-sd", help="call-curve: its standard deviation in production."),
    ] = None,
    production_values: Annotated[
        Path | None,
        Col("--production-values", help="call-curve: a CSV of measured production values."),
    ] = None,
    criteria: Annotated[
        Path | None,
        Col("--criteria", help="Acceptance criteria (TOML): each one's posterior probability."),
    ] = None,
    prior_from: Annotated[
        Path | None,
        Col("--prior-from", help="An earlier fit folder whose posterior becomes the prior."),
    ] = None,
    prior_weight: Annotated[
        float,
        Col("--prior-weight", help="Weight of the earlier study, in (0, 1]; 1 = in full."),
    ] = 1.0,
    keep_all_draws: Annotated[
        bool,
        typer.Option(
            "--keep-all-draws",
            help="Store every draw (per-part estimands too) in double precision; the "
            "default stores what later commands read, about a seventh of the size.",
        ),
    ] = False,
    options: ReadOptions | None = None,
) -> None:
    """Fit a Bayesian model to a study and write the results to a folder.

    Exits with code 3 (results written but marked not to be used) when the
    sampler did not pass the convergence gate.
    """
    summary, classical = run_fit(
        data,
        options,
        model,
        out_dir,
        draws=draws,
        tune=tune,
        chains=chains,
        seed=seed,
        target_accept=target_accept,
        sampler=sampler,
        prob=prob,
        interval=interval,
        quiet=quiet,
        overwrite=overwrite,
        production=production_input(production, production_mean, production_sd, production_values),
        criteria=criteria,
        prior_from=prior_from,
        prior_weight=prior_weight,
        keep_all_draws=keep_all_draws,
    )
    print_fit(summary, classical)
    out.print(f"results written to {out_dir}")
    if not summary["diagnostics"]["ok"]:
        raise typer.Exit(3)


@handles_errors
def check(
    fit_dir: FitDir,
    draws: Annotated[
        int, typer.Option(min=20, help="Posterior draws to replicate the study from.")
    ] = 500,
    seed: Annotated[int, typer.Option(help="Seed of the replication.")] = 0,
    as_json: Annotated[bool, typer.Option("--json", help="Print JSON instead of tables.")] = False,
) -> None:
    """Check that the model reproduces the features of the data that matter
    (posterior predictive check), and what the priors alone imply (prior predictive
    check). Writes checks.json into the fit folder."""
    from bayes_rr.workflow.steps import check_fit

    document = check_fit(fit_dir, draws=draws, seed=seed)
    if as_json:
        sys.stdout.write(dumps(document) + "\n")
    else:
        print_checks(document)
        out.print(f"written to {fit_dir / 'checks.json'}")


@handles_errors
def compare(
    fit_dirs: Annotated[list[Path], typer.Argument(help="Two or more fit folders (same data).")],
    out_file: Annotated[
        Path | None,
        typer.Option("--out", help="Also write the comparison as JSON here (a .json file)."),
    ] = None,
    overwrite: Annotated[
        bool, typer.Option("--overwrite", help="Replace an existing --out file.")
    ] = False,
) -> None:
    """Compare models of the same data by PSIS-LOO (elpd differences, stacking weights)."""
    from bayes_rr.workflow.steps import compare_folders

    result = compare_folders(fit_dirs, out_file, overwrite=overwrite)
    table = Table(title=result["method"])
    # a model's name is never broken across lines (names run to about 30 characters)
    longest = max(len(row["model"]) for row in result["models"])
    table.add_column("model", min_width=min(longest, 30))
    for col, width in (("elpd_loo (SE)", 13), ("elpd diff (SE)", 12), ("p_loo", 5),
                       ("weight", 6), (f"{result.get('unit', 'cell')}s k > 0.7", 5)):  # fmt: skip
        table.add_column(col, width=width)
    for row in result["models"]:
        table.add_row(
            row["model"],
            f"{row['elpd_loo']:.1f} ({row['se']:.1f})",
            f"{row['elpd_diff']:.1f} ({row['diff_se']:.1f})",
            f"{row['p_loo']:.1f}",
            f"{row['stacking_weight']:.2f}",
            str(row["pareto_k_above_0.7"]),
        )
    out.print(table)
    out.print(result["verdict"] + ".")
    for row in result["models"]:
        out.print(f"{row['model']}: {row['pareto_k_note']}.")


@handles_errors
def report(
    fit_dir: FitDir,
    out_file: Annotated[
        Path | None,
        typer.Option("--out", help="Report file, ending in .html (default FIT_DIR/report.html)."),
    ] = None,
    title: Annotated[str | None, Col("--title", help="Title of the study.")] = None,
    site: Annotated[str | None, Col("--site", help="Site, line or lab of the study.")] = None,
    notes: Annotated[str | None, Col("--notes", help="Free text: who, when, why.")] = None,
    overwrite: Annotated[
        bool,
        typer.Option("--overwrite", help="Replace an existing .html file not written by bayes-rr."),
    ] = False,
    criteria: Annotated[
        Path | None,
        Col("--criteria", help="Acceptance criteria (TOML) to evaluate in the report."),
    ] = None,
    compare: Annotated[
        list[Path] | None,
        Col(
            "--compare",
            help="Another fit folder of the same data to compare with (PSIS-LOO); repeat for more.",
        ),
    ] = None,
    calibration: Annotated[
        Path | None,
        Col("--calibration", help="A 'bayes-rr calibrate' folder to include as evidence."),
    ] = None,
) -> None:
    """Write one self-contained HTML report of a fit (runs the checks if needed)."""
    from bayes_rr.workflow.steps import report_fit

    path = report_fit(
        fit_dir,
        out_file,
        title=title,
        site=site,
        notes=notes,
        overwrite=overwrite,
        criteria=criteria,
        compare=compare,
        calibration=calibration,
    )
    out.print(f"report written to {path}")
