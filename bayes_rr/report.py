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

from bayes_rr.describe import reference_rows

CAUTIONS = (
    "Statistics support but do not replace the organisation's quality procedures, customer "
    "and regulatory requirements, and qualified judgement.",
    "For safety-critical parts, defer to local codes and licensed practice.",
)

STUDY_ROWS = (
    ("rr_variance", "R&R variance T = pi(1 - pi)"),
    ("repeatability_variance", "repeatability variance R"),
    ("reproducibility_variance", "reproducibility variance V"),
    ("rr_sd", "R&R standard deviation"),
    ("repeatability_sd", "repeatability standard deviation"),
    ("reproducibility_sd", "reproducibility standard deviation"),
    ("reproducibility_share", "share of inconsistency due to appraisers (V/T)"),
    ("repeat_disagreement", "P(two repeat calls by one appraiser disagree) = 2R"),
    ("cross_disagreement", "P(two calls by two new appraisers disagree) = 2T"),
    ("appraiser_bias_variance", "part of V from appraisers' consistent leaning"),
    ("interaction_variance", "part of V from appraiser-by-part disagreement"),
)

STYLE = """
body { font-family: Georgia, 'Times New Roman', serif; max-width: 60rem; margin: 2rem auto;
       padding: 0 1rem; color: #111; line-height: 1.45; }
h1 { font-size: 1.6rem; } h2 { font-size: 1.25rem; border-bottom: 1px solid #999;
     margin-top: 2.2rem; }
table { border-collapse: collapse; margin: 0.6rem 0; font-size: 0.9rem; }
th, td { border: 1px solid #bbb; padding: 0.2rem 0.5rem; text-align: left;
         vertical-align: top; }
td.num { text-align: right; font-variant-numeric: tabular-nums; }
pre { background: #f4f4f4; padding: 0.6rem; overflow-x: auto; font-size: 0.8rem; }
.banner { border: 3px solid #000; padding: 0.6rem; font-weight: bold; }
.flag { font-weight: bold; }
.note { font-size: 0.85rem; color: #333; }
img.figure { max-width: 100%; height: auto; display: block; margin: 0.6rem 0; }
@media print {
  body { margin: 0; max-width: none; }
  section { page-break-before: always; break-before: page; }
  section.first { page-break-before: auto; break-before: auto; }
  img.figure { page-break-inside: avoid; break-inside: avoid; }
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


def _findings(inputs: ReportInputs) -> str:
    summary = inputs.summary
    if not summary["diagnostics"]["ok"]:
        return (
            "<p>The sampler did not pass the convergence gate, so this report gives no "
            "results. See the convergence section for the reasons and what to do.</p>"
        )
    wrong = summary.get("wrong_calls") or {}
    lead = ""
    if wrong:
        # The wrong-call rates come first: one item a sentence, then the table.
        items = [wrong["weak_identification"]] if wrong.get("weak_identification") else []
        items += list(wrong.get("readings", []))
        lead = "<ul>" + "".join(f"<li>{esc(i)}</li>" for i in items) + "</ul>"
        lead += _rates_table(summary)
    if summary.get("criteria"):
        lead += (
            "<p>Acceptance criteria (thresholds set by the user's organisation, not "
            "universal limits):</p><ul>"
            + "".join(f"<li>{esc(row['sentence'])}</li>" for row in summary["criteria"])
            + "</ul>"
        )
    sentences = [lim["sentence"] for lim in summary.get("limitations", [])]
    sentences += list(summary["readings"])
    from bayes_rr.sensitivity import sentences as prior_sentences

    earlier = summary.get("prior_from")
    sentences += prior_sentences(summary.get("prior_sensitivity") or {}, bool(earlier))[:1]
    checks = inputs.checks
    if checks is not None:
        ppc = checks["posterior_predictive"]
        sentences.append(f"Posterior predictive check: {ppc['verdict']}.")
    return lead + "<p>" + " ".join(esc(s) for s in sentences) + "</p>"


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
        f"<p>Wrong calls on the study's parts, posterior means with {prob:.0%} intervals. "
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


def _model_section(inputs: ReportInputs) -> str:
    summary, run = inputs.summary, inputs.run
    model = summary["model"]
    params = ", ".join(f"{esc(k)}: {esc(v)}" for k, v in model["parameterizations"].items())
    parts = [
        f"<p>Model <b>{esc(model['name'])}</b> ({esc(model['family'])}): "
        f"{esc(model['description'])}. Parameterization of the group terms: {params}.</p>",
    ]
    if model["family"] == "beta_binomial":
        parts.append(
            "<p>This model treats the appraisers as exchangeable within each part: it "
            "ignores appraiser identity across parts, so an appraiser who leans towards "
            "reject on every part is not recognised as such. Per-appraiser results need "
            "the crossed-logit model.</p>"
        )
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
    from bayes_rr.sensitivity import sentences

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
        rows = [
            [
                esc(r["key"].replace("_", " ")),
                esc(r["scope"]),
                f"{r['prior']:.3f}",
                f"{r['likelihood']:.3f}",
                esc(r["verdict_words"]),
            ]
            for r in block["rows"]
        ]
        parts.append(
            _table(
                ["result", "scope", "prior sensitivity", "likelihood sensitivity", "reading"],
                rows,
                {2, 3},
            )
        )
    return "".join(parts)


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
    for key, label in STUDY_ROWS:
        if (key, "study") not in rows and (key, "population") not in rows:
            continue
        table_rows.append(
            [
                esc(label),
                _interval(rows.get((key, "study"))),
                _interval(rows.get((key, "population"))),
                _num(plug.get(key)),
                _num(corr.get(key)),
            ]
        )
    rates = []  # the wrong-call rates table stands in the first section
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
        "<h3>Per part</h3>",
        figure_tag(inputs.figures.get("per_part"), "per-part variances with intervals"),
    ]
    appraisers = figure_tag(inputs.figures.get("appraisers"), "appraiser call rates")
    if appraisers:
        parts += ["<h3>Per appraiser</h3>", appraisers]
    parts.append(_comparisons(inputs))
    parts.append("<h3>Classical statistics</h3>")
    parts.append(_classical_tables(classical))
    return "".join(parts)


def _classical_tables(classical: dict) -> str:
    prob = classical["prob"]
    agreement = [
        [
            esc(r["kind"].replace("_", " ")),
            esc(r["appraiser"] or "all"),
            f"{r['agreed']}/{r['parts']}",
            f"{r['share']:.1%}",
            " ; ".join(
                f"{esc(i['method'])} {i['lower']:.1%} to {i['upper']:.1%}" for i in r["intervals"]
            ),
        ]
        for r in classical["agreement"]
    ]
    kappa = [
        [
            esc(r["kind"].replace("_", " ")),
            esc(" vs ".join(x for x in (r["appraiser"], r["other"]) if x) or "all"),
            esc(r["statistic"]),
            _num(r["kappa"], 3),
            _num(r.get("se_fleiss_1971", r.get("se_fce_1969")), 3),
            _num(r["z"], 1),
        ]
        for r in classical["kappa"]
    ]
    errors = [
        [
            esc(r["key"].replace("_", " ")),
            esc(r["appraiser"] or "all"),
            f"{r['errors']}/{r['calls']}",
            f"{r['rate']:.1%}",
            f"{r['intervals'][0]['lower']:.1%} to {r['intervals'][0]['upper']:.1%}",
        ]
        for r in classical["error_rates"]
    ]
    out = (
        f"<p>Agreement over parts ({prob:.0%} intervals):</p>"
        + _table(["kind", "appraiser", "agreed/parts", "share", "intervals"], agreement, {2, 3})
        + "<p>Kappa (standard error of Fleiss (1971) or Fleiss, Cohen &amp; Everitt (1969); "
        "z uses the standard error under no agreement beyond chance):</p>"
        + _table(["kind", "who", "statistic", "kappa", "SE", "z"], kappa, {3, 4, 5})
    )
    if errors:
        out += (
            f"<p>Calls against the reference status ({prob:.0%} exact intervals; calls "
            "treated as independent):</p>"
            + _table(["rate", "appraiser", "errors/calls", "rate", "interval"], errors, {2, 3})
        )
    return out


def _checks_section(inputs: ReportInputs) -> str:
    checks = inputs.checks
    if checks is None:
        return "<p>No model checks were run for this fit ('bayes-rr check').</p>"
    ppc = checks["posterior_predictive"]
    rows = [
        [
            esc(s["description"]),
            _num(s["observed"], 3),
            f"{s['replicated_mean']:.3f} ({s['replicated_lower']:.3f} to "
            f"{s['replicated_upper']:.3f})",
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
    if family == "beta_binomial":
        items.append(
            "The beta-binomial model ignores appraiser identity across parts (see the model "
            "section)."
        )
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
    sections = [("first", "Findings in brief", _findings(inputs))]
    sections += [
        ("", "The study", _study_section(inputs)),
        ("", "The model and its assumptions", _model_section(inputs)),
        ("", "Did the sampler converge?", _convergence_section(inputs)),
    ]
    if ok:
        sections += [
            ("", "Results", _results_section(inputs)),
            ("", "How much the prior matters", _prior_section(inputs)),
            *([("", "Models compared", _comparison_section(inputs))] if inputs.comparison else []),
            ("", "Does the model reproduce the data?", _checks_section(inputs)),
        ]
    sections += [
        ("", "Cautions and limitations", _cautions_section(inputs)),
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
