"""The shell every command shares: the typer app, the consoles, one-line errors and
exit codes, and the options several commands take."""

from __future__ import annotations

import functools
import inspect
import math
import os
import sys
from pathlib import Path
from typing import Annotated

import typer
from rich.console import Console
from rich.table import Table

from bayes_rr import __version__
from bayes_rr.core import interrupts
from bayes_rr.core.errors import BayesRRError, DataError
from bayes_rr.study.data import ReadOptions

app = typer.Typer(
    name="bayes-rr",
    help=(
        "Bayesian repeatability and reproducibility of pass/fail inspections. "
        "Start with 'bayes-rr demo', then 'bayes-rr describe YOUR_STUDY.csv'."
    ),
    no_args_is_help=True,
    # help texts are plain text: "[[statement]]" is a TOML table, not a style tag
    rich_markup_mode=None,
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
            _check_finite(kwargs)
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


def _check_finite(options: dict) -> None:
    """Every number given on the command line is finite: typer reads "nan" and "inf"
    as floats, and a limit of nan would reach the sampler."""
    for name, value in options.items():
        values = value if isinstance(value, list | tuple) else [value]
        for item in values:
            if isinstance(item, float) and not math.isfinite(item):
                raise DataError(f"--{name.replace('_', '-')} {item!r}: expected a finite number")


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
                    # spaces around the slashes: help columns break between words only
                    help="The label that means reject, when labels are not one of 0 / 1, "
                    "accept / reject, pass / fail, go / no-go, good / bad, ok / ng, OK / NOK, "
                    "i.O. / n.i.O., conforming / nonconforming.",
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
                    help="Wide layout with other column names: COLUMN=A:T for the calls of "
                    "appraiser A in trial T (repeat for every call column).",
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


def _in_terminal(quiet: bool) -> bool:
    import os

    return not quiet and sys.stderr.isatty() and not os.environ.get("CI")


def main() -> None:
    try:
        app()
    except KeyboardInterrupt:
        # A signal between commands (while typer parses, before the guard is in place).
        err.print(INTERRUPTED)
        sys.exit(interrupts.INTERRUPT_EXIT_CODE)
