"""What the toolkit never replaces or deletes: the checks every command makes on its
output folder or file before any work, the marks that tell what the toolkit wrote, and
the claim a running fit holds on its output folder (so two runs never race for one).
"""

from __future__ import annotations

import contextlib
import json
import os
import tempfile
from collections.abc import Iterator
from pathlib import Path

from bayes_rr.core.errors import OutputError
from bayes_rr.core.jsonio import dumps

MARKER = ".bayes-rr-fit"
"""A file in every fit folder: ``--overwrite`` replaces only folders that hold it."""
FILES = (
    "posterior.nc",
    "summary.json",
    "summary.csv",
    "run.json",
    "classical.json",
    "calls.csv",
    "model.toml",
    MARKER,
)


GENERATOR = "bayes-rr"
"""Written into every report and JSON file the toolkit writes, to recognise them later."""


def _umask() -> int:
    mask = os.umask(0)
    os.umask(mask)
    return mask


def _fail(path: Path, why: str, fix: str) -> OutputError:
    return OutputError(f"--out {path}: {why}; {fix}")


def check_location(path: Path) -> None:
    """The place a new file or folder ``path`` would be created in must be a writable folder.

    Checked before any work, so a run never reads, compiles and samples only to
    find that it cannot write its results. Folders are named as the user wrote them
    (relative stays relative).
    """
    parent = path.absolute().parent

    def shown(folder: Path) -> str:
        if folder == parent:
            return str(path.parent)
        return str(folder) if path.is_absolute() else os.path.relpath(folder)

    if not parent.exists():
        missing = parent
        while not missing.parent.exists():
            missing = missing.parent
        if missing.parent.is_dir() or missing.parent == missing:
            raise _fail(path, f"the folder {shown(parent)} does not exist",
                        "create it first, or choose another place")  # fmt: skip
        raise _fail(path, f"{shown(missing.parent)} is a file, not a folder",
                    "choose another place")  # fmt: skip
    if not parent.is_dir():
        raise _fail(path, f"{shown(parent)} is a file, not a folder", "choose another place")
    if not os.access(parent, os.W_OK | os.X_OK):
        try:
            read_only = bool(os.statvfs(parent).f_flag & os.ST_RDONLY)
        except OSError:
            read_only = False
        why = (
            f"{shown(parent)} is on a read-only file system"
            if read_only
            else f"no permission to write in {shown(parent)}"
        )
        raise _fail(path, why, "choose a folder you can write to")
    _probe(path, parent, shown(parent))


def _probe(path: Path, parent: Path, name: str) -> None:
    # Permission bits can say yes where writing fails (root on /sys or /proc, a full
    # disk, some network mounts): create and remove a small file to be sure.
    try:
        fd, probe = tempfile.mkstemp(prefix=".bayes-rr-probe-", dir=parent)
    except OSError as exc:
        raise _fail(path, f"nothing can be created in {name} ({exc.strerror})",
                    "choose a folder you can write to") from None  # fmt: skip
    os.close(fd)
    with contextlib.suppress(OSError):
        os.unlink(probe)


def _is_within(inner: Path, outer: Path) -> bool:
    return inner == outer or outer in inner.parents


def check_output_dir(
    out_dir: Path, overwrite: bool = False, *, protected: tuple[Path, ...] = ()
) -> None:
    """Refuse an output folder that would destroy anything the toolkit did not write.

    Checked before any work. A new folder is fine; an existing one must be empty,
    or (with ``overwrite``) a fit folder the toolkit wrote (it holds :data:`MARKER`).
    Never the current folder or one of its parents, the home folder, or a folder
    that holds a ``protected`` path (the input data).
    """
    out_dir = Path(out_dir)
    target = out_dir.resolve()
    if out_dir.exists() and not out_dir.is_dir():
        raise _fail(out_dir, "exists and is a file, not a folder", "choose a new folder name")
    if _is_within(Path.cwd().resolve(), target) or target == Path.home().resolve():
        raise _fail(
            out_dir,
            "is the current folder, one of its parents or the home folder",
            "give a new folder for the results, e.g. --out fit",
        )
    for path in protected:
        if _is_within(Path(path).resolve(), target):
            raise _fail(out_dir, f"holds the input {path}", "give a new folder for the results")
    owner = claim_owner(out_dir)
    if owner is not None and owner != os.getpid():
        raise _fail(
            out_dir,
            f"another bayes-rr run (process {owner}) is writing its results there",
            "wait for it to finish, or choose another folder",
        )
    if out_dir.is_dir() and any(e.name != CLAIM for e in out_dir.iterdir()):
        if not overwrite:
            raise _fail(
                out_dir,
                "folder exists and is not empty",
                "choose a new folder, or pass --overwrite to replace an earlier fit folder",
            )
        if not (out_dir / MARKER).is_file():
            raise _fail(
                out_dir,
                "holds files that bayes-rr did not write (it is not a fit folder), so "
                "--overwrite will not replace it",
                "choose a new folder",
            )
        foreign = foreign_entries(out_dir)
        if foreign:
            shown = ", ".join(repr(name) for name in foreign[:3])
            more = f" and {len(foreign) - 3} more" if len(foreign) > 3 else ""
            raise _fail(
                out_dir,
                f"is a fit folder, but it also holds {shown}{more}, which bayes-rr did not "
                "write; --overwrite replaces the whole folder, so it will not",
                "move those files out first, or choose a new folder",
            )
    for parent in target.parents:
        if (parent / MARKER).is_file():
            raise _fail(
                out_dir,
                f"lies inside the fit folder {parent}, which a later --overwrite of that "
                "folder would replace with everything in it",
                "choose a folder outside every fit folder",
            )
    if not out_dir.exists():
        check_location(out_dir)
    else:
        check_location(out_dir / "x")


CLAIM = ".bayes-rr-claim"
"""A file a run puts into its output folder before it samples (holding its process id),
so a second run into the same folder is refused instead of racing it."""


def claim_owner(folder: Path) -> int | None:
    """The process id of a live run that claimed ``folder``, or None."""
    return _lock_owner(Path(folder) / CLAIM)


def claim_output_dir(out_dir: Path) -> bool:
    """Claim ``out_dir`` for this run, atomically, before any long work: create it (if
    new) and the claim file inside with exclusive creation; a run that finds either
    taken is refused. Returns whether the folder was created here (see
    :func:`release_claim`). The claim goes when the results are moved into place."""
    out_dir = Path(out_dir)
    created = False
    taken = _fail(out_dir, "another bayes-rr run has just claimed it",
                  "wait for that run to finish, or choose another folder")  # fmt: skip
    if not out_dir.exists():
        try:
            out_dir.mkdir()
            created = True
        except FileExistsError:
            raise taken from None
        except OSError as exc:
            raise _fail(out_dir, f"cannot be created ({exc.strerror})",
                        "choose a folder you can write to") from None  # fmt: skip
    claim = out_dir / CLAIM
    if claim.exists() and claim_owner(out_dir) is None:
        claim.unlink(missing_ok=True)  # left by a run that no longer exists
    try:
        fd = os.open(claim, os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o644)
    except FileExistsError:
        raise taken from None
    with os.fdopen(fd, "w") as fh:
        fh.write(dumps({"generator": GENERATOR, "pid": os.getpid()}) + "\n")
    return created


def release_claim(out_dir: Path, created: bool) -> None:
    """Undo :func:`claim_output_dir` after a run that wrote nothing: remove our claim,
    and the folder when this run created it and it holds nothing else."""
    out_dir = Path(out_dir)
    if claim_owner(out_dir) == os.getpid():
        (out_dir / CLAIM).unlink(missing_ok=True)
    if created:
        with contextlib.suppress(OSError):
            out_dir.rmdir()


@contextlib.contextmanager
def claimed(out_dir: Path) -> Iterator[None]:
    """Hold the claim on ``out_dir`` for the block; a block that fails releases it."""
    created = claim_output_dir(out_dir)
    try:
        yield
    except BaseException:
        release_claim(out_dir, created)
        raise


@contextlib.contextmanager
def holding(out_dir: Path) -> Iterator[None]:
    """Hold the claim on a run folder (``plan``, ``calibrate``, ``batch``) for the whole
    run: a second run into the same folder is refused while this one lives. The claim
    goes when the block ends, however it ends."""
    created = claim_output_dir(out_dir)
    try:
        yield
    finally:
        release_claim(out_dir, created)


LOCK_SUFFIX = ".bayes-rr-lock"


@contextlib.contextmanager
def file_lock(path: Path) -> Iterator[None]:
    """Hold ``path`` (a report, a comparison, a spec) for one run: a lock file beside
    it, created exclusively, so a second run writing the same file is refused in one
    line instead of racing the first. A lock left by a run that died is taken over."""
    path = Path(path)
    lock = path.with_name("." + path.name + LOCK_SUFFIX)
    if lock.exists() and _lock_owner(lock) is None:
        lock.unlink(missing_ok=True)
    try:
        fd = os.open(lock, os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o644)
    except FileExistsError:
        raise _fail(path, "another bayes-rr run is writing it",
                    "wait for that run to finish, or give another file name") from None  # fmt: skip
    except OSError as exc:
        raise _fail(path, f"cannot be written ({exc.strerror})",
                    "choose a folder you can write to") from None  # fmt: skip
    with os.fdopen(fd, "w") as fh:
        fh.write(dumps({"generator": GENERATOR, "pid": os.getpid()}) + "\n")
    try:
        yield
    finally:
        if _lock_owner(lock) == os.getpid():
            lock.unlink(missing_ok=True)


def _lock_owner(lock: Path) -> int | None:
    try:
        pid = json.loads(lock.read_text()).get("pid")
    except (OSError, ValueError, AttributeError):
        return None
    return pid if _pid_alive(pid) else None


OWN_EXTRA = ("checks.json",)
"""Files the later steps write into a fit folder (besides :data:`FILES`); a
``report.html`` counts when it carries the toolkit's generator mark."""


def foreign_entries(folder: Path) -> list[str]:
    """Names in a fit folder that the toolkit did not write (what ``--overwrite`` must
    not delete): anything beyond its own files, a report it did not write, any folder."""
    own = {*FILES, *OWN_EXTRA, CLAIM}
    out = []
    for entry in sorted(Path(folder).iterdir()):
        if entry.is_file() and not entry.is_symlink() and entry.name in own:
            continue
        if entry.name == "report.html" and entry.is_file() and written_by_toolkit(entry):
            continue
        out.append(entry.name + ("/" if entry.is_dir() else ""))
    return out


def written_by_toolkit(path: Path) -> bool:
    """Whether an existing report or JSON file carries the toolkit's generator mark."""
    try:
        with Path(path).open("rb") as fh:
            head = fh.read(4096)
    except OSError:
        return False
    return (
        f'name="generator" content="{GENERATOR}'.encode() in head
        or f'"generator": "{GENERATOR}'.encode() in head
        or f"# generator: {GENERATOR}".encode() in head
    )


def check_output_file(
    path: Path,
    *,
    suffixes: tuple[str, ...],
    overwrite: bool = False,
    protected: tuple[Path, ...] = (),
) -> None:
    """Refuse an output file that would replace something the toolkit did not write.

    The name must end in one of ``suffixes`` (a report is never written over a
    study's .csv); an existing file is replaced only when the toolkit wrote it or
    with ``overwrite``; a ``protected`` file (an input) never.
    """
    path = Path(path)
    if path.is_dir():
        raise _fail(path, "is a folder", f"give a file name ending in {suffixes[0]}")
    if path.suffix.lower() not in suffixes:
        raise _fail(
            path,
            f"this file is written as {' or '.join(suffixes)}",
            f"give a file name ending in {suffixes[0]}",
        )
    if any(path.resolve() == Path(p).resolve() for p in protected):
        raise _fail(path, "is one of the input files", "give a new file name")
    if path.exists() and not overwrite and not written_by_toolkit(path):
        raise _fail(
            path,
            "exists and was not written by bayes-rr",
            "give a new file name, or pass --overwrite to replace it",
        )
    check_location(path)


def _pid_alive(pid: object) -> bool:
    if not isinstance(pid, int) or pid <= 0:
        return False
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True
    return True
