"""The report's front: the answer in brief, the study, the rates and curves, the
appraisers compared, and the glossary."""

from __future__ import annotations

from bayes_rr.core import glossary
from bayes_rr.core.numbers import interval_text
from bayes_rr.report.blocks import LIMITED_NOTES, ReportInputs, esc, figure_tag, html_table
from bayes_rr.study.describe import reference_rows

# ---------------------------------------------------------------------------
# sections


ANSWER_KEYS = (
    ("false_reject_rate", "system"),
    ("false_accept_rate", "system"),
    ("repeat_disagreement", "study"),
    ("cross_disagreement", "study"),
    ("reproducibility_share", "study"),
)
"""The results the first page leads with, in this order (those the model gives)."""


def answer_box(inputs: ReportInputs) -> str:
    """The answer in brief: key results with their scope in words, criteria, the check
    and the convergence verdicts, and how much the prior shapes the results."""
    from bayes_rr.priors.sensitivity import HEADLINE_KEYS, sentences

    summary = inputs.summary
    if not summary["diagnostics"]["ok"]:
        return (
            "<p>The sampler did not pass the convergence gate, so this report gives no "
            "results. See the convergence appendix for the reasons and what to do.</p>"
        )
    prob = summary["prob"]
    found = {
        (r["key"], r["scope"], r["level"]): r
        for r in summary["estimands"]
        if r.get("part") is None and r.get("appraiser") is None
    }
    rows = []
    for key, level in ANSWER_KEYS:
        for scope in ("study", "population"):
            row = found.get((key, scope, level))
            if row is None:
                continue
            rows.append([esc(glossary.name(key)), esc(glossary.SCOPES[scope]),
                         _percent_interval(row)])  # fmt: skip
    from bayes_rr.report.line import line_lead

    parts = [line_lead(summary), _limits_lead(summary)]
    if rows:
        parts.append(
            html_table(
                ["result", "for", f"estimate ({prob:.0%} {summary['interval_description']})"],
                rows,
                {2},
            )
        )
    items = [lim["sentence"] for lim in summary.get("limitations", [])]
    items += [f"Before the fit: {w}." for w in summary.get("data_warnings", [])]
    items += [f"Not used: {w}." for w in summary.get("ignored_options", [])]
    items += [row["sentence"] for row in summary.get("criteria", [])]
    if summary.get("criteria"):
        items.append("The criteria's thresholds are set by the user's organisation; they are "
                     "not universal limits.")  # fmt: skip
    if inputs.checks is not None:
        items.append(f"Model check: {inputs.checks['posterior_predictive']['verdict']}.")
        if inputs.checks.get("dependence"):
            items.append(f"{inputs.checks['dependence']}.")
    else:
        items.append("The model checks were not run ('bayes-rr check').")
    diag = summary["diagnostics"]
    items.append(
        f"The sampler passed the convergence gate (r_hat at most {diag['max_r_hat']:.3f}, "
        f"effective sample size at least {diag['min_ess_bulk']:.0f})."
    )
    earlier = summary.get("prior_from")
    items += sentences(summary.get("prior_sensitivity") or {}, bool(earlier), HEADLINE_KEYS)
    parts.append("<ul>" + "".join(f"<li>{esc(i)}</li>" for i in items) + "</ul>")
    return "".join(parts)


def _limits_lead(summary: dict) -> str:
    """Call curves answer first where each appraiser puts the limit: effective limit and
    bias, at the digits their intervals need."""
    rows = {(r["key"], r["appraiser"]): r for r in summary["estimands"]
            if r["scope"] == "study" and r["level"] == "appraiser"}  # fmt: skip
    keys = sorted({k for k, _ in rows if k.startswith("effective_limit[")})
    if not keys:
        return ""
    body = []
    for name in summary["design"]["appraiser_names"]:
        for key in keys:
            side = key.split("side=")[1].rstrip("]")
            bias = rows.get((key.replace("effective_limit", "bias"), name))
            body.append([esc(name), esc(side), _value_interval(rows.get((key, name))),
                         _value_interval(bias)])  # fmt: skip
    return (
        "<p>Where each appraiser puts the specification limit (posterior mean and "
        f"{summary['prob']:.0%} interval, in the measured value's units):</p>"
        + html_table(
            ["appraiser", "limit", "effective limit", "bias (effective - limit)"], body, {2, 3}
        )
    )


def glossary_section() -> str:
    terms = "".join(
        f"<dt>{esc(name)}</dt><dd>{esc(meaning)}</dd>"
        for name, meaning in glossary.GLOSSARY.values()
    )
    scopes = "".join(
        f"<dt>scope: {esc(words)}</dt><dd>{esc(_SCOPE_MEANING[key])}</dd>"
        for key, words in glossary.SCOPES.items()
    )
    return f"<dl class='glossary'>{terms}{scopes}</dl>"


_SCOPE_MEANING = {
    "study": "results about the appraisers who took part in the study, on the study's parts",
    "population": "results about an appraiser not in the study, drawn from the same "
    "population of appraisers, on the study's parts",
    "production": "results about the study's appraisers on the parts the line makes, as the "
    "production file describes them (share of bad parts, appraisers' shares of the parts)",
}


def study_section(inputs: ReportInputs) -> str:
    design = inputs.summary["design"]
    rows = [
        ["data file", esc(design["source"])],
        ["parts", esc(design["parts"])],
        ["appraisers", esc(", ".join(design["appraiser_names"]))],
        ["calls", esc(design["calls"])],
        ["reject calls", f"{design['reject_calls']} ({design['reject_share']:.1%})"],
        ["trials per part and appraiser", f"{design['trials_per_cell_min']} to "
                                          f"{design['trials_per_cell_max']}"],
        ["empty part x appraiser cells", esc(design["empty_cells"])],
        ["reference status known", "yes" if design["has_reference"] else "no"],
        *[[esc(label), esc(text)] for label, text in reference_rows(design)],
        ["columns not used", esc(", ".join(design.get("ignored_columns", [])) or "none")],
        ["data SHA-256", f"<code>{esc(design['data_sha256'])}</code>"],
    ]  # fmt: skip
    for label, value in (("site", inputs.site), ("notes", inputs.notes)):
        if value:
            rows.append([label, esc(value)])
    notes = "".join(f"<li>{esc(n)}</li>" for n in design.get("notes", []))
    grid = figure_tag(inputs.figures.get("call_grid"), "observed share of reject calls per cell")
    return (
        html_table(["item", "value"], rows)
        + (f"<p>Reading the data:</p><ul>{notes}</ul>" if notes else "")
        + grid
    )


RATE_COLUMNS = (
    ("false_reject_rate", "false reject rate"),
    ("false_accept_rate", "false accept rate"),
    ("reference_agreement", "agreement with status"),
)


def _percent_interval(row: dict | None) -> str:
    if row is None or row.get("mean") is None:
        return "-"
    note = row.get("note") or ""
    if note.startswith(LIMITED_NOTES):
        # The design cannot inform this result: say so instead of printing a number
        # (the limitation's sentence follows the table).
        return f"<em>{esc(note.split(';')[0])}</em>"
    return f"{row['mean']:.1%} ({row['lower']:.1%} to {row['upper']:.1%})"


def _rates_table(summary: dict) -> str:
    """Each appraiser's and the system's wrong-call rates with intervals."""
    rows = {
        (r["key"], r["scope"], r["level"], r["appraiser"]): r
        for r in summary["estimands"]
        if r["level"] in ("appraiser", "system")
    }
    body = []
    for name in [*summary["design"]["appraiser_names"], None]:
        level = "appraiser" if name else "system"
        body.append([esc(name or "the study's appraisers together")] + [
            _percent_interval(rows.get((key, "study", level, name))) for key, _ in RATE_COLUMNS
        ])  # fmt: skip
    body.append(["a new appraiser (population)"] + [
        _percent_interval(rows.get((key, "population", "system", None))) for key, _ in RATE_COLUMNS
    ])  # fmt: skip
    prob = summary["prob"]
    return (
        f"<p>Wrong calls on the study's parts, posterior means with {prob:.0%} "
        f"{esc(summary['interval_description'])}s. "
        "False reject rate: the share of good parts called reject; false accept rate: the "
        "share of bad parts called accept.</p>"
        + html_table(["appraiser", *(label for _, label in RATE_COLUMNS)], body, {1, 2, 3})
    )


COMPARISON_COLUMNS = ["rate", "appraiser", "reference fallible", "reference exact", "shift"]


def reference_table(summary: dict) -> str:
    """With a fallible reference: each rate against it and against the reference taken as
    exact, and the parts whose reference the calls doubt."""
    block = summary.get("reference_comparison")
    if not block:
        return ""
    body = []
    for row in block["rows"]:
        who = row["appraiser"] or ("a new appraiser (population)" if row["scope"] == "population"
                                   else "the study's appraisers together")  # fmt: skip
        shift = "-" if row["shift"] is None else f"{100 * row['shift']:+.1f} pt"
        body.append([esc(glossary.name(row["key"])), esc(who), _percent_interval(row["fallible"]),
                     _percent_interval(row["exact"]), shift])  # fmt: skip
    doubtful = "".join(
        f"<li>{esc(d['part'])}: {d['probability']:.0%}</li>" for d in block["doubtful_parts"]
    )
    return (
        "<h3>The reference as a fallible rater</h3>"
        "<p>The model takes the reference's stated error rates and each part's true status "
        "as unknown. Beside each rate, the same model with the reference taken as exact: "
        "the difference (shift, in percentage points) is what the reference's own errors "
        "would have added to (or hidden from) the appraisers' rates.</p>"
        + html_table(COMPARISON_COLUMNS, body, {2, 3, 4})
        + "<ul>" + "".join(f"<li>{esc(s)}</li>" for s in block["sentences"]) + "</ul>"
        + (f"<p>Parts whose reference is more likely wrong than right (posterior "
           f"probability):</p><ul>{doubtful}</ul>" if doubtful else "")
    )  # fmt: skip


CURVE_COLUMNS = (("effective_limit", "effective limit"), ("bias", "bias (effective - limit)"))


def _value_interval(row: dict | None) -> str:
    if row is None or row.get("mean") is None:
        return "-"
    return esc(interval_text(row["mean"], row["lower"], row["upper"]))


def threshold_table(summary: dict) -> str:
    """Each appraiser's threshold and transition width on the latent scale (latent trait
    model); empty for other models."""
    rows = {(r["key"], r["scope"], r["level"], r["appraiser"]): r for r in summary["estimands"]}
    if not any(key[0] == "threshold" for key in rows):
        return ""
    body = [
        [esc(name), _value_interval(rows.get(("threshold", "study", "appraiser", name))),
         _value_interval(rows.get(("transition_width", "study", "appraiser", name)))]
        for name in summary["design"]["appraiser_names"]
    ]  # fmt: skip
    spread = _value_interval(rows.get(("threshold_spread", "study", "system", None)))
    ratio = _value_interval(rows.get(("spread_to_width", "population", "system", None)))
    return (
        "<p>Where each appraiser rejects on the latent scale of the judged property "
        "(threshold: rejected half the time; transition width: the zone of inconsistent "
        "calls), in standard deviations of the parts' positions, since nobody measured the "
        "property; posterior means with intervals. Spread of the thresholds over these "
        f"appraisers (reproducibility on this scale): {spread}; for the population, the "
        f"spread of thresholds over the typical transition width: {ratio}.</p>"
        + html_table(["appraiser", "threshold", "transition width"], body, {1, 2})
    )


def _curve_table(summary: dict) -> str:
    """Each appraiser's effective limit(s), bias and transition width, in the units of
    the reference value."""
    rows = {(r["key"], r["scope"], r["level"], r["appraiser"]): r for r in summary["estimands"]}
    sides = sorted({r["key"].split("side=")[1].rstrip("]") for r in summary["estimands"]
                    if r["key"].startswith("effective_limit[")})  # fmt: skip
    header = ["appraiser"]
    for side in sides:
        header += [f"{label}, {side}" for _, label in CURVE_COLUMNS]
    header.append("transition width")
    body = []
    for name in summary["design"]["appraiser_names"]:
        cells = [esc(name)]
        for side in sides:
            cells += [_value_interval(rows.get((f"{key}[side={side}]", "study", "appraiser", name)))
                      for key, _ in CURVE_COLUMNS]  # fmt: skip
        cells.append(_value_interval(rows.get(("transition_width", "study", "appraiser", name))))
        body.append(cells)
    spread = [
        f"{side}: "
        + _value_interval(rows.get((f"limit_spread[side={side}]", "study", "system", None)))
        for side in sides
    ]
    return (
        "<p>Where each appraiser puts the limit (effective limit, with its bias from the "
        "specification limit) and how wide the zone of inconsistent calls around it is "
        "(transition width), in the units of the reference value; posterior means with "
        f"intervals. Spread of the effective limits over these appraisers (reproducibility "
        f"on the measurand's scale): {esc('; '.join(spread))}.</p>"
        + html_table(header, body, set(range(1, len(header))))
    )


def _comparisons(inputs: ReportInputs) -> str:
    """The appraisers compared: sentences, every pair's posterior difference beside the
    classical interval for the difference of call rates, and the figure."""
    compared = inputs.summary.get("comparisons")
    if not compared:
        return ""
    classical = {
        (d["appraiser"], d["other"]): d["intervals"][0]
        for d in inputs.classical.get("appraiser_differences", [])
    }
    rows = []
    for pair in compared["pairs"]:
        newcombe = classical.get((pair["appraiser"], pair["other"]))
        rows.append([
            esc(pair["label"]),
            f"{esc(pair['appraiser'])} - {esc(pair['other'])}",
            f"{pair['mean']:+.3f} ({pair['lower']:+.3f} to {pair['upper']:+.3f})",
            f"{pair['probability_greater']:.3f}",
            f"{newcombe['lower']:+.3f} to {newcombe['upper']:+.3f}"
            if newcombe and pair["key"] == "call_rate" else "-",
        ])  # fmt: skip
    prob = compared["prob"]
    return (
        "<h3>Appraisers compared</h3><ul>"
        + "".join(f"<li>{esc(s)}</li>" for s in compared["sentences"])
        + "</ul>"
        + html_table(
            [
                "quantity",
                "pair",
                f"difference ({prob:.0%} interval)",
                "P(first is higher)",
                "classical interval (Newcombe)",
            ],
            rows,
            {2, 3, 4},
        )
        + figure_tag(inputs.figures.get("differences"), "pairwise differences of appraisers")
    )
