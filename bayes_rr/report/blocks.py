"""The report's building blocks: its cautions and style, its inputs, escaping, numbers,
tables and embedded figures. Every string from the user or the data goes through
:func:`esc`."""

from __future__ import annotations

import base64
import html
import io
from dataclasses import dataclass, field

from bayes_rr.results.estimands import POPULATION_ONLY_KEYS
from bayes_rr.results.estimands import STUDY_KEYS as STUDY_LEVEL_KEYS

CAUTIONS = (
    "Statistics support but do not replace the organisation's quality procedures, customer "
    "and regulatory requirements, and qualified judgement.",
    "For safety-critical parts, defer to local codes and licensed practice.",
)

STUDY_KEYS = tuple(
    k for k in (*STUDY_LEVEL_KEYS, *POPULATION_ONLY_KEYS)
    if k not in ("call_rate", "repeatability_share")
)  # fmt: skip
"""The study-level rows of the results table, in the contract's order."""

STYLE = """
body { font-family: Georgia, 'Times New Roman', serif; max-width: 60rem; margin: 2rem auto;
       padding: 0 1rem; color: #111; line-height: 1.45; }
h1 { font-size: 1.6rem; } h2 { font-size: 1.25rem; border-bottom: 1px solid #999;
     margin-top: 2.2rem; }
table { border-collapse: collapse; margin: 0.6rem 0; font-size: 0.9rem; }
th, td { border: 1px solid #bbb; padding: 0.2rem 0.5rem; text-align: left;
         vertical-align: top; }
td.num { text-align: right; font-variant-numeric: tabular-nums; }
pre { background: #f4f4f4; padding: 0.6rem; font-size: 0.8rem; white-space: pre-wrap;
      overflow-wrap: anywhere; }
.answer { border: 2px solid #333; padding: 0.4rem 1rem; margin: 1rem 0; }
.answer h2 { border: none; margin-top: 0.4rem; }
dl.glossary dt { font-weight: bold; } dl.glossary dd { margin: 0 0 0.3rem 1.2rem; }
.banner { border: 3px solid #000; padding: 0.6rem; font-weight: bold; }
.flag { font-weight: bold; }
.note { font-size: 0.85rem; color: #333; }
img.figure { max-width: 100%; height: auto; display: block; margin: 0.6rem 0; }
img.figure.half { max-width: 48%; display: inline-block; vertical-align: top; }
@page { size: A4; margin: 14mm 12mm; }
@media print {
  body { margin: 0; max-width: none; font-size: 10pt; line-height: 1.3; }
  h2 { margin-top: 1.2rem; break-after: avoid; }
  h3 { break-after: avoid; }
  section.appendix-start { break-before: page; }
  table, img.figure, .answer { break-inside: avoid; }
  img.figure { max-height: 120mm; width: auto; }
  table { font-size: 8.5pt; }
  .screen-only { display: none; }
  .print-only { display: block; }
}
.print-only { display: none; }
"""


@dataclass(frozen=True)
class ReportInputs:
    """Everything the report shows, already computed."""

    summary: dict
    run: dict
    classical: dict
    checks: dict | None
    figures: dict = field(default_factory=dict)  # name -> matplotlib Figure (or None)
    title: str | None = None
    site: str | None = None
    notes: str | None = None
    folder: str = ""
    comparison: dict | None = None
    """A PSIS-LOO comparison of this fit with others of the same data (checks.compare_fits)."""
    calibration: dict | None = None
    """A calibration run's calibration.json (bayes_rr.simulation.calibrate), as evidence."""


def esc(value: object) -> str:
    """HTML-escape any value shown in the report (quotes included)."""
    return html.escape("" if value is None else str(value), quote=True)


def figure_tag(fig, alt: str, extra_class: str = "") -> str:
    """A matplotlib figure as an inline base64 SVG image (``extra_class``, e.g.
    ``screen-only``, added to its class)."""
    if fig is None:
        return ""
    buffer = io.BytesIO()
    fig.savefig(buffer, format="svg")
    data = base64.b64encode(buffer.getvalue()).decode("ascii")
    classes = f"figure {extra_class}".strip()
    return f'<img class="{classes}" alt="{esc(alt)}" src="data:image/svg+xml;base64,{data}">'


def number(value, digits: int = 4) -> str:
    return "-" if value is None else f"{value:.{digits}f}"


def html_table(header: list[str], rows: list[list[str]], numeric: set[int] | None = None) -> str:
    numeric = numeric or set()
    head = "".join(f"<th>{esc(h)}</th>" for h in header)
    body = []
    for row in rows:
        cells = "".join(
            f'<td class="num">{c}</td>' if i in numeric else f"<td>{c}</td>"
            for i, c in enumerate(row)
        )
        body.append(f"<tr>{cells}</tr>")
    return f"<table><thead><tr>{head}</tr></thead><tbody>{''.join(body)}</tbody></table>"


def study_rows(summary: dict) -> dict:
    return {(r["key"], r["scope"]): r for r in summary["estimands"] if r["level"] == "study"}


LIMITED_NOTES = ("set by the prior", "fixed by construction")


def interval_text(row: dict | None, digits: int = 4) -> str:
    if row is None or row.get("mean") is None:
        return "-"
    note = row.get("note") or ""
    if note.startswith(LIMITED_NOTES):
        # The design cannot inform this result: say so instead of printing a number.
        return f"<em>{esc(note.split(';')[0])}</em>"
    return f"{row['mean']:.{digits}f} ({row['lower']:.{digits}f} to {row['upper']:.{digits}f})"
