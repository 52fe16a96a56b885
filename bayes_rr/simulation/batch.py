"""Fitting a batch of study files the same way (one fit folder each, on Dask) and one
table across them. A file that cannot be read or fitted is reported with its error
while the rest are fitted."""

from __future__ import annotations

import glob
from dataclasses import dataclass
from pathlib import Path

from bayes_rr.core import DEFAULT_PROB
from bayes_rr.core.errors import DataError
from bayes_rr.simulation.runner import Task, run_folder, run_tasks
from bayes_rr.simulation.seeds import signature

STUDY_SUFFIXES = (".csv", ".xlsx")
TABLE_FILE = "batch.csv"
REPORT_FILE = "batch.html"
FITS_DIR = "fits"
TABLE_KEYS = (
    ("study", "study", "call_rate"),
    ("study", "study", "repeatability_variance"),
    ("study", "study", "reproducibility_variance"),
    ("study", "study", "reproducibility_share"),
    ("study", "system", "false_reject_rate"),
    ("study", "system", "false_accept_rate"),
)
"""(scope, level, key) of the results tabulated across the studies (those each has)."""


@dataclass(frozen=True)
class BatchRequest:
    """The files, the model (None: chosen per file as ``fit`` does) and the settings."""

    files: tuple[Path, ...]
    model: str | None = None
    seed: int = 20240601
    draws: int | None = None
    prob: float = DEFAULT_PROB


def find_study_files(pattern: str | Path) -> tuple[Path, ...]:
    """The study files of a folder (its .csv and .xlsx files) or of a glob pattern."""
    path = Path(pattern)
    if path.is_dir():
        found = [p for p in path.iterdir() if p.suffix.lower() in STUDY_SUFFIXES]
    else:
        found = [Path(p) for p in glob.glob(str(pattern))]
        found = [p for p in found if p.is_file() and p.suffix.lower() in STUDY_SUFFIXES]
    if not found:
        raise DataError(
            f"{pattern}: no study files (.csv or .xlsx) found; give a folder of study files "
            "or a quoted pattern such as 'stations/*.csv'"
        )
    return tuple(sorted(found))


def task_ids(files: tuple[Path, ...]) -> list[str]:
    """A fit folder name per file, safe and distinct: the stem with anything but letters,
    digits, ``-`` and ``_`` replaced, no leading dot (so never ``.`` or ``..``), and a number
    added when two files would share a name (compared without case, as some file systems
    do)."""
    ids: list[str] = []
    taken: set[str] = set()
    for path in files:
        stem = "".join(c if c.isalnum() or c in "-_." else "_" for c in path.stem)
        stem = ("_" + stem.lstrip(".")) if stem.startswith(".") else stem
        stem = stem or "study"
        candidate, number = stem, 1
        while candidate.casefold() in taken:
            number += 1
            candidate = f"{stem}-{number}"
        taken.add(candidate.casefold())
        ids.append(candidate)
    return ids


def batch_task(payload: dict) -> dict:
    """Read, fit and write one study; returns its row of the table."""
    from bayes_rr.families import default_model
    from bayes_rr.inference.sampling import SamplerSettings
    from bayes_rr.io.fit_folder import summary_document, write_fit
    from bayes_rr.priors.spec import load_spec
    from bayes_rr.study.classical import classical_statistics
    from bayes_rr.study.data import read_study
    from bayes_rr.workflow.fit import fit_study

    path = Path(payload["file"])
    study = read_study(path)
    model = payload["model"] or default_model(study)[0]
    spec = load_spec(model)
    settings = SamplerSettings.from_spec(spec, seed=payload["seed"], draws=payload["draws"],
                                         cores=1)  # fmt: skip
    prob = payload["prob"]
    result = fit_study(study, spec, settings, prob=prob, two_stage=payload["draws"] is None)
    folder = Path(payload["fit_dir"])
    write_fit(result, folder, overwrite=True, classical=classical_statistics(study, prob).as_dict(),
              protected=(path,))  # fmt: skip
    summary = summary_document(result)
    row = {
        "file": str(path),
        "fit_folder": str(folder),
        "model": spec.name,
        "parts": len(study.parts),
        "appraisers": len(study.appraisers),
        "calls": int(study.cells["n"].sum()),
        "converged": bool(result.diagnostics.ok),
    }
    rows = {(r["scope"], r["level"], r["key"]): r for r in summary["estimands"]
            if r.get("part") is None and r.get("appraiser") is None}  # fmt: skip
    for scope, level, key in TABLE_KEYS:
        found = rows.get((scope, level, key))
        if found is None or not result.diagnostics.ok:
            continue
        row[f"{key}_mean"] = found["mean"]
        row[f"{key}_lower"] = found["lower"]
        row[f"{key}_upper"] = found["upper"]
    return row


def run_batch(
    request: BatchRequest, out: str | Path, *, workers: int | None = None,
    scheduler: str | None = None, progress: bool = True, client=None,
) -> dict:  # fmt: skip
    """Fit every file on Dask; write a fit folder per file, ``batch.csv`` and
    ``batch.html`` into ``out``; return the table's rows and the failures."""
    import pandas as pd

    from bayes_rr import __version__
    from bayes_rr.core.jsonio import dumps, write_text_atomic
    from bayes_rr.io.fit_folder import GENERATOR

    out = Path(out)
    for path in request.files:
        if out.resolve() in path.resolve().parents:
            raise DataError(f"--out {out}: holds the study file {path}; give a new folder")
    if request.model is not None:
        from bayes_rr.priors.spec import load_spec

        load_spec(request.model)  # a bad model name is reported before any work
    ids = task_ids(request.files)
    run_settings = {
        "command": "batch", "files": [str(p.resolve()) for p in request.files],
        "model": request.model, "seed": request.seed, "draws": request.draws,
        "prob": request.prob,
    }  # fmt: skip
    with run_folder(out, "batch", signature(run_settings), client=client,
                    scheduler=scheduler) as client:  # fmt: skip
        (out / FITS_DIR).mkdir(exist_ok=True)
        tasks = []
        for task_id, path in zip(ids, request.files, strict=True):
            payload = {"file": str(path), "model": request.model, "seed": request.seed,
                       "draws": request.draws, "prob": request.prob,
                       "fit_dir": str(out / FITS_DIR / task_id)}  # fmt: skip
            tasks.append(Task(task_id, payload, {"file": str(path)}))
        outcome = run_tasks(batch_task, tasks, out, client=client, workers=workers,
                            scheduler=scheduler, progress=progress, what="studies")  # fmt: skip
        rows = [outcome.results[i] for i in ids if i in outcome.results]
        failures = [outcome.failures[i] for i in ids if i in outcome.failures]
        table = pd.DataFrame(rows)
        write_text_atomic(out / TABLE_FILE, table.to_csv(index=False))
        html = batch_html(table, failures, f"{GENERATOR} {__version__}", request.prob)
        write_text_atomic(out / REPORT_FILE, html)
        document = {"rows": rows, "failures": failures, "resumed_tasks": outcome.resumed}
        write_text_atomic(out / "batch.json", dumps({"generator": f"{GENERATOR} {__version__}",
                                                      **document}) + "\n")  # fmt: skip
        return document


def batch_html(table, failures: list[dict], generator: str, prob: float) -> str:
    """A one-page report: the table across the studies and the files that failed."""
    from html import escape

    from bayes_rr.report.blocks import CAUTIONS

    head = (f'<!doctype html><html lang="en"><head><meta charset="utf-8">'
            f'<meta name="generator" content="{escape(generator)}">'
            "<title>Batch of pass/fail studies</title><style>body{font-family:sans-serif;"
            "margin:2em;max-width:80em}table{border-collapse:collapse;font-size:90%}"
            "td,th{border:1px solid #bbb;padding:3px 6px;text-align:right}"
            "th{background:#eee}td:first-child{text-align:left}</style></head><body>")  # fmt: skip
    parts = [head, "<h1>Batch of pass/fail studies</h1>",
             f"<p>{len(table)} studies fitted, {len(failures)} could not be. Each result: "
             f"posterior mean and its {prob:.0%} interval; empty where the model gives no "
             "such result or the fit did not pass the convergence gate (its fit folder says "
             "why).</p>"]  # fmt: skip
    if len(table):
        parts.append("<table><tr><th>file</th><th>model</th><th>parts</th><th>appraisers</th>"
                     "<th>calls</th><th>converged</th>")  # fmt: skip
        keys = [k for _, _, k in TABLE_KEYS if f"{k}_mean" in table]
        parts += [f"<th>{escape(k.replace('_', ' '))}</th>" for k in keys]
        parts.append("</tr>")
        for _, row in table.iterrows():
            cells = [escape(Path(row["file"]).name), escape(row["model"]), str(row["parts"]),
                     str(row["appraisers"]), str(row["calls"]),
                     "yes" if row["converged"] else "no"]  # fmt: skip
            for k in keys:
                mean = row.get(f"{k}_mean")
                if mean is None or mean != mean:
                    cells.append("")
                    continue
                low, high = row[f"{k}_lower"], row[f"{k}_upper"]
                cells.append(f"{mean:.3f} ({low:.3f} to {high:.3f})")
            parts.append("<tr>" + "".join(f"<td>{c}</td>" for c in cells) + "</tr>")
        parts.append("</table>")
    if failures:
        parts.append("<h2>Files that could not be fitted</h2><ul>")
        for failure in failures:
            parts.append(f"<li>{escape(failure['input'].get('file', failure['task']))}: "
                         f"{escape(failure['error'])}</li>")  # fmt: skip
        parts.append("</ul>")
    parts.append("<h2>Cautions</h2><ul>" + "".join(f"<li>{escape(c)}</li>" for c in CAUTIONS)
                 + "</ul></body></html>")  # fmt: skip
    return "\n".join(parts)
