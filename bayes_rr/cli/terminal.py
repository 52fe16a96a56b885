"""What the commands print: the study, the fit, the rates, the criteria and the checks,
as tables that never cut a value (at any width, and piped)."""

from __future__ import annotations

from pathlib import Path
from typing import Annotated

import typer
from rich import box
from rich.table import Table

from bayes_rr.cli.shell import _num, err, out
from bayes_rr.core.numbers import decimals_for, interval_text


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
    return f"{share:.0%}\n{100 * wilson['lower']:.0f}-{wilson['upper']:.0%}"


def _kappa_text(row: dict | None) -> str:
    if row is None:
        return "-"
    lower, upper = row.get("lower"), row.get("upper")
    interval = "" if lower is None or upper is None else f"\n{lower:.2f}..{upper:.2f}"
    return f"{row['kappa']:.2f}{interval}"


def _print_classical_by_appraiser(result: dict, prob: float) -> None:
    """The classical agreement figures, one row per appraiser (the report's layout)."""
    from bayes_rr.study.classical import by_appraiser

    rows = by_appraiser(result)
    with_reference = any(item["reference"] for item in rows)
    caption = "own: the appraiser's own trials; alike: share of parts called the same on every one"
    if with_reference:
        caption += (
            "; ref: the reference; match: share of parts matching it on every trial; false "
            "reject/accept: share of calls (as if independent)"
        )
    caption += (
        f". Mean, then its {prob:.0%} interval (Wilson for shares, bootstrap over parts for "
        "kappa; null SEs and z: --json)"
    )
    table = Table(title="Classical agreement, appraiser by appraiser", caption=caption,
                  box=box.SIMPLE_HEAD, padding=(0, 1))  # fmt: skip
    columns = ["appraiser", "own alike", "own kappa"]
    if with_reference:
        columns += ["ref match", "ref kappa", "false reject", "false accept"]
    longest = max((len(item["appraiser"] or "") for item in rows), default=0)
    for name in columns:
        # fixed widths: seven columns fit 80 with "0.20..0.58" whole (rich's own
        # shrinking would break numbers and words instead)
        width = min(max(longest, 9), 12) if name == "appraiser" else (
            11 if "kappa" in name else 6)  # fmt: skip
        table.add_column(name, justify="left" if name == "appraiser" else "right",
                         width=width)  # fmt: skip
    for item in rows:
        cells = [item["appraiser"] or "all together", _share_text(item["own"]),
                 _kappa_text(item["own_kappa"])]  # fmt: skip
        if with_reference:
            cells += [_share_text(item["reference"]), _kappa_text(item["reference_kappa"]),
                      _share_text(item["false_reject_rate"]),
                      _share_text(item["false_accept_rate"])]  # fmt: skip
        table.add_row(*cells)
    out.print(table)
    kappas = {(r["appraiser"], r["other"]): r for r in result["kappa"]
              if r["kind"] == "appraiser_pair"}  # fmt: skip
    if result["appraiser_differences"] or kappas:
        table = Table(
            title="Appraisers two by two",
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
    if summary.get("strategies"):
        print_line(summary)
    if summary.get("wrong_calls"):
        print_rates(summary)
    if summary.get("reference_comparison"):
        print_reference_comparison(summary)
    if any(r["key"].startswith("effective_limit[") for r in summary["estimands"]):
        print_curves(summary)
    if any(r["key"] == "threshold" for r in summary["estimands"]):
        print_thresholds(summary)
    # the verdicts right after the rates, as in the report's answer box
    print_criteria(summary)
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
    """Mean and interval with the digits the interval needs (limits 0.001 apart read
    apart)."""
    if row is None or row["mean"] is None:
        return "-"
    return interval_text(row["mean"], row["lower"], row["upper"])


def _stacked(figure: dict | None, per_million: bool = False) -> str:
    """Mean above its interval (narrow columns that fit 80 terminal columns); a figure
    the same in every draw (calls of a fixed strategy) is printed alone."""
    if figure is None or figure.get("mean") is None:
        return "-"
    mean, lower, upper = (figure[k] for k in ("mean", "lower", "upper"))
    if abs(upper - lower) <= 1e-9 * max(abs(mean), 1.0):
        return f"{mean:g}"
    d = 0 if per_million else decimals_for(lower, upper)
    return f"{mean:.{d}f}\n{lower:.{d}f}-{upper:.{d}f}"


LINE_CAUTION = (
    "These production figures assume that the line's parts of each status resemble the "
    "study's and that the appraisers call on the line as they did in the study; for "
    "characteristics that matter to safety, the customer's requirements, local codes and "
    "licensed practice come first."
)


def print_line(summary: dict) -> None:
    """The line first: escapes and good parts rejected per million, each appraiser on
    production parts, the strategies compared and (when asked for) the decision."""
    from bayes_rr.core import glossary

    prob = summary["prob"]
    kind = "highest density" if summary["interval"] == "hdi" else "equal-tailed"
    rows = {(r["key"], r["level"], r["appraiser"]): r for r in summary["estimands"]
            if r["scope"] == "production"}  # fmt: skip
    out.print(f"On the line (production scope): {summary['production']['description']}.")
    for key in ("escaped_per_million", "rejected_good_per_million", "shipped_bad_share"):
        row = rows.get((key, "system", None))
        if row is not None:
            out.print(f"  {glossary.name(key)}: {_value(row)}")
    table = Table(title=f"One call a part, on the line ({prob:.0%} {kind} intervals)")
    table.add_column("appraiser")
    table.add_column("false reject rate", justify="right")
    table.add_column("false accept rate", justify="right")
    for name in [*summary["design"]["appraiser_names"], None]:
        level = "appraiser" if name else "system"
        cells = [_percent_interval(rows.get((key, level, name)))
                 for key in ("false_reject_rate", "false_accept_rate")]  # fmt: skip
        table.add_row(name or "the line (its shares)", *cells)
    out.print(table)
    strategies = summary["strategies"]
    costs = strategies[0]["probability_cheapest"] is not None
    table = Table(title="Inspection strategies on the line (mean, then interval)")
    # widths that keep each number on its line at 80 columns; headers wrap between words
    table.add_column("strategy", width=14)
    table.add_column("calls a part", justify="right", width=5)
    table.add_column("escaped per million", justify="right", width=11)
    table.add_column("good rejected per million", justify="right", width=13)
    if costs:
        table.add_column("cost per 1,000", justify="right", width=9)
        table.add_column("chance cheapest", justify="right", width=8)
    for row in strategies:
        f = row["figures"]
        calls = f["calls_per_part"]["mean"]
        cells = [f"{calls:.2f}", _stacked(f["escaped_per_million"], per_million=True),
                 _stacked(f["rejected_good_per_million"], per_million=True)]  # fmt: skip
        if costs:
            cells += [_stacked(f["cost_per_1000"]), f"{row['probability_cheapest']:.2f}"]
        table.add_row(row["name"], *cells)
    out.print(table)
    for row in strategies:
        out.print(f"  {row['name']}: {row['description']}")
    if summary.get("decision"):
        out.print(f"decision: {summary['decision']['sentence']}", style="bold")
    if summary.get("guard_band"):
        from bayes_rr.results.production import guard_band_sentence

        out.print(f"guard band: {guard_band_sentence(summary)}")
    out.print(f"caution: {LINE_CAUTION}")


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


def print_thresholds(summary: dict) -> None:
    """Each appraiser's threshold and transition width on the latent scale (latent trait
    model), and the spread of thresholds against the widths."""
    rows = {(r["key"], r["scope"], r["level"], r["appraiser"]): r for r in summary["estimands"]}
    table = Table(title="Where each appraiser rejects, on the latent scale (sds of the parts)")
    table.add_column("appraiser")
    table.add_column("threshold", justify="right")
    table.add_column("transition width", justify="right")
    for name in summary["design"]["appraiser_names"]:
        table.add_row(
            name,
            _value(rows.get(("threshold", "study", "appraiser", name))),
            _value(rows.get(("transition_width", "study", "appraiser", name))),
        )
    out.print(table)
    spread = rows.get(("threshold_spread", "study", "system", None))
    if spread is not None:
        out.print(f"spread of the thresholds over these appraisers: {_value(spread)}")
    ratio = rows.get(("spread_to_width", "population", "system", None))
    if ratio is not None:
        out.print(
            "population: spread of thresholds over the typical transition width "
            f"{_value(ratio)} (how far apart appraisers place their thresholds, in zones of "
            "unreliable calls)"
        )


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


def print_reference_comparison(summary: dict) -> None:
    """The rates against the fallible reference beside those against the reference
    taken as exact, and the parts whose reference the calls doubt."""
    block = summary["reference_comparison"]
    table = Table(title="Wrong-call rates: reference fallible vs taken as exact")
    for column in ("rate", "appraiser", "fallible", "exact", "shift"):
        table.add_column(column, justify="left" if column in ("rate", "appraiser") else "right")
    for row in block["rows"]:
        who = row["appraiser"] or ("a new appraiser" if row["scope"] == "population"
                                   else "all appraisers")  # fmt: skip
        shift = "-" if row["shift"] is None else f"{100 * row['shift']:+.1f} pt"
        rate = row["key"].replace("_rate", "").replace("_", " ")
        fallible, exact = _stacked_percent(row["fallible"]), _stacked_percent(row["exact"])
        table.add_row(rate, who, fallible, exact, shift)
    out.print(table)
    out.print("shift: fallible minus exact, in percentage points")
    for sentence in block["sentences"]:
        out.print(f"reference: {sentence}")


def _stacked_percent(figure: dict | None) -> str:
    if figure is None:
        return "-"
    return f"{figure['mean']:.1%}\n{figure['lower']:.1%}-{figure['upper']:.1%}"


def _short_number(x: float) -> str:
    """Counts as integers, other values to three significant digits."""
    return str(int(x)) if float(x).is_integer() else f"{x:.3g}"


def print_checks(document: dict) -> None:
    ppc = document["posterior_predictive"]
    table = Table(
        title=f"Posterior predictive check ({ppc['draws']} replicated studies)",
        caption=f"* flagged: {ppc['flag_when']}",
    )
    # the statistic said in words (its key is in checks.json), wrapped between words
    table.add_column("statistic", min_width=24)
    table.add_column("observed", no_wrap=True)
    table.add_column("replicated mean (95%)", no_wrap=True)
    table.add_column("p", no_wrap=True)
    for stat in ppc["statistics"]:
        table.add_row(
            stat.get("description") or stat["name"],
            _short_number(stat["observed"]),
            f"{_short_number(stat['replicated_mean'])} ({_short_number(stat['replicated_lower'])}"
            f"-{_short_number(stat['replicated_upper'])})",
            f"{stat['p_value']:.3f}" + (" *" if stat["flagged"] else ""),
        )
    out.print(table)
    prior = document.get("prior_predictive") or []
    if prior:
        from bayes_rr.checks.predictive import prior_cells

        before = Table(
            title="Prior predictive check: what the priors alone imply for this design",
            caption="prior draws before the calls are seen; a prior range much wider than "
            "the posterior interval means the data, not the priors, decide",
        )
        for name in ("quantity", "scope", "prior median", "prior 95% range"):
            before.add_column(name, justify="left" if name in ("quantity", "scope") else "right")
        for row in prior:
            before.add_row(*prior_cells(row))
        out.print(before)
    flagged = ppc["flagged"]
    out.print(ppc["verdict"][0].upper() + ppc["verdict"][1:] + ".")
    if document.get("dependence"):
        out.print(f"latent classes: {document['dependence']}.")
    if flagged:
        words = {stat["name"]: stat.get("description") or stat["name"]
                 for stat in ppc["statistics"]}  # fmt: skip
        out.print(f"flagged: {'; '.join(words.get(name, name) for name in flagged)}")
    if not document["converged"]:
        out.print("The fit did not pass the convergence gate: these checks are of a posterior "
                  "that must not be used.", style="bold red")  # fmt: skip


FitDir = Annotated[Path, typer.Argument(help="A folder written by 'bayes-rr fit'.")]


def _print_failures(failures: list[dict]) -> None:
    for failure in failures[:10]:
        given = ", ".join(f"{k} {v}" for k, v in failure["input"].items())
        err.print(f"failed: {failure['task']} ({given}): {failure['error']}", soft_wrap=True)
    if len(failures) > 10:
        err.print(f"... and {len(failures) - 10} more (see the run folder's tasks/*.failed.json)")
