"""What a notebook shows of a fit: the report's answer in brief, as HTML (every user
string escaped)."""

from __future__ import annotations


def answer_table(fit) -> str:
    """The answer box of the report for ``fit``, under a line naming the model and the
    study."""
    from bayes_rr.report.answer import answer_box
    from bayes_rr.report.blocks import ReportInputs, esc

    inputs = ReportInputs(summary=fit.document, run=fit.run, classical=fit.classical, checks=None)
    design = fit.document["design"]
    state = "converged" if fit.converged else "NOT CONVERGED: the results are not to be used"
    head = (
        f"<p><b>Model {esc(fit.spec.name)}</b> on {esc(design['source'])}: "
        f"{esc(design['parts'])} parts, {esc(design['appraisers'])} appraisers, "
        f"{esc(design['calls'])} calls; {esc(state)}.</p>"
    )
    return f"<div class='bayes-rr-fit'>{head}{answer_box(inputs)}</div>"
