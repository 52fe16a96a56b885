"""The report's production part: the line's figures first in the answer box, and a
section with each appraiser on production parts, the strategies compared, their figure
and the decision (docs/statistics.md, "Production scope")."""

from __future__ import annotations

from bayes_rr.core import glossary
from bayes_rr.core.numbers import decimals_for, interval_text
from bayes_rr.report.blocks import ReportInputs, esc, figure_tag, html_table

LINE_CAUTION = (
    "Production figures assume that the line's parts of each status resemble the study's "
    "and that the appraisers call on the line as they did in the study; for "
    "characteristics that matter to safety, defer to the customer's requirements, local "
    "codes and licensed practice."
)
LEAD_KEYS = ("escaped_per_million", "rejected_good_per_million", "shipped_bad_share")


def _rows(summary: dict) -> dict:
    return {(r["key"], r["level"], r["appraiser"]): r for r in summary["estimands"]
            if r["scope"] == "production"}  # fmt: skip


def _text(figure: dict | None) -> str:
    if figure is None or figure.get("mean") is None:
        return "-"
    return esc(interval_text(figure["mean"], figure["lower"], figure["upper"]))


def _percent(figure: dict | None) -> str:
    if figure is None or figure.get("mean") is None:
        return "-"
    low, high = 100 * figure["lower"], 100 * figure["upper"]
    d = decimals_for(low, high, 1)
    return f"{100 * figure['mean']:.{d}f}% ({low:.{d}f}% to {high:.{d}f}%)"


def line_lead(summary: dict) -> str:
    """The answer box's opening with a production file: the line's figures per million,
    the decision (when costs or production criteria asked for one) and the caution."""
    if not summary.get("strategies"):
        return ""
    rows = _rows(summary)
    body = [[esc(glossary.name(key)), _text(rows.get((key, "system", None)))]
            for key in LEAD_KEYS if (key, "system", None) in rows]  # fmt: skip
    prob = summary["prob"]
    parts = [
        f"<p><strong>On the line</strong> (production scope: "
        f"{esc(summary['production']['description'])}), one call a part:</p>",
        html_table(["result", f"estimate ({prob:.0%} interval)"], body, {1}),
    ]
    if summary.get("decision"):
        parts.append(f"<p><strong>Decision:</strong> {esc(summary['decision']['sentence'])}</p>")
    parts.append(f"<p class='note'>{esc(LINE_CAUTION)}</p>")
    parts.append("<p>On the study's parts:</p>")
    return "".join(parts)


def line_section(inputs: ReportInputs) -> str:
    """Each appraiser on production parts, the strategies compared and the figure."""
    summary = inputs.summary
    strategies = summary.get("strategies") or []
    if not strategies:
        return ""
    rows = _rows(summary)
    per_app = []
    for name in [*summary["design"]["appraiser_names"], None]:
        level = "appraiser" if name else "system"
        per_app.append([esc(name or "the line (its shares)")] + [
            _percent(rows.get((key, level, name)))
            for key in ("false_reject_rate", "false_accept_rate")
        ])  # fmt: skip
    costs = strategies[0]["probability_cheapest"] is not None
    header = ["strategy", "what is done", "calls a part", "escaped per million",
              "good rejected per million"]  # fmt: skip
    if costs:
        header += ["cost per 1,000 parts", "probability cheapest"]
    body = []
    for row in strategies:
        f = row["figures"]
        cells = [esc(row["name"]), esc(row["description"]),
                 f"{f['calls_per_part']['mean']:.2f}", _text(f["escaped_per_million"]),
                 _text(f["rejected_good_per_million"])]  # fmt: skip
        if costs:
            cells += [_text(f["cost_per_1000"]), f"{row['probability_cheapest']:.3f}"]
        body.append(cells)
    assumed = summary["production"]
    costs_text = ""
    if assumed.get("costs"):
        c = assumed["costs"]
        costs_text = (
            f" Costs: {c['false_reject']:g} a good part rejected, {c['escape']:g} a bad part "
            f"shipped, {c['call']:g} a call."
        )
    return (
        f"<p>Production as stated in {esc(str(assumed['source']))}: "
        f"{esc(assumed['description'])}.{esc(costs_text)} Every strategy is evaluated part "
        "by part and then averaged over production parts, so calls of one part by several "
        "appraisers share that part (docs/statistics.md).</p>"
        + html_table(["appraiser", "false reject rate", "false accept rate"], per_app, {1, 2})
        + html_table(header, body, set(range(2, len(header))))
        + figure_tag(
            inputs.figures.get("strategies"),
            "escaped bad parts against rejected good parts per strategy",
        )
        + (
            f"<p><strong>Decision:</strong> {esc(summary['decision']['sentence'])}</p>"
            if summary.get("decision")
            else "<p>No costs and no production criteria were given: figures only.</p>"
        )
        + _guard_band(summary)
        + f"<p class='note'>{esc(LINE_CAUTION)}</p>"
    )


def _guard_band(summary: dict) -> str:
    if not summary.get("guard_band"):
        return ""
    from bayes_rr.results.production import guard_band_sentence

    return f"<p><strong>Guard band:</strong> {esc(guard_band_sentence(summary))}</p>"
