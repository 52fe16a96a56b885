"""The steps after a fit, as library functions: check, report, compare.

Each reads a fit folder (``bayes_rr.io.fit_folder.load_fit``), calls the module that
owns the step, and writes its machine-readable twin into the folder.
"""

from __future__ import annotations

import contextlib
from pathlib import Path

import numpy as np

from bayes_rr.checks.predictive import (
    DEFAULT_CHECK_DRAWS,
    compare_fits,
    dependence_sentence,
    posterior_predictive_check,
    prior_predictive,
    thin,
)
from bayes_rr.core.errors import OutputError
from bayes_rr.core.jsonio import dumps, write_text_atomic
from bayes_rr.families import family_of
from bayes_rr.io.fit_folder import (
    AGAIN,
    FILES,
    GENERATOR,
    MALFORMED,
    LoadedFit,
    check_output_file,
    load_fit,
)
from bayes_rr.io.output_safety import file_lock
from bayes_rr.results.readings import HYPER_PARAMETERS

CHECKS_FILE = "checks.json"


def _malformed(folder: str | Path, exc: Exception) -> OutputError:
    return OutputError(
        f"{folder}: a file of the fit folder lacks what this step needs "
        f"({type(exc).__name__}: {exc}); {AGAIN}"
    )


REPORT_FILE = "report.html"


def check_fit(folder: str | Path, *, draws: int = DEFAULT_CHECK_DRAWS, seed: int = 0) -> dict:
    """Posterior and prior predictive checks of a fit; writes ``checks.json``."""
    fit = load_fit(folder)
    try:
        ppc = posterior_predictive_check(fit.idata.posterior, fit.spec, fit.study, draws=draws,
                                         seed=seed)  # fmt: skip
    except MALFORMED as exc:
        raise _malformed(folder, exc) from None
    prior = prior_predictive(fit.spec, fit.study, draws=draws, seed=seed)
    document = {
        "posterior_predictive": ppc.as_dict(),
        "prior_predictive": prior,
        "dependence": dependence_sentence(ppc, fit.spec),
        "converged": fit.summary["diagnostics"]["ok"],
    }
    write_text_atomic(Path(folder) / CHECKS_FILE, dumps(document) + "\n")
    return document


def load_checks(folder: str | Path) -> dict | None:
    """The checks of a fit folder, or None when they are missing or unreadable (the
    report then runs them again)."""
    import json

    path = Path(folder) / CHECKS_FILE
    if not path.is_file():
        return None
    try:
        document = json.loads(path.read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return None
    ok = isinstance(document, dict) and isinstance(document.get("posterior_predictive"), dict)
    return document if ok else None


def _figures(fit: LoadedFit, checks: dict | None) -> dict:
    from bayes_rr.report import plots

    summary = fit.summary
    prob = summary["prob"]
    study = fit.study
    cells = study.cells
    n = np.zeros((len(study.parts), len(study.appraisers)), dtype=int)
    s = np.zeros_like(n)
    n[cells["part_index"], cells["appraiser_index"]] = cells["n"]
    s[cells["part_index"], cells["appraiser_index"]] = cells["s"]
    reference = None if study.reference is None else study.reference.to_numpy()
    figures = {
        "call_grid": plots.call_grid(list(study.parts), list(study.appraisers), n, s, reference)
    }
    posterior = fit.idata.posterior
    hyper = {v: posterior[v].to_numpy() for v in HYPER_PARAMETERS if v in posterior
             and posterior[v].ndim == 2}  # fmt: skip
    figures["rank_plots"] = plots.rank_plots(hyper)
    if not summary["diagnostics"]["ok"]:
        return figures
    if family_of(fit.spec).info.measured_curve:
        figures["call_curves"] = _call_curve_figure(fit, n, s, prob)
    estimands = fit.idata["estimands"]
    draws = {
        key: estimands[f"study__study__{key}"].to_numpy().ravel()
        for key, _ in plots.STUDY_PANELS
        if f"study__study__{key}" in estimands
    }
    rows = {r["key"]: r for r in summary["estimands"]
            if r["level"] == "study" and r["scope"] == "study"}  # fmt: skip
    classical = {
        "plug_in": fit.classical["classical"]["plug_in"]["study"],
        "corrected": fit.classical["classical"]["corrected"]["study"],
    }
    figures["study_densities"] = plots.study_level_densities(draws, rows, classical, prob=prob)
    figures["per_part"] = plots.per_part_intervals(summary["estimands"], prob=prob)
    figures["appraisers"] = plots.appraiser_call_rates(summary["estimands"], prob=prob)
    compared = summary.get("comparisons") or {}
    figures["differences"] = plots.appraiser_differences(compared.get("pairs", []), prob=prob)
    figures["strategies"] = plots.strategy_crosses(summary.get("strategies") or [], prob=prob)
    if checks is not None:
        figures["checks"] = plots.predictive_checks(checks["posterior_predictive"]["statistics"])
    return figures


def _call_curve_figure(fit: LoadedFit, n: np.ndarray, s: np.ndarray, prob: float):
    """Curve bands on a grid of reference values from up to 400 posterior draws."""
    from bayes_rr.families.call_curve import curve_scale_draws
    from bayes_rr.families.curves import curve_probabilities
    from bayes_rr.families.layout import curve_design
    from bayes_rr.report import plots

    study = fit.study
    design = curve_design(study, fit.spec.name)
    signs = np.array([sign for _, _, sign in design["sides"]])
    posterior = thin(fit.idata.posterior, 400, seed=0)
    limit = posterior["effective_limit"].to_numpy()[0]
    width = curve_scale_draws(posterior)
    x = design["x"]
    pad = 0.05 * (x.max() - x.min())
    grid = np.linspace(x.min() - pad, x.max() + pad, 200)
    p = curve_probabilities(limit, width, grid, signs, fit.spec.link)  # (S, G, J)
    low, mid, high = np.quantile(p, [(1 - prob) / 2, 0.5, (1 + prob) / 2], axis=0)
    with np.errstate(invalid="ignore", divide="ignore"):
        shares = np.where(n > 0, s / np.maximum(n, 1), np.nan)
    limits = [(name, value) for name, value, _ in design["sides"]]
    return plots.call_curves(grid, mid.T, low.T, high.T, x, shares, list(study.appraisers),
                             limits, prob)  # fmt: skip


def report_fit(
    folder: str | Path,
    out: str | Path | None = None,
    *,
    title: str | None = None,
    site: str | None = None,
    notes: str | None = None,
    run_checks: bool = True,
    overwrite: bool = False,
    criteria: str | Path | None = None,
    compare: list[str | Path] | None = None,
    calibration: str | Path | None = None,
    folder_label: str | None = None,
) -> Path:
    """Write the HTML report of a fit (running the checks first when they are missing).

    The report file must end in .html; an existing file is replaced only when the
    toolkit wrote it, or with ``overwrite``; a file of the fit folder never.
    ``compare``: other fit folders of the same data, compared with this one by
    PSIS-LOO in the report. ``calibration``: a ``bayes-rr calibrate`` folder whose
    results go into the report as evidence that the intervals are calibrated.
    ``folder_label``: how the report names the fit folder (default: its path).
    """
    from bayes_rr.report.html import ReportInputs, render_report

    folder = Path(folder)
    target = Path(out) if out else folder / REPORT_FILE
    check_output_file(
        target,
        suffixes=(".html", ".htm"),
        overwrite=overwrite,
        protected=tuple(folder / name for name in (*FILES, CHECKS_FILE)),
    )
    with file_lock(target):
        wanted = ()
        if criteria is not None:
            from bayes_rr.results.decisions import check_keys, load_criteria

            wanted = load_criteria(criteria)
            check_keys(wanted)
        comparison = compare_folders([folder, *compare]) if compare else None
        calibration_document = _read_calibration(calibration) if calibration else None
        fit = load_fit(folder)
        summary = fit.summary
        if wanted and summary["diagnostics"]["ok"]:
            from bayes_rr.results.decisions import evaluate_criteria

            summary = {**summary, "criteria": evaluate_criteria(wanted, fit.idata["estimands"])}
        checks = load_checks(folder)
        if checks is None and run_checks:
            checks = check_fit(folder)
        from bayes_rr.report.plots import literal_text

        # Names from the data are drawn literally (a "$" is no mathematics), and the
        # figures are drawn when the report embeds them: both inside the block.
        with literal_text():
            try:
                inputs = ReportInputs(
                    summary=summary,
                    run=fit.run,
                    classical=fit.classical,
                    checks=checks,
                    figures=_figures(fit, checks),
                    title=title,
                    site=site,
                    notes=notes,
                    folder=str(folder) if folder_label is None else folder_label,
                    comparison=comparison,
                    calibration=calibration_document,
                )
                html = render_report(inputs)
            except MALFORMED as exc:
                raise _malformed(folder, exc) from None
        write_text_atomic(target, html)
        return target


def _read_calibration(folder: str | Path) -> dict:
    """The calibration.json of a calibration run folder (refused when missing or not one)."""
    import json

    from bayes_rr.io.fit_folder import CALIBRATION_FILE

    path = Path(folder) / CALIBRATION_FILE
    try:
        document = json.loads(path.read_text(encoding="utf-8"))
        missing = {"parameters", "design", "verdict"} - set(document)
        if missing:
            raise KeyError(sorted(missing))
    except (OSError, ValueError, KeyError, TypeError):
        raise OutputError(
            f"--calibration {folder}: no readable {CALIBRATION_FILE} there; give the --out "
            "folder of a finished 'bayes-rr calibrate' run"
        ) from None
    return document


def compare_folders(
    folders: list[str | Path], out: str | Path | None = None, *, overwrite: bool = False
) -> dict:
    """LOO comparison of several fits of the same data; optionally written as JSON (an
    existing file only when the toolkit wrote it, or with ``overwrite``)."""
    if out:
        protected = tuple(Path(f) / name for f in folders for name in (*FILES, CHECKS_FILE))
        check_output_file(Path(out), suffixes=(".json",), overwrite=overwrite,
                          protected=protected)  # fmt: skip
    with file_lock(Path(out)) if out else contextlib.nullcontext():
        return _compare(folders, out)


def _compare(folders: list[str | Path], out: str | Path | None) -> dict:
    fits = [load_fit(f) for f in folders]
    names = []
    for fit in fits:
        name = fit.spec.name
        while name in names:
            name += "'"
        names.append(name)
    result = compare_fits(
        {n: f.idata for n, f in zip(names, fits, strict=True)},
        {n: f.run["data_sha256"] for n, f in zip(names, fits, strict=True)},
    )
    result["folders"] = {n: str(f.folder) for n, f in zip(names, fits, strict=True)}
    if out:
        from bayes_rr import __version__

        document = {"generator": f"{GENERATOR} {__version__}", **result}
        write_text_atomic(Path(out), dumps(document) + "\n")
    return result


def write_prior(
    statements: str | Path, out: str | Path, *, overwrite: bool = False
) -> tuple[object, list[dict]]:
    """Priors from a statements file (see :mod:`bayes_rr.priors.elicit`), written as a spec file
    (an existing file only when the toolkit wrote it, or with ``overwrite``)."""
    from bayes_rr import __version__
    from bayes_rr.priors.elicit import load_statements

    check_output_file(Path(out), suffixes=(".toml",), overwrite=overwrite,
                      protected=(Path(statements),))  # fmt: skip
    with file_lock(Path(out)):
        spec, rows = load_statements(statements)
        text = f"# generator: {GENERATOR} {__version__}\n" + spec.text
        write_text_atomic(Path(out), text)
    return spec, rows
