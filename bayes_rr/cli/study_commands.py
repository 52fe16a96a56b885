"""Commands about a study and its model before fitting: describe, prior, models, demo."""

from __future__ import annotations

import sys
from pathlib import Path
from typing import Annotated

import typer
from rich.table import Table

from bayes_rr.cli.fit_commands import run_fit
from bayes_rr.cli.shell import Col, DataArg, Prob, data_options, handles_errors, out
from bayes_rr.cli.terminal import print_checks, print_description, print_fit
from bayes_rr.core import DEFAULT_PROB
from bayes_rr.core.errors import DataError
from bayes_rr.core.jsonio import dumps, write_bytes_atomic
from bayes_rr.study.data import ReadOptions


@handles_errors
@data_options
def describe(
    data: DataArg,
    as_json: Annotated[bool, typer.Option("--json", help="Print JSON instead of tables.")] = False,
    prob: Prob = DEFAULT_PROB,
    options: ReadOptions | None = None,
) -> None:
    """Validate a study file and show its design and classical statistics."""
    from bayes_rr.study.describe import describe_file

    result = describe_file(data, options, prob)
    if as_json:
        sys.stdout.write(dumps(result) + "\n")
    else:
        print_description(result)


@handles_errors
def prior(
    statements: Annotated[
        Path,
        typer.Argument(
            help="A TOML file of statements: the model to start from and, per [[statement]], "
            "about (call_rate, false_reject_rate, false_accept_rate, appraiser_difference, "
            "repeat_disagreement), typical, at_most or at_least, and optionally sure and at.",
            show_default=False,
        ),
    ],
    out_file: Annotated[
        Path, typer.Option("--out", help="The model spec to write (a .toml file).")
    ],
    data: Annotated[
        Path | None,
        Col("--data", help="A study whose design the prior predictive check uses."),
    ] = None,
    overwrite: Annotated[
        bool, typer.Option("--overwrite", help="Replace an existing .toml file.")
    ] = False,
) -> None:
    """Turn statements about the inspection into priors and write a model spec.

    Each statement's prior matches its typical value (median) and its bound exactly;
    the table shows both, checked by sampling from the prior. With --data, the
    prior predictive check of the new spec on that study's design follows. Fit with
    'bayes-rr fit DATA --model OUT.toml'.
    """
    from bayes_rr.workflow.steps import write_prior

    spec, rows = write_prior(statements, out_file, overwrite=overwrite)
    table = Table(
        title=f"Priors from statements, model {spec.name}",
        caption="bound: the value the quantity stays under (at_most) or over (at_least) "
        "with the stated probability; the prior's figures come from 20,000 prior draws",
    )
    table.add_column("about", no_wrap=True)
    table.add_column("median: stated", no_wrap=True, justify="right")
    table.add_column("prior", no_wrap=True, justify="right")
    table.add_column("bound: stated", no_wrap=True, justify="right")
    table.add_column("prior", no_wrap=True, justify="right")
    for row in rows:
        table.add_row(
            row["about"].replace("_", " "),
            f"{row['typical']:.3g}",
            f"{row['implied_median']:.3g}",
            f"{row['bound']:.3g} ({row['sure']:g})",
            f"{row['implied_bound_quantile']:.3g}",
        )
    out.print(table)
    for row in rows:
        out.print(f"{row['about']} sets {row['sets']} = {row['prior']}")
    if data is not None:
        from bayes_rr.checks.predictive import prior_cells, prior_predictive
        from bayes_rr.study.data import read_study

        study = read_study(data, ReadOptions())
        prior_rows = prior_predictive(spec, study)
        check = Table(title=f"What the priors imply for the design of {data.name}")
        check.add_column("quantity", no_wrap=True)
        check.add_column("scope", no_wrap=True)
        check.add_column("median", no_wrap=True)
        check.add_column("95% range", no_wrap=True)
        for row in prior_rows:
            check.add_row(*prior_cells(row))
        out.print(check)
    out.print(f"model spec written to {out_file}; fit with: bayes-rr fit DATA --model {out_file}")


@handles_errors
def models() -> None:
    """List the bundled model specifications."""
    from bayes_rr.priors.spec import bundled_models, load_spec

    table = Table(title="Bundled models (use with --model NAME, or give a path to your own)")
    table.add_column("name", no_wrap=True)
    table.add_column("what it estimates")
    table.add_column("suits")
    for name in bundled_models():
        spec = load_spec(name)
        table.add_row(name, spec.description, spec.suits)
    out.print(table)
    for line in MODEL_CHOICE:
        out.print(line)


MODEL_CHOICE = (
    "Which model, in two questions:",
    "1. Is there a reference? For every part: reference-logit. For some parts: "
    "latent-class, which takes those and infers the rest (or latent-trait, below, which "
    "then places the limit on its scale and gives wrong-call rates too). None: "
    "latent-class for false reject and false accept rates, or crossed-logit "
    "(beta-binomial) for repeatability and reproducibility alone.",
    "2. Is the judged property measured on a scale (a diameter, a length) or truly "
    "two-valued (a part present or missing)? With a measured value per part and a limit: "
    "call-curve. Without one, a property on a scale puts each appraiser's threshold "
    "somewhere on it: a part between two thresholds is rejected by the stricter appraiser "
    "and accepted by the other, part after part, which latent-class does not expect "
    "('bayes-rr check' says so when it sees it; at 60 parts x 4 appraisers x 3 trials it "
    "saw it in about half of such studies) and latent-trait does: it places parts and "
    "appraisers' thresholds on the unmeasured property's scale. A truly two-valued "
    "property suits latent-class; 'bayes-rr compare' weighs the two on your data.",
    "Without --model, fit takes reference-logit for a full reference, latent-class for a "
    "partial one, call-curve for a measured value and a limit, and crossed-logit "
    "otherwise, and says which.",
)
"""How ``bayes-rr models`` explains the choice (the trade's two questions)."""


@handles_errors
def demo(
    out_dir: Annotated[
        Path, typer.Option("--out", help="Folder to write the demo data and results into.")
    ] = Path("bayes-rr-demo"),
    describe_only: Annotated[
        bool, typer.Option("--describe-only", help="Only describe the demo data; do not fit.")
    ] = False,
    quiet: Annotated[bool, typer.Option("--quiet", help="No progress bar.")] = False,
) -> None:
    """Run the whole job on the bundled, invented demo study: describe, fit, check, report.

    Never writes over a file it did not write: an existing demo_study.csv must hold
    the demo data, and an existing fit folder must be one bayes-rr wrote.
    """
    from bayes_rr.io.fit_folder import check_location, check_output_dir
    from bayes_rr.study.describe import demo_path, describe_file

    demo_bytes = demo_path().read_bytes()
    target = out_dir / "demo_study.csv"
    fit_dir = out_dir / "fit"
    if out_dir.exists() and not out_dir.is_dir():
        raise DataError(f"--out {out_dir}: exists and is a file, not a folder; choose a new name")
    if not out_dir.exists():
        check_location(out_dir)
    elif target.exists() and (not target.is_file() or target.read_bytes() != demo_bytes):
        raise DataError(
            f"--out {out_dir}: {target} exists and is not the demo data; the demo never "
            "writes over a file; choose another --out folder"
        )
    if not describe_only and out_dir.exists():
        check_output_dir(fit_dir, overwrite=True, protected=(target,))
    out_dir.mkdir(exist_ok=True)
    if not target.exists():
        write_bytes_atomic(target, demo_bytes)
        out.print(f"demo data (invented) written to {target}")
    print_description(describe_file(target))
    if describe_only:
        return
    from bayes_rr.workflow.steps import check_fit, report_fit

    out.print(f"fitting the default model into {fit_dir} ...")
    summary, classical = run_fit(target, ReadOptions(), None, fit_dir, overwrite=True, quiet=quiet)
    print_fit(summary, classical)
    out.print("checking the model ...")
    print_checks(check_fit(fit_dir))
    path = report_fit(
        fit_dir,
        title="Demo: final visual check of crimped terminals (invented data)",
        notes="Invented data shipped with bayes-rr to show the workflow; not a real study.",
    )
    out.print(f"report written to {path} (open it in a browser)", style="bold")
    if not summary["diagnostics"]["ok"]:
        raise typer.Exit(3)
