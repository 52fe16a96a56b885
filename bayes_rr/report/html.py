"""The validation report: one self-contained HTML file.

This module assembles and formats; it computes no statistic. Every string that
comes from the user or the data (titles, notes, part and appraiser names, file
names) is HTML-escaped. Figures are embedded as base64 SVG images, so the file
needs no remote resource and no script, and prints to PDF from a browser.
"""

from __future__ import annotations

import base64
import html
import io
from dataclasses import dataclass, field

from bayes_rr.core import glossary
from bayes_rr.results.estimands import POPULATION_ONLY_KEYS
from bayes_rr.results.estimands import STUDY_KEYS as STUDY_LEVEL_KEYS
from bayes_rr.study.describe import reference_rows

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
}
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


def figure_tag(fig, alt: str) -> str:
    """A matplotlib figure as an inline base64 SVG image."""
    if fig is None:
        return ""
    buffer = io.BytesIO()
    fig.savefig(buffer, format="svg")
    data = base64.b64encode(buffer.getvalue()).decode("ascii")
    return f'<img class="figure" alt="{esc(alt)}" src="data:image/svg+xml;base64,{data}">'


def _num(value, digits: int = 4) -> str:
    return "-" if value is None else f"{value:.{digits}f}"


def _table(header: list[str], rows: list[list[str]], numeric: set[int] | None = None) -> str:
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


def _study_rows(summary: dict) -> dict:
    return {(r["key"], r["scope"]): r for r in summary["estimands"] if r["level"] == "study"}


LIMITED_NOTES = ("set by the prior", "fixed by construction")


def _interval(row: dict | None, digits: int = 4) -> str:
    if row is None or row.get("mean") is None:
        return "-"
    note = row.get("note") or ""
    if note.startswith(LIMITED_NOTES):
        # The design cannot inform this result: say so instead of printing a number.
        return f"<em>{esc(note.split(';')[0])}</em>"
    return f"{row['mean']:.{digits}f} ({row['lower']:.{digits}f} to {row['upper']:.{digits}f})"


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


def _answer(inputs: ReportInputs) -> str:
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
    parts = []
    if rows:
        parts.append(
            _table(
                ["result", "for", f"estimate ({prob:.0%} {summary['interval_description']})"],
                rows,
                {2},
            )
        )
    items = [lim["sentence"] for lim in summary.get("limitations", [])]
    items += [row["sentence"] for row in summary.get("criteria", [])]
    if summary.get("criteria"):
        items.append("The criteria's thresholds are set by the user's organisation; they are "
                     "not universal limits.")  # fmt: skip
    if inputs.checks is not None:
        items.append(f"Model check: {inputs.checks['posterior_predictive']['verdict']}.")
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


def _glossary_section() -> str:
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
}


def _study_section(inputs: ReportInputs) -> str:
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
        _table(["item", "value"], rows)
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
        + _table(["appraiser", *(label for _, label in RATE_COLUMNS)], body, {1, 2, 3})
    )


CURVE_COLUMNS = (("effective_limit", "effective limit"), ("bias", "bias (effective - limit)"))


def _value_interval(row: dict | None) -> str:
    if row is None or row.get("mean") is None:
        return "-"
    return f"{row['mean']:.4g} ({row['lower']:.4g} to {row['upper']:.4g})"


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
        + _table(header, body, set(range(1, len(header))))
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
        + _table(
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


def _family_texts(name: str) -> tuple[tuple[str, ...], tuple[str, ...]]:
    """The model notes and cautions the fit's family adds (none for a family this version
    does not know)."""
    from bayes_rr.families import FAMILIES

    family = FAMILIES.get(name)
    return (family.model_notes, family.cautions) if family is not None else ((), ())


def _model_section(inputs: ReportInputs) -> str:
    summary, run = inputs.summary, inputs.run
    model = summary["model"]
    params = ", ".join(f"{esc(k)}: {esc(v)}" for k, v in model["parameterizations"].items())
    parts = [
        f"<p>Model <b>{esc(model['name'])}</b> ({esc(model['family'])}): "
        f"{esc(model['description'])}. Parameterization of the group terms: {params}.</p>",
    ]
    parts.extend(f"<p>{esc(note)}</p>" for note in _family_texts(model["family"])[0])
    identification = (summary.get("wrong_calls") or {}).get("identification")
    if identification:
        parts.append(f"<p>{esc(identification)}</p>")
    parts.append("<p>The model specification, exactly as fitted:</p>")
    parts.append(f"<pre>{esc(run['spec_text'])}</pre>")
    prior = (inputs.checks or {}).get("prior_predictive")
    if prior:
        posterior = _study_rows(summary)
        rows = []
        for row in prior:
            post = posterior.get((row["key"], row["scope"]))
            rows.append(
                [
                    esc(row["key"].replace("_", " ")),
                    esc(row["scope"]),
                    f"{row['median']:.3f}",
                    f"{row['q025']:.3f} to {row['q975']:.3f}",
                    _interval(post, 3) if summary["diagnostics"]["ok"] else "-",
                ]
            )
        parts.append(
            "<p>Prior predictive check: what the priors alone imply for this design, before "
            "the calls are seen, next to the posterior. Where the prior range is much wider "
            "than the posterior interval, the data and not the priors decide the answer.</p>"
        )
        parts.append(
            _table(
                ["quantity", "scope", "prior median", "prior 95% range", "posterior"],
                rows,
                {2, 3, 4},
            )
        )
    return "".join(parts)


def _calibration_section(inputs: ReportInputs) -> str:
    """A simulation-based calibration run shown as evidence, with how its design and
    model relate to this fit's."""
    found = inputs.calibration
    design = found["design"]
    fitted = inputs.summary["design"]
    same_model = found.get("spec_name") == inputs.run.get("spec_name")
    same_design = (design["parts"], design["appraisers"]) == (
        fitted.get("parts"), fitted.get("appraisers"))  # fmt: skip
    relation = (
        "It was run with this fit's model and number of parts and appraisers."
        if same_model and same_design
        else "Its model or design differs from this fit's: it is evidence for that model "
        "and design, and only indirectly for this fit."
    )
    rows = [
        [esc(r["name"]), f"{r['rank_uniformity_p']:.3f}", f"{r['coverage_50']:.0%}",
         f"{r['coverage_90']:.0%}", "yes" if r["ecdf_within_band"] else "no", str(r["sims"])]
        for r in found["parameters"]
    ]  # fmt: skip
    return (
        f"<p>{esc(found['verdict'])}</p>"
        f"<p class='note'>Calibration of the model {esc(found.get('spec_name'))} on "
        f"{design['parts']} parts x {design['appraisers']} appraisers x {design['trials']} "
        f"trials, {found['sims']} studies simulated from the prior (seed {found['seed']}). "
        f"{relation} {esc(found.get('method', ''))}</p>"
        + _table(
            [
                "quantity",
                "rank uniformity p",
                "50% interval coverage",
                "90% interval coverage",
                "rank ECDF inside its band",
                "studies",
            ],
            rows,
            {1, 2, 3, 5},
        )
    )


def _comparison_section(inputs: ReportInputs) -> str:
    """Which of the compared models predicts the calls best (PSIS-LOO)."""
    result = inputs.comparison
    rows = [
        [
            esc(r["model"]),
            esc(result.get("folders", {}).get(r["model"], "")),
            f"{r['elpd_diff']:.1f}",
            f"{r['diff_se']:.1f}",
            f"{r['stacking_weight']:.2f}",
            esc(r["pareto_k_note"]),
        ]
        for r in result["models"]
    ]
    return (
        f"<p>{esc(result['verdict'])}.</p>"
        f"<p class='note'>{esc(result['method'])}. The difference in expected log predictive "
        "density (elpd) is against the best model; a difference within two of its standard "
        "errors does not separate the models.</p>"
        + _table(
            ["model", "fit folder", "elpd difference", "its SE", "stacking weight", "reliability"],
            rows,
            {2, 3, 4},
        )
    )


def _prior_section(inputs: ReportInputs) -> str:
    """The earlier study carried in (if any) and the power-scaling sensitivity."""
    from bayes_rr.priors.sensitivity import sentences

    summary = inputs.summary
    parts = []
    earlier = summary.get("prior_from")
    if earlier:
        parts.append(
            f"<p>An earlier fit ({esc(earlier['fit'])}, data SHA-256 "
            f"{esc(earlier['data_sha256'][:12])}...) is part of the prior, with weight "
            f"{earlier['weight']:g} (1 carries the earlier study in full). Each hyper-"
            "parameter's stated prior is multiplied by a normal factor on its unconstrained "
            "scale, chosen so that the product follows the earlier draws; the hyper-parameters "
            "are carried over as independent. The quantile gap is the largest difference in "
            "probability between the approximation and the earlier draws at their 5, 25, 50, "
            "75 and 95% quantiles.</p>"
        )
        rows = [
            [
                esc(r["label"]),
                esc(r["scale"]),
                f"{r['draws_mean']:.3g} / {r['draws_sd']:.3g}",
                "not needed"
                if not r["carried"]
                else f"N({r['factor_mu']:.3g}, {r['factor_sigma']:.3g})",
                f"{r['quantile_gap']:.3f}",
            ]
            for r in earlier["parameters"]
        ]
        parts.append(
            _table(
                ["hyper-parameter", "scale", "earlier mean / sd", "factor", "quantile gap"],
                rows,
                {2, 4},
            )
        )
    block = summary.get("prior_sensitivity")
    if block and block.get("rows"):
        parts.append(
            "<p>Power-scaling sensitivity (Kallioinen et al. 2023): how much each result "
            "moves when the stated priors, or the likelihood, are made slightly stronger or "
            f"weaker, computed from the draws without refitting. At or above "
            f"{block['threshold']:g} the prior shapes a result; a low likelihood sensitivity "
            "then means the data say little about it.</p>"
        )
        parts.append("<p>" + " ".join(esc(t) for t in sentences(block, bool(earlier))) + "</p>")
        parts.append("<p>Every result's figures are in appendix E.</p>")
    return "".join(parts)


def _sensitivity_appendix(inputs: ReportInputs) -> str:
    block = inputs.summary.get("prior_sensitivity")
    if not block or not block.get("rows"):
        return ""
    rows = [
        [
            esc(glossary.name(r["key"])),
            esc(r["scope"]),
            f"{r['prior']:.3f}",
            f"{r['likelihood']:.3f}",
            esc(r["verdict_words"]),
        ]
        for r in block["rows"]
    ]
    header = ["result", "scope", "prior sensitivity", "likelihood sensitivity", "reading"]
    return _table(header, rows, {2, 3})


def _convergence_section(inputs: ReportInputs) -> str:
    diag = inputs.summary["diagnostics"]
    thresholds = diag["thresholds"]
    rows = [
        ["max r_hat", _num(diag["max_r_hat"], 3), f"<= {thresholds['r_hat_max']}"],
        ["min bulk ESS", _num(diag["min_ess_bulk"], 0), f">= {thresholds['ess_min']}"],
        ["min tail ESS", _num(diag["min_ess_tail"], 0), f">= {thresholds['ess_min']}"],
        ["divergent transitions", f"{diag['divergences']} of {diag['draws']}",
         f"0 (up to {thresholds['divergence_share_with_warning']:.1%} with a warning)"],
        ["min E-BFMI", _num(diag["min_bfmi"], 2), f">= {thresholds['bfmi_min']}"],
    ]  # fmt: skip
    verdict = (
        "<p>The sampler passed the convergence gate.</p>"
        if diag["ok"]
        else "<p class='flag'>The sampler did not pass the convergence gate.</p>"
    )
    items = "".join(f"<li>reason: {esc(r)}</li>" for r in diag["reasons"])
    items += "".join(f"<li>warning: {esc(w)}</li>" for w in diag["warnings"])
    items += "".join(f"<li>advice: {esc(a)}</li>" for a in diag["advice"])
    ranks = figure_tag(inputs.figures.get("rank_plots"), "rank plots of the hyper-parameters")
    return (
        verdict
        + _table(["diagnostic", "value", "required"], rows, {1})
        + (f"<ul>{items}</ul>" if items else "")
        + ranks
    )


def _difference_sentence(summary: dict, classical: dict) -> str:
    post = _study_rows(summary).get(("repeatability_variance", "study"))
    plug = classical["classical"]["plug_in"]["study"].get("repeatability_variance")
    corr = classical["classical"]["corrected"]["study"].get("repeatability_variance")
    if post is None or plug is None or corr is None:
        return ""
    text = (
        f"The plug-in moment estimate of the repeatability variance ({plug:.4f}) is biased "
        "low: with n trials, p(1 - p) of an observed proportion underestimates it by the "
        f"factor (n - 1)/n; the corrected estimate ({corr:.4f}) removes that bias but can "
        "make the reproducibility variance negative. "
    )
    if post["lower"] <= corr <= post["upper"]:
        text += (
            f"The posterior ({post['mean']:.4f}) agrees with the corrected estimate within "
            "its interval."
        )
    else:
        text += (
            f"The posterior ({post['mean']:.4f}) differs from the corrected estimate: it pools "
            "information across parts and does not take a part on which every call agreed as "
            "having a call probability of exactly 0 or 1, which moves repeatability away from "
            "the moment estimates on small studies."
        )
    return f"<p>{esc(text)}</p>"


def _results_section(inputs: ReportInputs) -> str:
    summary, classical = inputs.summary, inputs.classical
    prob = summary["prob"]
    kind = summary["interval_description"]
    rows = _study_rows(summary)
    plug = classical["classical"]["plug_in"]["study"]
    corr = classical["classical"]["corrected"]["study"]
    table_rows = []
    for key in STUDY_KEYS:
        if (key, "study") not in rows and (key, "population") not in rows:
            continue
        table_rows.append(
            [
                esc(glossary.name(key)),
                _interval(rows.get((key, "study"))),
                _interval(rows.get((key, "population"))),
                _num(plug.get(key)),
                _num(corr.get(key)),
            ]
        )
    rates = []
    wrong = summary.get("wrong_calls") or {}
    if wrong:
        items = [wrong["weak_identification"]] if wrong.get("weak_identification") else []
        items += list(wrong.get("readings", []))
        rates += ["<ul>" + "".join(f"<li>{esc(i)}</li>" for i in items) + "</ul>",
                  _rates_table(summary)]  # fmt: skip
    if inputs.figures.get("call_curves") is not None:
        rates += [
            _curve_table(summary),
            figure_tag(inputs.figures["call_curves"], "each appraiser's call curve"),
        ]
    if not table_rows:  # a model with rates only (latent class)
        return "".join(rates)
    parts = [
        *rates,
        f"<p>Posterior means with {prob:.0%} {esc(kind)}s. Study scope: the appraisers in "
        "the study. Population scope: a new appraiser drawn from the same population. Both "
        "are averaged over the study's parts (which were chosen, not sampled).</p>",
        _table(
            [
                "quantity",
                "study's appraisers",
                "new appraiser",
                "classical plug-in",
                "classical corrected",
            ],
            table_rows,
            {1, 2, 3, 4},
        ),
        "<ul>" + "".join(f"<li>{esc(s)}</li>" for s in summary["readings"]) + "</ul>",
        _difference_sentence(summary, classical),
        figure_tag(inputs.figures.get("study_densities"), "posterior densities, study level"),
    ]
    appraisers = figure_tag(inputs.figures.get("appraisers"), "appraiser call rates")
    if appraisers:
        parts += ["<h3>Per appraiser</h3>", appraisers]
    parts.append(_comparisons(inputs))
    return "".join(parts)


def _share_cell(row: dict | None) -> str:
    if row is None:
        return "-"
    wilson = next((i for i in row["intervals"] if i["method"].startswith("Wilson")),
                  row["intervals"][0])  # fmt: skip
    count = f"{row.get('agreed', row.get('errors'))}/{row.get('parts', row.get('calls'))}"
    return (
        f"{row.get('share', row.get('rate')):.0%} ({count})<br>"
        f"<span class='note'>{wilson['lower']:.0%} to {wilson['upper']:.0%}</span>"
    )


def _kappa_cell(row: dict | None) -> str:
    if row is None:
        return "-"
    interval = ""
    if row.get("lower") is not None and row.get("upper") is not None:
        interval = f"<br><span class='note'>{row['lower']:.2f} to {row['upper']:.2f}</span>"
    return f"{row['kappa']:.2f}{interval}"


def _classical_section(classical: dict, has_reference: bool) -> str:
    """The classical figures of the study, one row per appraiser with that appraiser's
    figures side by side, and a row for the appraisers together."""
    from bayes_rr.study.classical import by_appraiser

    prob = classical["prob"]
    header = ["appraiser", "parts called alike on every own trial", "kappa of own trials"]
    if has_reference:
        header += ["parts matching the reference on every trial", "kappa with the reference",
                   "false reject rate (calls)", "false accept rate (calls)"]  # fmt: skip
    body = []
    for item in by_appraiser(classical):
        row = [esc(item["appraiser"] or "all appraisers together"), _share_cell(item["own"]),
               _kappa_cell(item["own_kappa"])]  # fmt: skip
        if has_reference:
            row += [_share_cell(item["reference"]), _kappa_cell(item["reference_kappa"]),
                    _share_cell(item["false_reject_rate"]),
                    _share_cell(item["false_accept_rate"])]  # fmt: skip
        body.append(row)
    pairs = [
        [esc(f"{r['appraiser']} and {r['other']}"), _kappa_cell(r)]
        for r in classical["kappa"]
        if r["kind"] == "appraiser_pair"
    ]
    out = (
        f"<p>The closed-form figures of the same calls, for comparison with the posterior "
        f"and for readers used to them. Shares with their {prob:.0%} Wilson intervals; "
        f"Fleiss' kappa with a {prob:.0%} percentile bootstrap interval over parts (the "
        "textbook standard error under no agreement serves only the test of no agreement "
        "and is in classical.json, with the z statistics). The 'all appraisers together' "
        "row counts a part as called alike when every call of every appraiser agrees. "
        "Error rates treat each call as independent, which repeated calls on a part are "
        "not: the posterior rates above account for that.</p>"
        + _table(header, body, set(range(1, len(header))))
    )
    if pairs:
        out += (
            "<p>Cohen's kappa of each pair of appraisers: every call of one paired with every "
            "call of the other on the same part (so it does not depend on how trials are "
            f"numbered), with a {prob:.0%} bootstrap interval over parts.</p>"
            + _table(["pair", "Cohen's kappa"], pairs, {1})
        )
    return out


def _by_kind(value: float) -> str:
    """Counts as whole numbers, shares and means to three decimals."""
    return str(int(value)) if float(value).is_integer() else f"{value:.3f}"


def _checks_section(inputs: ReportInputs) -> str:
    checks = inputs.checks
    if checks is None:
        return "<p>No model checks were run for this fit ('bayes-rr check').</p>"
    ppc = checks["posterior_predictive"]
    rows = [
        [
            esc(s["description"]),
            _by_kind(s["observed"]),
            f"{_by_kind(s['replicated_mean'])} ({_by_kind(s['replicated_lower'])} to "
            f"{_by_kind(s['replicated_upper'])})",
            _num(s["p_value"], 3),
            "<span class='flag'>FLAG</span>" if s["flagged"] else "",
        ]
        for s in ppc["statistics"]
    ]
    return (
        f"<p>Method: {esc(ppc['method'])}, {ppc['draws']} replicated studies with the "
        f"same design. p-value: {esc(ppc['p_value'])}; flagged when {esc(ppc['flag_when'])}."
        f" Verdict: {esc(ppc['verdict'])}.</p>"
        + _table(["statistic", "observed", "replicated mean (95% range)", "p", ""], rows, {1, 2, 3})
        + figure_tag(inputs.figures.get("checks"), "posterior predictive check panels")
    )


def _cautions_section(inputs: ReportInputs) -> str:
    family = inputs.summary["model"]["family"]
    items = [
        "The parts of an attribute study are chosen on purpose (often near the limit), not "
        "sampled from production: the study-level results describe these parts, not the "
        "call error rates on production parts.",
        "The model assumes calls within a part-appraiser cell are independent given the "
        "call probability (no memory of earlier trials); studies should randomise the order "
        "of parts and hide earlier calls.",
        "The population scope assumes the study's appraisers are representative of the "
        "appraisers who will use the method; with few appraisers that scope is uncertain.",
    ]
    items.extend(_family_texts(family)[1])
    items.extend(CAUTIONS)
    return "<ul>" + "".join(f"<li>{esc(i)}</li>" for i in items) + "</ul>"


def _provenance_section(inputs: ReportInputs) -> str:
    run = inputs.run
    settings = run["sampler_settings"]
    rows = [
        ["fit folder", esc(inputs.folder)],
        ["data SHA-256", f"<code>{esc(run['data_sha256'])}</code>"],
        ["model spec SHA-256", f"<code>{esc(run['spec_sha256'])}</code>"],
        ["seed", esc(run["seed"])],
        ["sampler", esc(", ".join(f"{k}={v}" for k, v in settings.items()))],
        ["started / finished (UTC)", f"{esc(run['started'])} / {esc(run['finished'])}"],
        ["timings (s)", esc(", ".join(f"{k} {v:.1f}" for k, v in run["timings"].items()))],
        ["versions", esc(", ".join(f"{k} {v}" for k, v in run["versions"].items()))],
        ["platform", esc(run["platform"])],
    ]
    return _table(["item", "value"], rows)


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
    sections = [("answer", "The answer in brief", _answer(inputs))]
    sections += [
        ("", "Cautions", _cautions_section(inputs)),
        ("", "The study", _study_section(inputs)),
    ]
    if ok:
        sections += [
            ("", "Results", _results_section(inputs)),
            ("", "Classical statistics", _classical_section(inputs.classical, has_reference)),
            ("", "Does the model fit the data?", _checks_section(inputs)),
            ("", "How much the prior matters", _prior_section(inputs)),
            *([("", "Models compared", _comparison_section(inputs))] if inputs.comparison else []),
            *(
                [("", "Are the intervals calibrated?", _calibration_section(inputs))]
                if inputs.calibration
                else []
            ),
        ]
    per_part = figure_tag(inputs.figures.get("per_part"), "per-part variances with intervals")
    sections += [
        ("appendix-start", "Appendix A. Convergence", _convergence_section(inputs)),
        ("", "Appendix B. The model as fitted", _model_section(inputs)),
        *([("", "Appendix C. Per-part results", per_part)] if ok and per_part else []),
        ("", "Appendix D. Glossary", _glossary_section()),
        *(
            [("", "Appendix E. Prior sensitivity of every result", _sensitivity_appendix(inputs))]
            if ok and _sensitivity_appendix(inputs)
            else []
        ),
        ("", "Provenance", _provenance_section(inputs)),
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
