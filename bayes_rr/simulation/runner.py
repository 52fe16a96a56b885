"""The Dask runner: every fit is a task on a ``dask.distributed`` client.

Results are written one file per task as they come back, so an interrupted run resumes
where it stopped (tasks with a result file are not run again). A task that raises is
recorded with its input and reported, never dropped; it runs again on a resumed run.
Each task carries its own seed, so a run gives the same results with any number of
workers. A worker keeps the models it compiled (``bayes_rr.inference.sampling``), so it compiles
each model and design once.
"""

from __future__ import annotations

import contextlib
import json
import logging
import os
import signal
import traceback
from collections.abc import Callable, Iterable, Iterator
from dataclasses import dataclass, field
from pathlib import Path

from bayes_rr.core import interrupts
from bayes_rr.core.errors import OutputError
from bayes_rr.core.jsonio import dumps, write_text_atomic

TASKS_DIR = "tasks"
RUN_FILE = "run.json"


@dataclass(frozen=True)
class Task:
    """One fit: an id (a file name), what it gets, and a short description of its input
    (recorded when it fails)."""

    task_id: str
    payload: dict
    describe: dict = field(default_factory=dict)


@dataclass(frozen=True)
class Outcome:
    """What a run produced: results and failures by task id."""

    results: dict[str, dict]
    failures: dict[str, dict]
    resumed: int
    """Tasks whose results a previous run had already written."""


def default_workers() -> int:
    """One worker a core: each fit samples its chains on one core."""
    return max(1, os.cpu_count() or 1)


def make_client(workers: int | None = None, scheduler: str | None = None):
    """A client of an existing cluster (``scheduler``) or of a local cluster with
    ``workers`` single-threaded worker processes (default: one a core)."""
    from distributed import Client, LocalCluster

    if scheduler:
        try:
            return Client(scheduler, timeout="10s")
        except (OSError, ValueError, TypeError) as exc:
            raise OutputError(
                f"--scheduler {scheduler!r}: no Dask scheduler answered ({exc}); give the "
                "address of a running scheduler (e.g. tcp://host:8786), or leave the option "
                "out for a cluster on this machine"
            ) from None
    count = workers or default_workers()
    # The cluster's own log lines (start, close) are noise in a command's output.
    logging.getLogger("distributed").setLevel(logging.ERROR)
    # Ctrl-C reaches the whole process group: worker processes started while SIGINT is
    # ignored keep ignoring it (Python installs its handler only over the default), so
    # only this process answers it and closes the cluster, without a traceback a worker.
    previous = signal.signal(signal.SIGINT, signal.SIG_IGN)
    try:
        cluster = LocalCluster(
            n_workers=count,
            threads_per_worker=1,
            processes=True,
            dashboard_address=":0",  # any free port: another cluster may hold the usual one
            silence_logs=logging.ERROR,
        )
    finally:
        signal.signal(signal.SIGINT, previous)
    _stop_gc_diagnosis()
    return Client(cluster)


def _stop_gc_diagnosis() -> None:
    """Take the in-process scheduler's garbage-collector timer out of this process.

    It only feeds the cluster's log, which the commands silence, and a Ctrl-C raised
    inside its callback between a collection's start and stop leaves it inconsistent:
    every later full collection then printed an "Exception ignored" traceback above the
    one-line interrupt message (seen in CI, distributed 2026.8).
    """
    try:
        from distributed.gc import disable_gc_diagnosis
    except ImportError:  # a distributed without the timer has nothing to stop
        return
    disable_gc_diagnosis(force=True)


def quiet_dask() -> None:
    """Silence the cluster's loggers: a run being stopped logs its cancelled
    connections as errors, which tell the user nothing."""
    for name in ("distributed", "tornado", "asyncio"):
        logging.getLogger(name).setLevel(logging.CRITICAL + 1)


def close_client(client) -> None:
    cluster = getattr(client, "cluster", None)
    client.close()
    if cluster is not None:
        cluster.close()


@contextlib.contextmanager
def run_folder(
    out_dir: Path, command: str, signature: str, *, client=None, scheduler: str | None = None
) -> Iterator[object]:
    """Prepare ``out_dir`` (see :func:`prepare_run_dir`) and hold it for the run: a
    second run into the same folder is refused while this one lives, so two runs of
    one plan never interleave. A ``scheduler`` is connected to before anything is
    written (a wrong address leaves no folder behind); yields the client to use
    (None: :func:`run_tasks` starts a local cluster)."""
    from bayes_rr.io.output_safety import holding

    check_run_dir(out_dir, command, signature)
    own = client is None and bool(scheduler)
    if own:
        client = make_client(scheduler=scheduler)
    try:
        with holding(out_dir):
            prepare_run_dir(out_dir, command, signature)
            yield client
    finally:
        if own:
            close_client(client)


def check_run_dir(out_dir: Path, command: str, signature: str) -> None:
    """Refuse an ``out_dir`` that is neither new, empty, nor this command's run with the
    same settings (read only: nothing is created)."""
    from bayes_rr.io.fit_folder import check_location
    from bayes_rr.io.output_safety import CLAIM

    run_file = out_dir / RUN_FILE
    if out_dir.exists() and not out_dir.is_dir():
        raise OutputError(f"--out {out_dir}: exists and is a file; choose a new folder name")
    if out_dir.is_dir() and any(e.name != CLAIM for e in out_dir.iterdir()):
        try:
            previous = json.loads(run_file.read_text(encoding="utf-8"))
        except (OSError, ValueError):
            previous = None
        if not isinstance(previous, dict) or previous.get("command") != command:
            raise OutputError(
                f"--out {out_dir}: the folder is not empty and is not a '{command}' run "
                "folder of bayes-rr; choose a new folder"
            )
        if previous.get("signature") != signature:
            raise OutputError(
                f"--out {out_dir}: holds a '{command}' run with other settings, so it cannot "
                "be resumed; choose a new folder, or repeat that run's exact command"
            )
    elif not out_dir.exists():
        check_location(out_dir)


def prepare_run_dir(out_dir: Path, command: str, signature: str) -> None:
    """Create ``out_dir`` or accept one this command wrote with the same settings (a
    resumed run). Anything else is refused: nothing the toolkit did not write is
    touched."""
    from bayes_rr import __version__
    from bayes_rr.io.fit_folder import GENERATOR

    check_run_dir(out_dir, command, signature)
    if (out_dir / RUN_FILE).is_file():
        return
    out_dir.mkdir(parents=True, exist_ok=True)
    document = {"generator": f"{GENERATOR} {__version__}", "command": command,
                "signature": signature}  # fmt: skip
    write_text_atomic(out_dir / RUN_FILE, dumps(document) + "\n")


def _guarded(func: Callable[[dict], dict], payload: dict) -> dict:
    """Run a task; an exception becomes a failure record (the worker carries on)."""
    try:
        return {"ok": True, "result": func(payload)}
    except Exception as exc:  # every failure is recorded, none dropped
        return {
            "ok": False,
            "error": f"{type(exc).__name__}: {exc}",
            "traceback": traceback.format_exc(limit=6),
        }


def _read_done(task_dir: Path, task_id: str) -> dict | None:
    path = task_dir / f"{task_id}.json"
    try:
        return json.loads(path.read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return None


def run_tasks(
    func: Callable[[dict], dict],
    tasks: Iterable[Task],
    out_dir: Path,
    *,
    client=None,
    workers: int | None = None,
    scheduler: str | None = None,
    progress: bool = True,
    what: str = "fits",
) -> Outcome:
    """Run ``func(task.payload)`` for every task on Dask, writing each result to
    ``out_dir/tasks/<task_id>.json`` (failures to ``<task_id>.failed.json``).

    ``func`` must be importable by the workers (a module-level function).
    """
    from distributed import as_completed

    task_dir = out_dir / TASKS_DIR
    task_dir.mkdir(parents=True, exist_ok=True)
    tasks = list(tasks)
    results, failures = {}, {}
    todo = []
    for task in tasks:
        done = _read_done(task_dir, task.task_id)
        if done is not None:
            results[task.task_id] = done
        else:
            todo.append(task)
    resumed = len(results)
    if not todo:
        return Outcome(results, failures, resumed)
    own_client = client is None
    client = client or make_client(workers, scheduler)
    try:
        by_future = {}
        for task in todo:
            future = client.submit(_guarded, func, task.payload, key=f"bayes-rr-{task.task_id}",
                                   pure=False)  # fmt: skip
            by_future[future] = task
        with _progress(progress, len(tasks), resumed, what) as advance:
            for future in as_completed(by_future):
                task = by_future[future]
                try:
                    outcome = future.result()
                except Exception as exc:  # a lost worker, a killed task
                    outcome = {"ok": False, "error": f"{type(exc).__name__}: {exc}",
                               "traceback": ""}  # fmt: skip
                failed_path = task_dir / f"{task.task_id}.failed.json"
                if outcome["ok"]:
                    results[task.task_id] = outcome["result"]
                    write_text_atomic(task_dir / f"{task.task_id}.json",
                                      dumps(outcome["result"]) + "\n")  # fmt: skip
                    if failed_path.exists():
                        failed_path.unlink()  # a retry that worked; the toolkit wrote it
                else:
                    record = {
                        "task": task.task_id,
                        "input": task.describe,
                        "error": outcome["error"],
                        "traceback": outcome["traceback"],
                    }
                    failures[task.task_id] = record
                    write_text_atomic(failed_path, dumps(record) + "\n")
                advance()
                # an interrupt that landed where Python could not raise it (a library's
                # callback) is still pending: stop now, not after every task
                interrupts.raise_if_interrupted()
    except BaseException:
        quiet_dask()  # stopped (Ctrl-C, SIGTERM) or failed: the reason is said once, above
        raise
    finally:
        if own_client:
            close_client(client)
    return Outcome(results, failures, resumed)


class _progress:
    """A progress bar on stderr (nothing when off or not a terminal)."""

    def __init__(self, on: bool, total: int, done: int, what: str) -> None:
        self.on, self.total, self.done, self.what = on, total, done, what
        self.bar = None

    def __enter__(self):
        if self.on:
            from rich.console import Console
            from rich.progress import BarColumn, MofNCompleteColumn, Progress, TimeElapsedColumn

            console = Console(stderr=True)
            if console.is_terminal:
                self.bar = Progress("[progress.description]{task.description}", BarColumn(),
                                    MofNCompleteColumn(), TimeElapsedColumn(), console=console,
                                    transient=True)  # fmt: skip
                self.bar.start()
                self.id = self.bar.add_task(self.what, total=self.total, completed=self.done)
        return self.advance

    def advance(self) -> None:
        if self.bar is not None:
            self.bar.advance(self.id)

    def __exit__(self, *exc) -> None:
        if self.bar is not None:
            self.bar.stop()
