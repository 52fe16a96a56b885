"""The validation report: one self-contained HTML file.

This module assembles and formats; it computes no statistic. Every string that
comes from the user or the data (titles, notes, part and appraiser names, file
names) is HTML-escaped. Figures are embedded as base64 SVG images, so the file
needs no remote resource and no script, and prints to PDF from a browser.
"""

from __future__ import annotations

from bayes_rr.report.answer import answer_box, glossary_section, study_section
from bayes_rr.report.blocks import STYLE, ReportInputs, esc, figure_tag
from bayes_rr.report.line import line_section
from bayes_rr.report.sections import (
    calibration_section,
    cautions_section,
    checks_section,
    classical_section,
    comparison_section,
    convergence_section,
    model_section,
    prior_section,
    provenance_section,
    results_section,
    sensitivity_appendix,
)


def render_report(inputs: ReportInputs) -> str:
    """The whole report as one HTML document."""
    summary = inputs.summary
    ok = summary["diagnostics"]["ok"]
    title = inputs.title or f"Pass/fail inspection study: {summary['design']['source']}"
    banner = (
        ""
        if ok
        else "<p class='banner'>NOT CONVERGED: the sampler did not pass the convergence gate. "
        "These results must not be used; no result tables are shown.</p>"
    )
    has_reference = bool(summary["design"].get("has_reference"))
    sections = [("answer", "The answer in brief", answer_box(inputs))]
    sections += [
        ("", "Cautions", cautions_section(inputs)),
        ("", "The study", study_section(inputs)),
    ]
    if ok:
        sections += [
            *(
                [("", "On the line: production and inspection strategies", line_section(inputs))]
                if line_section(inputs)
                else []
            ),
            ("", "Results", results_section(inputs)),
            ("", "Classical statistics", classical_section(inputs.classical, has_reference)),
            ("", "Does the model fit the data?", checks_section(inputs)),
            ("", "How much the prior matters", prior_section(inputs)),
            *([("", "Models compared", comparison_section(inputs))] if inputs.comparison else []),
            *(
                [("", "Are the intervals calibrated?", calibration_section(inputs))]
                if inputs.calibration
                else []
            ),
        ]
    per_part = figure_tag(inputs.figures.get("per_part"), "per-part variances with intervals")
    sections += [
        ("appendix-start", "Appendix A. Convergence", convergence_section(inputs)),
        ("", "Appendix B. The model as fitted", model_section(inputs)),
        *([("", "Appendix C. Per-part results", per_part)] if ok and per_part else []),
        ("", "Appendix D. Glossary", glossary_section()),
        *(
            [("", "Appendix E. Prior sensitivity of every result", sensitivity_appendix(inputs))]
            if ok and sensitivity_appendix(inputs)
            else []
        ),
        ("", "Provenance", provenance_section(inputs)),
    ]
    body = "".join(
        f'<section class="{cls}"><h2>{esc(name)}</h2>{content}</section>'
        for cls, name, content in sections
    )
    return (
        "<!DOCTYPE html>\n<html lang='en'><head><meta charset='utf-8'>"
        f'<meta name="generator" content="bayes-rr {esc(inputs.run["versions"]["bayes_rr"])}">'
        f"<meta name='viewport' content='width=device-width, initial-scale=1'>"
        f"<title>{esc(title)}</title><style>{STYLE}</style></head><body>"
        f"{banner}<h1>{esc(title)}</h1>"
        f"<p class='note'>Report of bayes-rr {esc(inputs.run['versions']['bayes_rr'])}, "
        f"model {esc(summary['model']['name'])}.</p>"
        f"{body}</body></html>\n"
    )
