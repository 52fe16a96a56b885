"""The report's body and appendices: results, classical statistics, checks, priors,
comparison, calibration, convergence, the model, cautions and provenance."""

from __future__ import annotations

from bayes_rr.core import glossary
from bayes_rr.report.answer import (
    _comparisons,
    _curve_table,
    _rates_table,
    reference_table,
    threshold_table,
)
from bayes_rr.report.blocks import (
    CAUTIONS,
    STUDY_KEYS,
    ReportInputs,
    esc,
    figure_tag,
    html_table,
    interval_text,
    number,
    study_rows,
)


def _family_texts(name: str) -> tuple[tuple[str, ...], tuple[str, ...]]:
    """The model notes and cautions the fit's family adds (none for a family this version
    does not know)."""
    from bayes_rr.families import FAMILIES

    family = FAMILIES.get(name)
    return (family.model_notes, family.cautions) if family is not None else ((), ())


def _sampling_notes(model: dict) -> list[str]:
    """How the sampler ran the model, when it differed from the stated form (fit folders
    written before these keys existed have none)."""
    form = model.get("sampled_form", "as stated")
    if form == "as stated":
        return []
    notes = [f"Sampled in an equivalent form: {esc(form)}; the stated parameters were "
             "drawn from it after sampling."]  # fmt: skip
    check = model.get("integration_rule_check")
    if check:
        verdict = "within" if check["ok"] else "beyond"
        notes.append(
            f"The integration rule ({check['nodes']} nodes) was checked at the largest "
            f"interaction scales drawn (up to {check['largest_scale']:.3g}): the study's log "
            f"likelihood was off by at most {check['largest_study_log_lik_error']:.1e}, "
            f"{verdict} the tolerance of {check['tolerance']}."
            + (f" {esc(check['then'])}." if "then" in check else "")
        )
    notes.extend(f"Sampled again: {esc(why)}." for why in model.get("sampled_again", []))
    return [f"<p>{note}</p>" for note in notes]


def model_section(inputs: ReportInputs) -> str:
    summary, run = inputs.summary, inputs.run
    model = summary["model"]
    params = ", ".join(f"{esc(k)}: {esc(v)}" for k, v in model["parameterizations"].items())
    parts = [
        f"<p>Model <b>{esc(model['name'])}</b> ({esc(model['family'])}): "
        f"{esc(model['description'])}. Parameterization of the group terms: {params}.</p>",
    ]
    parts.extend(_sampling_notes(model))
    parts.extend(f"<p>{esc(note)}</p>" for note in _family_texts(model["family"])[0])
    identification = (summary.get("wrong_calls") or {}).get("identification")
    if identification:
        parts.append(f"<p>{esc(identification)}</p>")
    parts.append("<p>The model specification, exactly as fitted:</p>")
    parts.append(f"<pre>{esc(run['spec_text'])}</pre>")
    prior = (inputs.checks or {}).get("prior_predictive")
    if prior:
        from bayes_rr.checks.predictive import prior_cells

        posterior = {(r["key"], r["scope"], r["level"]): r for r in summary["estimands"]
                     if r.get("appraiser") is None and r.get("part") is None}  # fmt: skip
        rows = []
        for row in prior:
            post = posterior.get((row["key"], row["scope"], row.get("level", "study")))
            rows.append(
                [*(esc(cell) for cell in prior_cells(row)),
                 interval_text(post, 3) if summary["diagnostics"]["ok"] else "-"]
            )  # fmt: skip
        parts.append(
            "<p>Prior predictive check: what the priors alone imply for this design, before "
            "the calls are seen, next to the posterior. Where the prior range is much wider "
            "than the posterior interval, the data and not the priors decide the answer.</p>"
        )
        parts.append(
            html_table(
                ["quantity", "scope", "prior median", "prior 95% range", "posterior"],
                rows,
                {2, 3, 4},
            )
        )
    return "".join(parts)


def calibration_section(inputs: ReportInputs) -> str:
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
        + html_table(
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


def comparison_section(inputs: ReportInputs) -> str:
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
        + html_table(
            ["model", "fit folder", "elpd difference", "its SE", "stacking weight", "reliability"],
            rows,
            {2, 3, 4},
        )
    )


def prior_section(inputs: ReportInputs) -> str:
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
            html_table(
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


def sensitivity_appendix(inputs: ReportInputs) -> str:
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
    said = [f"Priors scaled: {block.get('scaled_priors', '')}."]
    if block.get("likelihood"):
        said.append(f"Likelihood scaled: {block['likelihood']}.")
    if block.get("blind_note"):
        said.append(block["blind_note"])
    notes = "".join(f"<p class='note'>{esc(text)}</p>" for text in said)
    return notes + html_table(header, rows, {2, 3})


def convergence_section(inputs: ReportInputs) -> str:
    diag = inputs.summary["diagnostics"]
    thresholds = diag["thresholds"]
    rows = [
        ["max r_hat", number(diag["max_r_hat"], 3), f"<= {thresholds['r_hat_max']}"],
        ["min bulk ESS", number(diag["min_ess_bulk"], 0), f">= {thresholds['ess_min']}"],
        ["min tail ESS", number(diag["min_ess_tail"], 0), f">= {thresholds['ess_min']}"],
        ["divergent transitions", f"{diag['divergences']} of {diag['draws']}",
         f"0 (up to {thresholds['divergence_share_with_warning']:.1%} with a warning)"],
        ["min E-BFMI", number(diag["min_bfmi"], 2), f">= {thresholds['bfmi_min']}"],
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
        + html_table(["diagnostic", "value", "required"], rows, {1})
        + (f"<ul>{items}</ul>" if items else "")
        + ranks
    )


def _difference_sentence(summary: dict, classical: dict) -> str:
    post = study_rows(summary).get(("repeatability_variance", "study"))
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


def results_section(inputs: ReportInputs) -> str:
    summary, classical = inputs.summary, inputs.classical
    prob = summary["prob"]
    kind = summary["interval_description"]
    rows = study_rows(summary)
    plug = classical["classical"]["plug_in"]["study"]
    corr = classical["classical"]["corrected"]["study"]
    table_rows = []
    for key in STUDY_KEYS:
        if (key, "study") not in rows and (key, "population") not in rows:
            continue
        table_rows.append(
            [
                esc(glossary.name(key)),
                interval_text(rows.get((key, "study"))),
                interval_text(rows.get((key, "population"))),
                number(plug.get(key)),
                number(corr.get(key)),
            ]
        )
    rates = []
    wrong = summary.get("wrong_calls") or {}
    if wrong:
        items = [wrong["weak_identification"]] if wrong.get("weak_identification") else []
        items += list(wrong.get("readings", []))
        rates += ["<ul>" + "".join(f"<li>{esc(i)}</li>" for i in items) + "</ul>",
                  _rates_table(summary), reference_table(summary)]  # fmt: skip
    rates.append(threshold_table(summary))
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
        html_table(
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


def classical_section(classical: dict, has_reference: bool) -> str:
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
        + html_table(header, body, set(range(1, len(header))))
    )
    if pairs:
        out += (
            "<p>Cohen's kappa of each pair of appraisers: every call of one paired with every "
            "call of the other on the same part (so it does not depend on how trials are "
            f"numbered), with a {prob:.0%} bootstrap interval over parts.</p>"
            + html_table(["pair", "Cohen's kappa"], pairs, {1})
        )
    return out


def _by_kind(value: float) -> str:
    """Counts as whole numbers, shares and means to three decimals."""
    return str(int(value)) if float(value).is_integer() else f"{value:.3f}"


def checks_section(inputs: ReportInputs) -> str:
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
            number(s["p_value"], 3)
            + (" <span class='flag'>flagged</span>" if s["flagged"] else ""),
        ]
        for s in ppc["statistics"]
    ]
    return (
        f"<p>Method: {esc(ppc['method'])}, {ppc['draws']} replicated studies with the "
        f"same design. p-value: {esc(ppc['p_value'])}; flagged when {esc(ppc['flag_when'])}."
        f" Verdict: {esc(ppc['verdict'])}.</p>"
        + html_table(["statistic", "observed", "replicated mean (95% range)", "p"], rows, {1, 2, 3})
        # the many small panels cannot be read on paper: in print the table above stands
        # for them (it holds the same numbers)
        + figure_tag(
            inputs.figures.get("checks"), "posterior predictive check panels", "screen-only"
        )
        + "<p class='note print-only'>The check's panels are in the report on screen; the "
        "table above holds the same numbers.</p>"
    )


def cautions_section(inputs: ReportInputs) -> str:
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


def provenance_section(inputs: ReportInputs) -> str:
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
    return html_table(["item", "value"], rows)
