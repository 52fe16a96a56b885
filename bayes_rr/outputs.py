"""Writing a fit to a folder, and reading it back for the later steps.

The folder is assembled under a temporary name next to the target and moved
into place at the end, so an interrupted run never leaves a folder that looks
complete. Files:

* ``posterior.nc``: ArviZ InferenceData (posterior, sample_stats,
  log_likelihood per cell, observed_data, constant_data, estimands);
* ``summary.json`` / ``summary.csv``: the posterior summaries;
* ``run.json``: provenance (data and spec hashes, spec text, versions, seed,
  sampler settings, timings);
* ``classical.json``: the classical statistics of the same data;
* ``calls.csv``: the validated calls (1 = reject) the model was fitted to, so the
  later steps rebuild exactly the same study (its hash is checked on loading).
"""

from __future__ import annotations

import json
import os
import shutil
import tempfile
from dataclasses import asdict, dataclass
from pathlib import Path

import pandas as pd

from bayes_rr.classical import classical_statistics
from bayes_rr.errors import OutputError
from bayes_rr.jsonio import dumps, jsonable
from bayes_rr.sampling import R_HAT_MAX

SUMMARY_COLUMNS = (
    "key",
    "scope",
    "level",
    "part",
    "appraiser",
    "mean",
    "median",
    "sd",
    "lower",
    "upper",
    "r_hat",
    "ess_bulk",
    "ess_tail",
    "note",
)
FILES = ("posterior.nc", "summary.json", "summary.csv", "run.json", "classical.json", "calls.csv")


def check_output_dir(out_dir: Path, overwrite: bool) -> None:
    """Refuse an existing non-empty folder unless ``overwrite`` (checked before sampling)."""
    out_dir = Path(out_dir)
    if out_dir.exists() and not out_dir.is_dir():
        raise OutputError(f"--out {out_dir}: exists and is not a folder; choose another path")
    if out_dir.is_dir() and any(out_dir.iterdir()) and not overwrite:
        raise OutputError(
            f"--out {out_dir}: folder exists and is not empty; choose a new folder or "
            "pass --overwrite to replace it"
        )


def summary_document(result) -> dict:
    """The content of summary.json."""
    from bayes_rr.fit import plain_readings

    rows = [jsonable(asdict(r)) for r in result.estimand_rows]
    diagnostics = result.diagnostics.as_dict()
    return {
        "prob": result.prob,
        "interval": result.interval,
        "interval_description": (
            "highest density interval" if result.interval == "hdi" else "equal-tailed interval"
        ),
        "model": {
            "name": result.spec.name,
            "family": result.spec.family,
            "description": result.spec.description,
            "spec_sha256": result.spec.sha256,
            "parameterizations": result.provenance["parameterizations"],
        },
        "data_sha256": result.study.sha256,
        "design": result.study.design(),
        "diagnostics": diagnostics,
        "use_results": diagnostics["ok"],
        "status": (
            "converged"
            if diagnostics["ok"]
            else "NOT CONVERGED: the numbers below are not to be used"
        ),
        "readings": plain_readings(rows, result.prob) if diagnostics["ok"] else [],
        "estimands": rows,
        "parameters": [jsonable(asdict(r)) for r in result.parameter_rows],
        "r_hat_threshold": R_HAT_MAX,
    }


def write_fit(result, out_dir: Path, *, overwrite: bool = False) -> Path:
    """Write every output of a fit into ``out_dir`` (atomically: all or nothing)."""
    out_dir = Path(out_dir)
    check_output_dir(out_dir, overwrite)
    out_dir.parent.mkdir(parents=True, exist_ok=True)
    tmp = Path(tempfile.mkdtemp(prefix=f".{out_dir.name}.incomplete-", dir=out_dir.parent))
    try:
        idata = result.idata
        groups = {"estimands": result.estimands}
        full = idata.copy()
        full.add_groups(groups, warn_on_custom_groups=False)
        full.to_netcdf(str(tmp / "posterior.nc"), engine="h5netcdf")
        summary = summary_document(result)
        (tmp / "summary.json").write_text(dumps(summary) + "\n", encoding="utf-8")
        frame = pd.DataFrame([asdict(r) for r in result.estimand_rows], columns=SUMMARY_COLUMNS)
        frame.insert(0, "use_results", summary["use_results"])
        frame.to_csv(tmp / "summary.csv", index=False)
        (tmp / "run.json").write_text(dumps(result.provenance) + "\n", encoding="utf-8")
        classical = classical_statistics(result.study, result.prob).as_dict()
        (tmp / "classical.json").write_text(dumps(classical) + "\n", encoding="utf-8")
        calls_table(result.study).to_csv(tmp / "calls.csv", index=False)
        _move_into_place(tmp, out_dir)
    except BaseException:
        shutil.rmtree(tmp, ignore_errors=True)
        raise
    return out_dir


def calls_table(study) -> pd.DataFrame:
    """The study's calls as a tidy table (labels 0/1, reference 0/1 where known)."""
    table = study.calls.copy()
    if study.reference is not None:
        table["reference"] = table["part"].map(study.reference).astype(int)
    return table


def _move_into_place(tmp: Path, out_dir: Path) -> None:
    if out_dir.is_dir():
        old = Path(tempfile.mkdtemp(prefix=f".{out_dir.name}.old-", dir=out_dir.parent))
        os.replace(out_dir, old / "previous")
        os.replace(tmp, out_dir)
        shutil.rmtree(old, ignore_errors=True)
    else:
        os.replace(tmp, out_dir)


@dataclass(frozen=True)
class LoadedFit:
    """A fit folder read back: the study, the spec, the draws and the JSON documents."""

    folder: Path
    study: object
    spec: object
    idata: object
    summary: dict
    run: dict
    classical: dict


def _read_json(folder: Path, name: str) -> dict:
    path = folder / name
    if not path.is_file():
        raise OutputError(
            f"{folder}: no {name}; expected a folder written by 'bayes-rr fit' "
            f"(files {list(FILES)})"
        )
    try:
        return json.loads(path.read_text(encoding="utf-8"))
    except json.JSONDecodeError as exc:
        raise OutputError(f"{path}: not valid JSON ({exc.msg} at line {exc.lineno})") from None


def load_fit(folder: str | Path, *, with_draws: bool = True) -> LoadedFit:
    """Read a fit folder and check that its data are the data the fit recorded."""
    from bayes_rr.data import study_from_frame
    from bayes_rr.spec import parse_spec

    folder = Path(folder)
    if not folder.is_dir():
        raise OutputError(f"{folder}: not a folder; give the --out folder of 'bayes-rr fit'")
    summary = _read_json(folder, "summary.json")
    run = _read_json(folder, "run.json")
    classical = _read_json(folder, "classical.json")
    calls_path = folder / "calls.csv"
    if not calls_path.is_file():
        raise OutputError(f"{folder}: no calls.csv; the folder is incomplete")
    frame = pd.read_csv(calls_path, dtype=str, keep_default_na=False)
    study = study_from_frame(frame, source=run.get("data_source", "calls.csv"))
    if study.sha256 != run.get("data_sha256"):
        raise OutputError(
            f"{folder}: calls.csv does not match the data hash recorded in run.json "
            f"({study.sha256[:12]} vs {str(run.get('data_sha256'))[:12]}); the folder was changed"
        )
    spec = parse_spec(run["spec_text"], run.get("spec_source", "spec"))
    idata = None
    if with_draws:
        import arviz as az

        nc = folder / "posterior.nc"
        if not nc.is_file():
            raise OutputError(f"{folder}: no posterior.nc; the folder is incomplete")
        idata = az.from_netcdf(str(nc), engine="h5netcdf")
    return LoadedFit(folder, study, spec, idata, summary, run, classical)
