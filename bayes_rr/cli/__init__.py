"""``bayes-rr``: a thin command-line shell over the library.

Every command calls library functions that a notebook user can call too;
this module only parses options, prints and chooses exit codes:
0 success, 2 bad input (data, spec, options, output folder), 3 the sampler
did not pass the convergence gate, 130 interrupted (Ctrl-C or SIGTERM; nothing
is written). Every failure is one line on stderr; user strings are printed
literally (the consoles interpret no markup).
"""

from __future__ import annotations

import functools
import inspect
import os
import sys
from pathlib import Path
from typing import Annotated

import typer
from rich.console import Console
from rich.table import Table

from bayes_rr import __version__
from bayes_rr.core import DEFAULT_PROB, interrupts
from bayes_rr.core.errors import BayesRRError, DataError
from bayes_rr.core.jsonio import dumps, write_bytes_atomic
from bayes_rr.families import default_model
from bayes_rr.inference.sampling import MAX_CHAINS, MAX_DRAWS
from bayes_rr.study.data import ReadOptions

app = typer.Typer(
    name="bayes-rr",
    help=(
        "Bayesian repeatability and reproducibility of pass/fail inspections. "
        "Start with 'bayes-rr demo', then 'bayes-rr describe YOUR_STUDY.csv'."
    ),
    no_args_is_help=True,
    add_completion=False,
    pretty_exceptions_enable=False,
)


# No markup: a name such as "[/]" in a study must print as it is, not as a style tag.
class _Console(Console):
    """A console whose tables never cut a value: at any width, and when piped (80
    columns), a cell too wide for its column wraps at spaces, then folds, instead of
    ending in an ellipsis."""

    def print(self, *objects, **kwargs) -> None:
        for item in objects:
            if isinstance(item, Table):
                for column in item.columns:
                    column.no_wrap = False
                    column.overflow = "fold"
        super().print(*objects, **kwargs)


out = _Console(markup=False, highlight=False)
err = Console(stderr=True, markup=False, highlight=False)
DEBUG_ENV = "BAYES_RR_DEBUG"
INTERRUPTED = "interrupted; nothing was written"


def _one_line(prefix: str, message: object, code: int) -> typer.Exit:
    text = " ".join(str(message).split())
    err.print(f"{prefix}: {text}", style="bold red" if code != 130 else None, soft_wrap=True)
    return typer.Exit(code)


def _phase_line(text: str) -> None:
    err.print(text, style="dim", soft_wrap=True)


def handles_errors(func):
    """Run a command under the interrupt guard; every failure becomes one line on stderr.

    Typed errors keep their exit code; Ctrl-C or SIGTERM exits 130 with nothing
    written; anything unexpected is reported in one line as an internal error (set
    BAYES_RR_DEBUG=1 for the traceback).
    """

    @functools.wraps(func)
    def wrapper(*args, **kwargs):
        quiet = bool(kwargs.get("quiet")) or kwargs.get("as_json") is True
        try:
            with interrupts.guard(_phase_line if _in_terminal(quiet) else None):
                result = func(*args, **kwargs)
                interrupts.raise_if_interrupted()
                return result
        except typer.Exit:
            raise
        except BayesRRError as exc:
            raise _one_line("error", exc, exc.exit_code) from None
        except interrupts.LateInterrupt as exc:
            err.print(f"interrupted after the results were complete; they are in {exc.args[0]}",
                      soft_wrap=True)  # fmt: skip
            raise typer.Exit(interrupts.INTERRUPT_EXIT_CODE) from None
        except KeyboardInterrupt:
            err.print(INTERRUPTED, soft_wrap=True)
            raise typer.Exit(interrupts.INTERRUPT_EXIT_CODE) from None
        except Exception as exc:
            if os.environ.get(DEBUG_ENV):
                raise
            raise _one_line(
                "internal error",
                f"{type(exc).__name__}: {exc} (a bug in bayes-rr; set {DEBUG_ENV}=1 for the "
                "traceback and report it)",
                1,
            ) from None

    return wrapper


# ---------------------------------------------------------------------------
# shared options

Prob = Annotated[
    float,
    typer.Option(
        "--prob",
        min=0.5,
        max=0.999,
        help="Probability of every interval (e.g. 0.95 for 95% intervals).",
    ),
]
DataArg = Annotated[
    Path, typer.Argument(help="Study file: CSV (any common delimiter, UTF-8) or XLSX.")
]
Layout = Annotated[
    str,
    typer.Option(
        help="Table layout: 'tidy' (one row per call), 'wide' (one row per part, "
        "one column per appraiser and trial, e.g. A_1) or 'auto'."
    ),
]
Col = functools.partial(typer.Option, show_default=False)


def read_options(
    layout: str,
    part_col: str | None,
    appraiser_col: str | None,
    trial_col: str | None,
    call_col: str | None,
    reference_col: str | None,
    reference_value_col: str | None,
    reject_label: str | None,
    accept_label: list[str] | None,
    drop_missing: bool,
    sheet: str | None,
    wide_column: list[str] | None = None,
    lower_limit: float | None = None,
    upper_limit: float | None = None,
) -> ReadOptions:
    columns = {
        role: name
        for role, name in (
            ("part", part_col),
            ("appraiser", appraiser_col),
            ("trial", trial_col),
            ("call", call_col),
            ("reference", reference_col),
            ("reference_value", reference_value_col),
        )
        if name
    }
    if layout not in ("auto", "tidy", "wide"):
        raise DataError(f"--layout {layout!r} is not one of 'auto', 'tidy', 'wide'")
    wide = None
    if wide_column:
        wide = {}
        for item in wide_column:
            column, sep, target = item.rpartition("=")
            appraiser, colon, trial = target.rpartition(":")
            if not sep or not colon or not column or not appraiser or not trial:
                raise DataError(
                    f"--wide-column {item!r}: expected COLUMN=APPRAISER:TRIAL, e.g. 'Op1 r2=Ann:2'"
                )
            wide[column] = (appraiser, trial)
    return ReadOptions(
        layout=layout,  # type: ignore[arg-type]
        columns=columns,
        reject_label=reject_label,
        accept_labels=tuple(accept_label or ()),
        drop_missing=drop_missing,
        sheet=sheet,
        wide_columns=wide,
        lower_limit=lower_limit,
        upper_limit=upper_limit,
    )


def data_options(func):
    """Give a command the options that say how to read a study file.

    The options are added to the command's signature (so typer shows them under
    ``--help``); the command itself receives one ``options: ReadOptions`` argument.
    """
    params = {
        "layout": (Layout, "auto"),
        "part_col": (
            Annotated[str | None, Col("--part-col", help="Column holding the part.")],
            None,
        ),
        "appraiser_col": (
            Annotated[str | None, Col("--appraiser-col", help="Column holding the appraiser.")],
            None,
        ),
        "trial_col": (
            Annotated[str | None, Col("--trial-col", help="Column holding the trial.")],
            None,
        ),
        "call_col": (
            Annotated[str | None, Col("--call-col", help="Column holding the call.")],
            None,
        ),
        "reference_col": (
            Annotated[
                str | None, Col("--reference-col", help="Column holding the reference status.")
            ],
            None,
        ),
        "reference_value_col": (
            Annotated[
                str | None,
                Col("--reference-value-col", help="Column holding a continuous reference value."),
            ],
            None,
        ),
        "reject_label": (
            Annotated[
                str | None,
                Col(
                    "--reject-label",
                    help="The label that means reject, when labels are not one of 0/1, "
                    "accept/reject, pass/fail, go/no-go, good/bad, ok/ng, "
                    "conforming/nonconforming.",
                ),
            ],
            None,
        ),
        "accept_label": (
            Annotated[
                list[str] | None,
                Col("--accept-label", help="With --reject-label: a label meaning accept (repeat)."),
            ],
            None,
        ),
        "drop_missing": (
            Annotated[
                bool, typer.Option("--drop-missing", help="Drop empty calls instead of refusing.")
            ],
            False,
        ),
        "sheet": (Annotated[str | None, Col("--sheet", help="Sheet of an XLSX workbook.")], None),
        "lower_limit": (
            Annotated[
                float | None,
                Col("--lower-limit", help="Lower specification limit of the reference value."),
            ],
            None,
        ),
        "upper_limit": (
            Annotated[
                float | None,
                Col("--upper-limit", help="Upper specification limit of the reference value."),
            ],
            None,
        ),
        "wide_column": (
            Annotated[
                list[str] | None,
                Col(
                    "--wide-column",
                    help="Wide layout with other column names: COLUMN=APPRAISER:TRIAL (repeat for "
                    "every call column).",
                ),
            ],
            None,
        ),
    }
    signature = inspect.signature(func, eval_str=True)
    kept = [p for name, p in signature.parameters.items() if name != "options"]
    added = [
        inspect.Parameter(name, inspect.Parameter.KEYWORD_ONLY, default=default, annotation=hint)
        for name, (hint, default) in params.items()
    ]

    @functools.wraps(func)
    def wrapper(*args, **kwargs):
        values = {name: kwargs.pop(name, default) for name, (_, default) in params.items()}
        return func(*args, options=read_options(**values), **kwargs)

    wrapper.__signature__ = signature.replace(parameters=kept + added)
    return wrapper


def _num(value, digits: int = 3) -> str:
    if value is None:
        return "-"
    return f"{value:.{digits}f}"


# ---------------------------------------------------------------------------
# commands


def _version(value: bool) -> None:
    if value:
        out.print(f"bayes-rr {__version__}")
        raise typer.Exit(0)


@app.callback()
def main_callback(
    version: Annotated[
        bool,
        typer.Option("--version", callback=_version, is_eager=True, help="Print the version."),
    ] = False,
) -> None:
    """Bayesian repeatability and reproducibility of pass/fail inspections."""


def print_description(result: dict) -> None:
    """Terminal tables of the design and the classical statistics."""
    from bayes_rr.study.describe import reference_rows

    design = result["design"]
    prob = result["prob"]
    table = Table(title=f"Study design: {design['source']}", show_header=False)
    for label, key in (
        ("parts", "parts"),
        ("appraisers", "appraisers"),
        ("calls", "calls"),
        ("reject calls", "reject_calls"),
        ("trials per cell (min-max)", None),
        ("empty part x appraiser cells", "empty_cells"),
        ("reference status given", "has_reference"),
        ("data SHA-256", "data_sha256"),
    ):
        value = (
            f"{design['trials_per_cell_min']}-{design['trials_per_cell_max']}"
            if key is None
            else design[key]
        )
        table.add_row(label, str(value))
        if key == "has_reference":
            for row_label, text in reference_rows(design):
                table.add_row(row_label, text)
    out.print(table)
    for note in design["notes"]:
        out.print(f"note: {note}")

    plug = result["classical"]["plug_in"]["study"]
    corr = result["classical"]["corrected"]["study"]
    table = Table(title="Moment estimates, averaged over the study's parts")
    table.add_column("quantity")
    table.add_column("plug-in", justify="right")
    table.add_column("corrected n/(n-1)", justify="right")
    from bayes_rr.core import glossary

    for key in (
        "rr_variance",
        "repeatability_variance",
        "reproducibility_variance",
        "reproducibility_share",
        "repeat_disagreement",
    ):
        table.add_row(glossary.name(key), _num(plug[key], 4), _num(corr[key], 4))
    out.print(table)
    for flag in result["classical"]["corrected"]["flags"]:
        out.print(f"flag: {flag}")

    _print_classical_by_appraiser(result, prob)
    for item in result["not_computed"]:
        out.print(f"not computed: {item['statistic']}: {item['reason']}")


def _share_text(row: dict | None) -> str:
    if row is None:
        return "-"
    wilson = next((i for i in row["intervals"] if i["method"].startswith("Wilson")),
                  row["intervals"][0])  # fmt: skip
    share = row.get("share", row.get("rate"))
    return f"{share:.0%}\n{wilson['lower']:.0%}-{wilson['upper']:.0%}"


def _kappa_text(row: dict | None) -> str:
    if row is None:
        return "-"
    lower, upper = row.get("lower"), row.get("upper")
    interval = "" if lower is None or upper is None else f"\n{lower:.2f} to {upper:.2f}"
    return f"{row['kappa']:.2f}{interval}"


def _print_classical_by_appraiser(result: dict, prob: float) -> None:
    """The classical agreement figures, one row per appraiser (the report's layout)."""
    from bayes_rr.study.classical import by_appraiser

    rows = by_appraiser(result)
    table = Table(
        title="Each appraiser's own consistency",
        caption=f"shares with {prob:.0%} Wilson intervals; kappa with a {prob:.0%} bootstrap "
        "interval over parts (null SEs and z: --json)",
    )
    for name in ("appraiser", "parts called alike on every own trial", "kappa of own trials"):
        table.add_column(name, justify="left" if name == "appraiser" else "right")
    for item in rows:
        table.add_row(item["appraiser"] or "all together", _share_text(item["own"]),
                      _kappa_text(item["own_kappa"]))  # fmt: skip
    out.print(table)
    if any(item["reference"] for item in rows):
        table = Table(
            title="Each appraiser against the reference",
            caption="error rates count calls, treating them as independent",
        )
        for name in ("appraiser", "parts matching on every trial", "kappa",
                     "false reject rate", "false accept rate"):  # fmt: skip
            table.add_column(name, justify="left" if name == "appraiser" else "right")
        for item in rows:
            table.add_row(item["appraiser"] or "all together", _share_text(item["reference"]),
                          _kappa_text(item["reference_kappa"]),
                          _share_text(item["false_reject_rate"]),
                          _share_text(item["false_accept_rate"]))  # fmt: skip
        out.print(table)
    kappas = {(r["appraiser"], r["other"]): r for r in result["kappa"]
              if r["kind"] == "appraiser_pair"}  # fmt: skip
    if result["appraiser_differences"] or kappas:
        table = Table(
            title="Pairs of appraisers",
            caption="Cohen's kappa pairs every call of one with every call of the other on "
            "a part; the difference of call rates with Newcombe's interval",
        )
        for name in ("pair", "Cohen's kappa", "difference of call rates"):
            table.add_column(name, justify="left" if name == "pair" else "right")
        for row in result["appraiser_differences"]:
            newcombe = row["intervals"][0]
            table.add_row(
                f"{row['appraiser']} and {row['other']}",
                _kappa_text(kappas.get((row["appraiser"], row["other"]))),
                f"{row['difference']:+.3f}\n{newcombe['lower']:+.3f} to {newcombe['upper']:+.3f}",
            )
        out.print(table)


@app.command()
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


@app.command()
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
        from bayes_rr.checks.predictive import prior_predictive
        from bayes_rr.study.data import read_study

        study = read_study(data, ReadOptions())
        prior_rows = prior_predictive(spec, study)
        check = Table(title=f"What the priors imply for the design of {data.name}")
        check.add_column("quantity", no_wrap=True)
        check.add_column("scope", no_wrap=True)
        check.add_column("median", no_wrap=True)
        check.add_column("95% range", no_wrap=True)
        for row in prior_rows:
            check.add_row(row["key"].replace("_", " "), row["scope"], f"{row['median']:.3f}",
                          f"{row['q025']:.3f} to {row['q975']:.3f}")  # fmt: skip
        out.print(check)
    out.print(f"model spec written to {out_file}; fit with: bayes-rr fit DATA --model {out_file}")


@app.command()
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
    out.print(
        "Without --model, fit uses reference-logit when the data give each part's "
        "reference status, and crossed-logit otherwise."
    )


def _in_terminal(quiet: bool) -> bool:
    import os

    return not quiet and sys.stderr.isatty() and not os.environ.get("CI")


def print_fit(summary: dict, classical: dict | None) -> None:
    """Study-level table, plain readings and the classical estimates beside the posterior.

    A fit that failed the convergence gate prints why and what to do, and no result
    numbers; results the design cannot inform are marked instead of printed.
    """
    diag = summary["diagnostics"]
    if not diag["ok"]:
        out.print("NOT CONVERGED: no results are shown, and those written must not be used.",
                  style="bold red")  # fmt: skip
        for reason in diag["reasons"]:
            out.print(f"  reason: {reason}")
        for advice in diag["advice"]:
            out.print(f"  advice: {advice}")
        return
    for warning in diag["warnings"]:
        out.print(f"warning: {warning}")
    prob = summary["prob"]
    kind = "HDI" if summary["interval"] == "hdi" else "equal-tailed"
    if summary.get("wrong_calls"):
        print_rates(summary)
    if any(r["key"].startswith("effective_limit[") for r in summary["estimands"]):
        print_curves(summary)
    if not any(r["level"] == "study" and r["key"] == "rr_variance" for r in summary["estimands"]):
        _print_footer(summary, diag)
        return
    table = Table(
        title=f"Study level, model {summary['model']['name']}",
        caption=f"posterior mean, then its {prob:.0%} {kind} interval; classical: the "
        "corrected moment estimate, the plug-in one in brackets",
    )
    table.add_column("quantity")
    table.add_column("the study's appraisers", justify="right")
    table.add_column("a new appraiser", justify="right")
    from bayes_rr.core import glossary

    table.add_column("classical", justify="right")
    rows = {(r["key"], r["scope"]): r for r in summary["estimands"] if r["level"] == "study"}
    plug = (classical or {}).get("classical", {}).get("plug_in", {}).get("study", {})
    corr = (classical or {}).get("classical", {}).get("corrected", {}).get("study", {})

    def cell(key: str, scope: str) -> str:
        row = rows.get((key, scope))
        if row is None or row["mean"] is None:
            return "-"
        note = row.get("note") or ""
        # Short words that fit a narrow column; the notes below the table say why.
        if note.startswith("set by the prior"):
            return "prior only"
        if note.startswith("fixed by construction"):
            return "by design"
        # mean above its interval: the columns stay narrow enough for 80 columns
        return f"{row['mean']:.4f}\n{row['lower']:.4f}-{row['upper']:.4f}"

    for key in (
        "rr_variance",
        "repeatability_variance",
        "reproducibility_variance",
        "reproducibility_share",
        "repeat_disagreement",
        "cross_disagreement",
        "appraiser_bias_variance",
        "interaction_variance",
    ):
        if (key, "study") not in rows and (key, "population") not in rows:
            continue
        table.add_row(
            glossary.name(key),
            cell(key, "study"),
            cell(key, "population"),
            f"{_num(corr.get(key), 4)}\n({_num(plug.get(key), 4)})" if key in corr else "-",
        )
    out.print(table)
    for sentence in summary["readings"]:
        out.print(sentence)
    _print_footer(summary, diag)


def print_criteria(summary: dict) -> None:
    for row in summary.get("criteria", []):
        out.print(f"criterion: {row['sentence']}", style=None if row["met"] else "bold")


def _print_footer(summary: dict, diag: dict) -> None:
    print_criteria(summary)
    for sentence in (summary.get("comparisons") or {}).get("sentences", []):
        out.print(f"appraisers: {sentence}")
    for limitation in summary.get("limitations", []):
        out.print(f"note: {limitation['sentence']}")
    from bayes_rr.priors.sensitivity import HEADLINE_KEYS, sentences

    earlier = summary.get("prior_from")
    block = summary.get("prior_sensitivity") or {}
    for sentence in sentences(block, bool(earlier), HEADLINE_KEYS):
        out.print(f"prior: {sentence}")
    if earlier:
        out.print(f"earlier study: {earlier_sentence(earlier)}")
    out.print(
        f"r_hat max {diag['max_r_hat']:.3f}, ESS min bulk {diag['min_ess_bulk']:.0f} / "
        f"tail {diag['min_ess_tail']:.0f}, divergences {diag['divergences']}, "
        f"E-BFMI min {diag['min_bfmi']:.2f}"
    )


def earlier_sentence(block: dict) -> str:
    """The earlier study carried in, and how closely its approximation follows it."""
    rows = block["parameters"]
    carried = [r for r in rows if r["carried"]]
    text = (
        f"the fit {block['fit']} carried in as prior with weight {block['weight']:g}; "
        f"{len(carried)} of {len(rows)} hyper-parameters carried"
    )
    if rows:
        worst = max(rows, key=lambda r: r["quantile_gap"])
        text += (
            f"; the approximation's largest quantile gap is {worst['quantile_gap']:.3f} "
            f"({worst['label']})"
        )
    return text + "."


def _percent_interval(row: dict | None) -> str:
    if row is None or row["mean"] is None:
        return "-"
    return f"{row['mean']:.1%} ({row['lower']:.1%}-{row['upper']:.1%})"


def _value(row: dict | None) -> str:
    if row is None or row["mean"] is None:
        return "-"
    return f"{row['mean']:.4g} ({row['lower']:.4g} to {row['upper']:.4g})"


def print_curves(summary: dict) -> None:
    """Each appraiser's effective limit(s) and transition width (call-curve model)."""
    rows = {(r["key"], r["scope"], r["level"], r["appraiser"]): r for r in summary["estimands"]}
    keys = sorted({r["key"] for r in summary["estimands"] if r["key"].startswith("effective")})
    table = Table(title="Where each appraiser puts the limit (units of the reference value)")
    table.add_column("appraiser")
    for key in keys:
        table.add_column(key.replace("_", " ").replace("[side=", " (").replace("]", ")"))
    table.add_column("transition width")
    for name in summary["design"]["appraiser_names"]:
        table.add_row(
            name,
            *(_value(rows.get((key, "study", "appraiser", name))) for key in keys),
            _value(rows.get(("transition_width", "study", "appraiser", name))),
        )
    out.print(table)
    for key in keys:
        spread = rows.get((key.replace("effective_limit", "limit_spread"), "study", "system", None))
        if spread is not None:
            out.print(f"spread of the effective limits over these appraisers: {_value(spread)}")


def print_rates(summary: dict) -> None:
    """The wrong-call rates first: in words, then per appraiser and for the system."""
    wrong = summary["wrong_calls"]
    if wrong.get("weak_identification"):
        out.print(f"warning: {wrong['weak_identification']}", style="bold")
    for sentence in wrong["readings"]:
        out.print(sentence)
    rows = {
        (r["key"], r["scope"], r["level"], r["appraiser"]): r
        for r in summary["estimands"]
        if r["level"] in ("appraiser", "system")
    }
    prob = summary["prob"]
    columns = [
        (key, label)
        for key, label in (("false_reject_rate", "false reject rate"),
                           ("false_accept_rate", "false accept rate"),
                           ("reference_agreement", "agreement with status"))
        if any(k[0] == key for k in rows)
    ]  # fmt: skip
    kind = "highest density" if summary["interval"] == "hdi" else "equal-tailed"
    table = Table(title=f"Wrong calls, study's parts ({prob:.0%} {kind} intervals)")
    table.add_column("appraiser")
    for _, label in columns:
        table.add_column(label, justify="right")
    lines = [(name or "all appraisers", "study", "appraiser" if name else "system", name)
             for name in [*summary["design"]["appraiser_names"], None]]  # fmt: skip
    lines.append(("a new appraiser", "population", "system", None))
    for label, scope, level, name in lines:
        cells = [_percent_interval(rows.get((key, scope, level, name))) for key, _ in columns]
        if any(cell != "-" for cell in cells):  # a model may give no population rates
            table.add_row(label, *cells)
    out.print(table)


def production_distribution(mean: float | None, sd: float | None, values: Path | None):
    """The production distribution of the reference value given by the options, or None."""
    from bayes_rr.families.curves import Production

    if values is not None:
        if mean is not None or sd is not None:
            raise DataError("give --production-values or --production-mean/-sd, not both")
        from bayes_rr.study.data import read_values

        return Production(values=read_values(values))
    if mean is None and sd is None:
        return None
    if mean is None or sd is None or not sd > 0:
        raise DataError(
            f"--production-mean {mean} --production-sd {sd}: give both, with a positive sd"
        )
    return Production(mean, sd)


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
    from bayes_rr.inference.sampling import SamplerSettings
    from bayes_rr.io.fit_folder import check_output_dir, summary_document, write_fit
    from bayes_rr.priors.spec import load_spec
    from bayes_rr.study.classical import classical_statistics
    from bayes_rr.study.data import read_study
    from bayes_rr.workflow.fit import fit_study

    if interval not in ("hdi", "eti"):
        raise DataError(f"--interval {interval!r}: expected 'hdi' or 'eti'")
    protected = (data,) if prior_from is None else (data, prior_from)
    check_output_dir(out_dir, overwrite, protected=protected)
    from bayes_rr.results.decisions import check_keys, criteria_from_rows, load_criteria

    wanted = load_criteria(criteria) if criteria is not None else ()
    check_keys(wanted)
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
    classical = classical_statistics(study, prob).as_dict()
    result = fit_study(
        study, spec, settings, prob=prob, interval=interval, production=production,
        criteria=wanted, prior_from=earlier, two_stage=draws is None,
    )  # fmt: skip
    interrupts.checkpoint("writing", str(out_dir))
    write_fit(result, out_dir, overwrite=overwrite, classical=classical, protected=protected,
              keep_all_draws=keep_all_draws)  # fmt: skip
    return summary_document(result), classical


@app.command()
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
        production=production_distribution(production_mean, production_sd, production_values),
        criteria=criteria,
        prior_from=prior_from,
        prior_weight=prior_weight,
        keep_all_draws=keep_all_draws,
    )
    print_fit(summary, classical)
    out.print(f"results written to {out_dir}")
    if not summary["diagnostics"]["ok"]:
        raise typer.Exit(3)


def _short_number(x: float) -> str:
    """Counts as integers, other values to three significant digits."""
    return str(int(x)) if float(x).is_integer() else f"{x:.3g}"


def print_checks(document: dict) -> None:
    ppc = document["posterior_predictive"]
    table = Table(
        title=f"Posterior predictive check ({ppc['draws']} replicated studies)",
        caption=f"* flagged: {ppc['flag_when']}",
    )
    # the statistic's name (an appraiser's in brackets) must stay readable at 80 columns
    table.add_column("statistic", no_wrap=True, min_width=24)
    table.add_column("observed", no_wrap=True)
    table.add_column("replicated mean (95%)", no_wrap=True)
    table.add_column("p", no_wrap=True)
    for stat in ppc["statistics"]:
        table.add_row(
            stat["name"],
            _short_number(stat["observed"]),
            f"{_short_number(stat['replicated_mean'])} ({_short_number(stat['replicated_lower'])}"
            f"-{_short_number(stat['replicated_upper'])})",
            f"{stat['p_value']:.3f}" + (" *" if stat["flagged"] else ""),
        )
    out.print(table)
    prior = document.get("prior_predictive") or []
    if prior:
        before = Table(
            title="Prior predictive check: what the priors alone imply for this design",
            caption="prior draws before the calls are seen; a prior range much wider than "
            "the posterior interval means the data, not the priors, decide",
        )
        for name in ("quantity", "scope", "prior median", "prior 95% range"):
            before.add_column(name, justify="left" if name in ("quantity", "scope") else "right")
        for row in prior:
            before.add_row(row["key"].replace("_", " "), row["scope"], f"{row['median']:.3f}",
                           f"{row['q025']:.3f} to {row['q975']:.3f}")  # fmt: skip
        out.print(before)
    flagged = ppc["flagged"]
    out.print(ppc["verdict"][0].upper() + ppc["verdict"][1:] + ".")
    if flagged:
        out.print(f"flagged: {', '.join(flagged)}")
    if not document["converged"]:
        out.print("The fit did not pass the convergence gate: these checks are of a posterior "
                  "that must not be used.", style="bold red")  # fmt: skip


FitDir = Annotated[Path, typer.Argument(help="A folder written by 'bayes-rr fit'.")]


@app.command()
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


@app.command()
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
    for col in ("model", "elpd_loo (SE)", "elpd diff (SE)", "p_loo", "weight", "Pareto k > 0.7"):
        table.add_column(col)
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


@app.command()
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


@app.command()
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


def main() -> None:
    try:
        app()
    except KeyboardInterrupt:
        # A signal between commands (while typer parses, before the guard is in place).
        err.print(INTERRUPTED)
        sys.exit(interrupts.INTERRUPT_EXIT_CODE)


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


def _print_failures(failures: list[dict]) -> None:
    for failure in failures[:10]:
        given = ", ".join(f"{k} {v}" for k, v in failure["input"].items())
        err.print(f"failed: {failure['task']} ({given}): {failure['error']}", soft_wrap=True)
    if len(failures) > 10:
        err.print(f"... and {len(failures) - 10} more (see the run folder's tasks/*.failed.json)")


@app.command()
@handles_errors
def plan(
    out_dir: RunOut,
    model: Annotated[
        str, Col("--model", help="Bundled model name or a spec file (default crossed-logit).")
    ] = ("crossed-logit"),
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
            help="reference-logit: share of parts whose status is reject (default 0.5); other "
            "models: share of borderline parts, rejected 10-90% of the time (default: as the "
            "prior gives them).",
        ),
    ] = None,
    sims: Annotated[int, Col("--sims", help="Simulated studies per design (default 50).")] = 50,
    seed: Seed = 1,
    prior_from: Annotated[
        Path | None,
        Col("--prior-from", help="An earlier fit folder: simulate from its posterior."),
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
    from bayes_rr.priors.spec import load_spec
    from bayes_rr.results.decisions import check_keys, load_criteria
    from bayes_rr.simulation.designs import (
        MAX_APPRAISERS,
        MAX_PARTS,
        MAX_TRIALS,
        design_grid,
        parse_counts,
    )
    from bayes_rr.simulation.plan import PlanRequest, run_plan

    spec = load_spec(model)
    wanted = load_criteria(criteria) if criteria is not None else ()
    check_keys(wanted)
    grid = design_grid(
        parse_counts(parts, "--parts", 2, MAX_PARTS),
        parse_counts(appraisers, "--appraisers", 1, MAX_APPRAISERS),
        parse_counts(trials, "--trials", 1, MAX_TRIALS),
        part_mix,
    )
    request = PlanRequest(
        spec,
        tuple(grid),
        sims,
        seed,
        wanted,
        target_width,
        target_assurance,
        target_key,
        earlier_folder=None if prior_from is None else str(prior_from),
        draws=draws,
    )
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
    for key in keys:
        scope, _, short = key.split("__")
        widths = [row["expected_width"].get(key) for row in designs]
        table.add_row(f"{short.replace('_', ' ')} ({scope})",
                      *["-" if w is None else f"{w:.3g}" for w in widths])  # fmt: skip
    if wanted:
        table.add_row("assurance", *["-" if r["assurance"] is None else f"{r['assurance']:.0%}"
                                     for r in designs])  # fmt: skip
    table.add_row("fits ok", *[f"{r['fits_converged']}/{r['sims']}" for r in designs])
    reached = [r["borderline_share_reached"] for r in designs]
    if part_mix is not None and any(share is not None for share in reached):
        table.add_row("borderline share reached",
                      *["-" if s is None else f"{s:.0%}" for s in reached])  # fmt: skip
    out.print(table)
    out.print(document["recommendation"])
    _print_failures(document["failures"])
    out.print(f"plan written to {out_dir / 'plan.json'} (figure: plan_widths.png)")


@app.command()
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
        Col("--part-mix", help="Share of reference-reject parts (reference-logit only)."),
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
    for col in ("quantity", "rank uniformity p", "50% coverage", "90% coverage", "in band"):
        table.add_column(col, justify="left" if col == "quantity" else "right")
    for row in document["parameters"]:
        table.add_row(
            row["name"],
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


@app.command()
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
