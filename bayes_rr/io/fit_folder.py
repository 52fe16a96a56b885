"""Writing a fit to a folder, and reading it back for the later steps.

The folder is assembled under a temporary name next to the target and moved
into place at the end, so an interrupted run never leaves a folder that looks
complete. Files:

* ``posterior.nc``: ArviZ InferenceData (posterior, sample_stats,
  log_likelihood per cell, observed_data, constant_data, estimands);
* ``summary.json`` / ``summary.csv``: the posterior summaries;
* ``run.json``: provenance (data and spec hashes, spec text, versions, seed,
  sampler settings, timings);
* ``model.toml``: the model spec as fitted, priors included (an earlier study carried
  in as prior among them), reusable with ``bayes-rr fit --model``;
* ``classical.json``: the classical statistics of the same data;
* ``calls.csv``: the validated calls (1 = reject) the model was fitted to, so the
  later steps rebuild exactly the same study (its hash is checked on loading);
* ``.bayes-rr-fit``: the marker that says the toolkit wrote the folder (only such a
  folder is ever replaced, with ``--overwrite``).

Nothing the toolkit did not write is replaced: see :func:`check_output_dir` and
:func:`check_output_file`, which every command calls before any work.
"""

from __future__ import annotations

import json
import os
import shutil
import tempfile
from dataclasses import asdict, dataclass
from pathlib import Path

import pandas as pd

from bayes_rr.core.errors import OutputError
from bayes_rr.core.jsonio import dumps, jsonable
from bayes_rr.inference.sampling import R_HAT_MAX
from bayes_rr.io.output_safety import (  # noqa: F401 (re-exported: the io room's face)
    FILES,
    GENERATOR,
    MARKER,
    _fail,
    _pid_alive,
    _umask,
    check_location,
    check_output_dir,
    check_output_file,
    claim_owner,
)
from bayes_rr.study.classical import classical_statistics

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
CALIBRATION_FILE = "calibration.json"
"""The calibration evidence a ``calibrate`` run folder holds (a report can quote it)."""


def summary_document(result) -> dict:
    """The content of summary.json."""
    from bayes_rr import __version__
    from bayes_rr.core import glossary
    from bayes_rr.results.readings import plain_readings

    rows = [jsonable(asdict(r)) for r in result.estimand_rows]
    diagnostics = result.diagnostics.as_dict()
    limitations = list(result.limitations)
    checked = getattr(result, "preflight", None)
    return {
        "generator": f"{GENERATOR} {__version__}",
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
            "sampled_form": result.provenance.get("sampled_form", "as stated"),
            "integration_rule_check": result.provenance.get("integration_rule_check"),
            "sampled_again": result.provenance.get("sampled_again", []),
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
        "readings": plain_readings(rows, result.prob, limitations) if diagnostics["ok"] else [],
        "wrong_calls": result.wrong_calls,
        "criteria": list(result.criteria) if diagnostics["ok"] else [],
        "comparisons": result.comparisons,
        "prior_sensitivity": result.prior_sensitivity,
        "prior_from": result.prior_from,
        "reference_comparison": jsonable(getattr(result, "reference_comparison", None)),
        **_production_blocks(result, diagnostics["ok"]),
        "limitations": [lim.as_dict() for lim in limitations],
        "ignored_options": list(getattr(checked, "ignored_options", ())),
        "data_warnings": list(getattr(checked, "warnings", ())),
        "estimands": rows,
        "parameters": [jsonable(asdict(r)) for r in result.parameter_rows],
        "r_hat_threshold": R_HAT_MAX,
        "glossary": glossary.as_dict(),
    }


def _production_blocks(result, ok: bool) -> dict:
    """``production`` (what was assumed), ``strategies`` and ``decision``; the figures
    and the decision only for a sample that passed the gate."""
    document = getattr(result, "production", None)
    if document is None:
        return {"production": None, "strategies": [], "decision": None, "guard_band": None}
    return {
        "production": jsonable(document["production"]),
        "strategies": jsonable(document["strategies"]) if ok else [],
        "decision": jsonable(document["decision"]) if ok else None,
        "guard_band": jsonable(document.get("guard_band")) if ok else None,
    }


COMPACT_NOTE = (
    "compact: per-part estimand draws left out (their summaries are in summary.json), "
    "derived draws and group effects as float32, raw non-centred effects (*_z) left out; "
    "'fit --keep-all-draws' stores everything"
)


def stored_draws(idata, estimands, *, keep_all: bool = False):
    """The InferenceData written to posterior.nc.

    By default compact: what the later commands read (hyper-parameters in double
    precision; effects, the cell log likelihood and study-, system- and appraiser-level
    estimands in single precision, which keeps far more digits than the Monte Carlo
    error) and nothing they do not (per-part estimand draws, summarised in
    summary.json; the raw ``*_z`` copies of effects that are stored as effects).
    """
    import arviz as az
    import numpy as np

    from bayes_rr.results.readings import HYPER_PARAMETERS

    groups = {g: idata[g] for g in idata.groups()}
    groups["estimands"] = estimands
    if not keep_all:
        post = groups["posterior"]
        raw = [v for v in post.data_vars if v.endswith("_z") and v[:-2] in post]
        post = post.drop_vars(raw)
        groups["posterior"] = post.assign({
            v: post[v].astype("float32") for v in post.data_vars
            if v not in HYPER_PARAMETERS and post[v].dtype == np.float64
        })  # fmt: skip
        kept = [v for v in estimands.data_vars if v.split("__")[1] != "part"]
        groups["estimands"] = estimands[kept].astype("float32")
        groups["log_likelihood"] = groups["log_likelihood"].astype("float32")
    out = az.InferenceData(**{g: v for g, v in groups.items() if g != "estimands"})
    out.add_groups({"estimands": groups["estimands"]}, warn_on_custom_groups=False)
    return out


def write_fit(result, out_dir: Path, *, overwrite: bool = False, classical: dict | None = None,
              protected: tuple[Path, ...] = (), keep_all_draws: bool = False) -> Path:  # fmt: skip
    """Write every output of a fit into ``out_dir`` (atomically: all or nothing).

    ``keep_all_draws`` stores every draw in double precision (see :func:`stored_draws`).

    ``classical`` is the classical statistics document of the same data (computed
    here when not given). A fit folder from an earlier run is replaced only when
    ``overwrite``; see :func:`check_output_dir` for what is never replaced.
    """
    from bayes_rr.core import interrupts

    out_dir = Path(out_dir)
    check_output_dir(out_dir, overwrite, protected=protected)
    _remove_stale(out_dir)
    if classical is None:
        classical = classical_statistics(result.study, result.prob).as_dict()
    tmp = _new_folder(out_dir.parent, f".{out_dir.name}.incomplete-")
    try:
        (tmp / MARKER).write_text(dumps({"generator": GENERATOR, "pid": os.getpid()}) + "\n")
        stored = stored_draws(result.idata, result.estimands, keep_all=keep_all_draws)
        stored.to_netcdf(str(tmp / "posterior.nc"), engine="h5netcdf")
        summary = summary_document(result)
        summary["draws_stored"] = "all, in double precision" if keep_all_draws else COMPACT_NOTE
        (tmp / "summary.json").write_text(dumps(summary) + "\n", encoding="utf-8")
        frame = pd.DataFrame([asdict(r) for r in result.estimand_rows], columns=SUMMARY_COLUMNS)
        frame.insert(0, "use_results", summary["use_results"])
        frame.to_csv(tmp / "summary.csv", index=False)
        (tmp / "run.json").write_text(dumps(result.provenance) + "\n", encoding="utf-8")
        # the model as fitted, priors included: reusable with --model
        (tmp / "model.toml").write_text(result.spec.text, encoding="utf-8")
        (tmp / "classical.json").write_text(dumps(classical) + "\n", encoding="utf-8")
        calls_table(result.study).to_csv(tmp / "calls.csv", index=False)
        interrupts.raise_if_interrupted()
        with interrupts.deferred():
            _move_into_place(tmp, out_dir)
    except BaseException:
        shutil.rmtree(tmp, ignore_errors=True)
        raise
    if interrupts.interrupted():
        raise interrupts.LateInterrupt(out_dir)
    return out_dir


def _new_folder(parent: Path, prefix: str) -> Path:
    """A new private-named folder with the permissions the user's umask gives."""
    folder = Path(tempfile.mkdtemp(prefix=prefix, dir=parent))
    folder.chmod(0o777 & ~_umask())
    return folder


def _remove_stale(out_dir: Path) -> None:
    """Remove temporary folders a killed run of ours left next to ``out_dir``.

    Only folders with our name pattern that hold our marker, written by a process
    that is no longer running, are removed.
    """
    for pattern in (f".{out_dir.name}.incomplete-*", f".{out_dir.name}.old-*"):
        for folder in out_dir.parent.glob(pattern):
            marker = folder / MARKER
            if not marker.is_file():
                marker = folder / "previous" / MARKER
            if not marker.is_file():
                continue
            try:
                pid = json.loads(marker.read_text()).get("pid")
            except (OSError, ValueError, AttributeError):
                continue
            if not _pid_alive(pid) or pid == os.getpid():
                shutil.rmtree(folder, ignore_errors=True)


def calls_table(study) -> pd.DataFrame:
    """The study's calls as a tidy table (labels 0/1, reference 0/1 where known, the
    reference value and the limits where given)."""
    table = study.calls.copy()
    if study.reference is not None:
        table["reference"] = table["part"].map(study.reference).astype(int)
    partial = getattr(study, "partial_status", None)
    if partial is not None:
        # an empty cell is an unknown status, as the reader takes it
        known = partial.dropna().astype(int).astype(str)
        table["reference"] = table["part"].map(known).fillna("")
    if study.reference_value is not None:
        # repr keeps every digit, so the data hash matches when the folder is read back
        table["reference_value"] = table["part"].map(study.reference_value).map(repr)
    if study.stratum is not None:
        table["stratum"] = table["part"].map(study.stratum)
    for role, limit in zip(("lower_limit", "upper_limit"), study.limits, strict=True):
        if limit is not None:
            table[role] = repr(float(limit))
    return table


def _move_into_place(tmp: Path, out_dir: Path) -> None:
    owner = claim_owner(out_dir)
    if owner is not None and owner != os.getpid():
        raise _fail(out_dir, f"another bayes-rr run (process {owner}) claimed it meanwhile",
                    "choose another folder")  # fmt: skip
    if out_dir.is_dir():
        old = _new_folder(out_dir.parent, f".{out_dir.name}.old-")
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


AGAIN = "run 'bayes-rr fit' again to write a new fit folder"

# What the later steps read from each JSON document: a file without these is refused
# at loading with one line, never a traceback half-way through a report.
REQUIRED = {
    "summary.json": {
        "prob": (int, float),
        "interval": str,
        "interval_description": str,
        "model": dict,
        "design": dict,
        "diagnostics": dict,
        "estimands": list,
        "readings": list,
        "parameters": list,
    },
    "run.json": {
        "data_sha256": str,
        "spec_text": str,
        "spec_sha256": str,
        "seed": int,
        "sampler_settings": dict,
        "timings": dict,
        "versions": dict,
        "started": str,
        "finished": str,
        "platform": str,
    },
    "classical.json": {
        "prob": (int, float),
        "classical": dict,
        "agreement": list,
        "error_rates": list,
        "kappa": list,
        "appraiser_differences": list,
        "not_computed": list,
    },
}
MALFORMED = (KeyError, TypeError, ValueError, IndexError, AttributeError)
"""What reading a malformed document deep inside raises; turned into an OutputError."""
DIAGNOSTIC_KEYS = ("ok", "reasons", "warnings", "advice", "max_r_hat", "min_ess_bulk",
                   "min_ess_tail", "divergences", "min_bfmi")  # fmt: skip
POSTERIOR_GROUPS = ("posterior", "sample_stats", "log_likelihood", "estimands")


def _damaged(path: Path, what: str) -> OutputError:
    return OutputError(f"{path}: {what}; {AGAIN}")


def _read_json(folder: Path, name: str) -> dict:
    path = folder / name
    if not path.is_file():
        raise OutputError(
            f"{folder}: no {name}; expected a folder written by 'bayes-rr fit' "
            f"(files {list(FILES)}); {AGAIN}"
        )
    try:
        document = json.loads(path.read_text(encoding="utf-8"))
    except json.JSONDecodeError as exc:
        raise _damaged(path, f"not valid JSON ({exc.msg} at line {exc.lineno})") from None
    except (OSError, UnicodeDecodeError) as exc:
        raise _damaged(path, f"cannot be read ({exc})") from None
    if not isinstance(document, dict):
        raise _damaged(path, "expected a JSON object")
    for key, kind in REQUIRED.get(name, {}).items():
        if not isinstance(document.get(key), kind):
            raise _damaged(path, f"the key {key!r} is missing or malformed")
    return document


def _check_summary(path: Path, summary: dict) -> None:
    missing = [k for k in DIAGNOSTIC_KEYS if k not in summary["diagnostics"]]
    if missing:
        raise _damaged(path, f"diagnostics lack {missing}")
    for k, row in enumerate(summary["estimands"]):
        if not isinstance(row, dict) or not set(SUMMARY_COLUMNS) <= set(row):
            raise _damaged(path, f"estimand row {k} lacks some of {list(SUMMARY_COLUMNS)}")


def _read_posterior(folder: Path):
    import arviz as az

    nc = folder / "posterior.nc"
    if not nc.is_file():
        raise OutputError(f"{folder}: no posterior.nc; the folder is incomplete; {AGAIN}")
    try:
        idata = az.from_netcdf(str(nc), engine="h5netcdf")
    except Exception as exc:  # h5py/netCDF raise many types for damaged files
        raise _damaged(nc, f"damaged or truncated ({type(exc).__name__})") from None
    missing = [g for g in POSTERIOR_GROUPS if g not in idata.groups()]
    if missing:
        raise _damaged(nc, f"lacks the group(s) {missing}")
    return idata


def load_fit(folder: str | Path, *, with_draws: bool = True) -> LoadedFit:
    """Read a fit folder and check that its data are the data the fit recorded.

    Any missing, truncated or malformed file raises :class:`OutputError` naming the
    file (exit code 2 on the command line).
    """
    from bayes_rr.core.errors import DataError, SpecError
    from bayes_rr.priors.spec import parse_spec
    from bayes_rr.study.data import study_from_frame

    folder = Path(folder)
    if not folder.is_dir():
        raise OutputError(f"{folder}: not a folder; give the --out folder of 'bayes-rr fit'")
    summary = _read_json(folder, "summary.json")
    _check_summary(folder / "summary.json", summary)
    run = _read_json(folder, "run.json")
    classical = _read_json(folder, "classical.json")
    calls_path = folder / "calls.csv"
    if not calls_path.is_file():
        raise OutputError(f"{folder}: no calls.csv; the folder is incomplete; {AGAIN}")
    try:
        frame = pd.read_csv(calls_path, dtype=str, keep_default_na=False)
        study = study_from_frame(frame, source=str(run.get("data_source", "calls.csv")))
    except (DataError, ValueError, pd.errors.ParserError, pd.errors.EmptyDataError) as exc:
        raise _damaged(calls_path, f"not the calls of a fit ({exc})") from None
    if study.sha256 != run["data_sha256"]:
        raise OutputError(
            f"{folder}: calls.csv does not match the data hash recorded in run.json "
            f"({study.sha256[:12]} vs {run['data_sha256'][:12]}); the folder was changed; {AGAIN}"
        )
    try:
        spec = parse_spec(run["spec_text"], str(run.get("spec_source", "spec")))
    except SpecError as exc:
        raise _damaged(folder / "run.json", f"its model spec is not valid ({exc})") from None
    idata = _read_posterior(folder) if with_draws else None
    return LoadedFit(folder, study, spec, idata, summary, run, classical)
