"""Outputs never destroy what the toolkit did not write; every refusal is one line.

Each case asserts the exit code, a single line on stderr without a traceback, the
input's SHA-256 unchanged and what is (not) left on disk. Checks of the output
place happen before any work, so none of these samples a model.
"""

import hashlib
import json
import os
import shutil
import subprocess
from pathlib import Path

import pytest
from helpers import write
from typer.testing import CliRunner

from bayes_rr.cli import app
from bayes_rr.core.errors import OutputError
from bayes_rr.io.fit_folder import MARKER, check_output_dir, write_fit

runner = CliRunner()
STUDY = "part,appraiser,trial,call\n" + "".join(
    f"P{i},{a},{t},{'fail' if (i + t) % 3 == 0 else 'pass'}\n"
    for i in range(1, 7)
    for a in ("Ann", "Ben")
    for t in (1, 2)
)


def sha(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


def snapshot(folder: Path) -> dict[str, str]:
    """Every file below ``folder`` with its hash (to prove nothing changed)."""
    return {str(p.relative_to(folder)): sha(p) for p in sorted(folder.rglob("*")) if p.is_file()}


def one_line_error(result, code: int = 2) -> str:
    assert result.exit_code == code, (result.exit_code, result.output)
    assert isinstance(result.exception, SystemExit), result.exception
    message = result.stderr.strip()
    assert message and "\n" not in message, message
    assert "Traceback" not in result.output
    return message


@pytest.fixture
def user_folder(tmp_path):
    """A folder of the user's own: the study and other files."""
    folder = tmp_path / "work"
    folder.mkdir()
    write(folder, "study.csv", STUDY)
    write(folder, "notes.txt", "my own notes\n")
    return folder


def test_fit_overwrite_refuses_a_folder_of_user_files(user_folder, tmp_path):
    other = tmp_path / "mine"
    other.mkdir()
    write(other, "precious.txt", "do not delete\n")
    before, before_input = snapshot(other), snapshot(user_folder)
    result = runner.invoke(
        app, ["fit", str(user_folder / "study.csv"), "--out", str(other), "--overwrite"]
    )
    message = one_line_error(result)
    assert "not write" in message and "--overwrite will not replace it" in message
    assert snapshot(other) == before and snapshot(user_folder) == before_input


def test_fit_refuses_the_folder_holding_the_input(user_folder):
    before = snapshot(user_folder)
    for out in (user_folder, user_folder.parent):
        result = runner.invoke(
            app, ["fit", str(user_folder / "study.csv"), "--out", str(out), "--overwrite"]
        )
        message = one_line_error(result)
        assert "holds the input" in message or "current folder" in message
    assert snapshot(user_folder) == before


def test_fit_refuses_the_current_folder(user_folder, monkeypatch):
    monkeypatch.chdir(user_folder)
    before = snapshot(user_folder)
    for out in (".", ".."):
        result = runner.invoke(app, ["fit", "study.csv", "--out", out, "--overwrite"])
        assert "current folder" in one_line_error(result)
    assert snapshot(user_folder) == before


def test_overwrite_replaces_only_a_marked_fit_folder(fits, tmp_path):
    folder = write_fit(fits["beta-binomial"], tmp_path / "fit")
    assert (folder / MARKER).is_file()
    (folder / "summary.json").write_text("{}")  # a change the next write must undo
    write_fit(fits["beta-binomial"], folder, overwrite=True)
    assert json.loads((folder / "summary.json").read_text())["prob"] == 0.95
    assert not list(tmp_path.glob(".fit.*"))  # no temporary folder left behind
    (folder / MARKER).unlink()  # without the marker it is no longer ours
    with pytest.raises(Exception, match="did not write"):
        write_fit(fits["beta-binomial"], folder, overwrite=True)


def test_fit_folder_follows_the_umask(fits, tmp_path):
    old = os.umask(0o022)
    try:
        folder = write_fit(fits["beta-binomial"], tmp_path / "fit")
    finally:
        os.umask(old)
    assert folder.stat().st_mode & 0o777 == 0o755
    for path in folder.iterdir():
        assert path.stat().st_mode & 0o777 == 0o644, path


def test_stale_temporary_folder_of_a_killed_run_is_removed(fits, tmp_path):
    # A folder a killed run left: our name pattern, our marker, a process that is gone.
    dead = subprocess.Popen(["true"])
    dead.wait()
    stale = tmp_path / ".fit.incomplete-abc123"
    stale.mkdir()
    (stale / MARKER).write_text(json.dumps({"generator": "bayes-rr", "pid": dead.pid}))
    # A look-alike without our marker is not ours: it stays.
    foreign = tmp_path / ".fit.incomplete-user"
    foreign.mkdir()
    (foreign / "keep.txt").write_text("x")
    write_fit(fits["beta-binomial"], tmp_path / "fit")
    assert not stale.exists()
    assert (foreign / "keep.txt").read_text() == "x"


def test_report_never_writes_over_the_input_or_a_user_file(fit_dirs, user_folder):
    study = user_folder / "study.csv"
    before = sha(study)
    message = one_line_error(
        runner.invoke(app, ["report", str(fit_dirs["beta-binomial"]), "--out", str(study)])
    )
    assert ".html" in message
    theirs = write(user_folder, "theirs.html", "<html>their page</html>")
    message = one_line_error(
        runner.invoke(app, ["report", str(fit_dirs["beta-binomial"]), "--out", str(theirs)])
    )
    assert "not written by bayes-rr" in message and "--overwrite" in message
    assert sha(study) == before and theirs.read_text() == "<html>their page</html>"


def test_report_rewrites_its_own_file(fit_dirs, tmp_path):
    target = tmp_path / "r.html"
    for _ in range(2):  # the second run replaces the report the first one wrote
        result = runner.invoke(
            app, ["report", str(fit_dirs["beta-binomial"]), "--out", str(target)]
        )
        assert result.exit_code == 0, result.output
    assert 'name="generator" content="bayes-rr' in target.read_text()


def test_compare_out_refuses_a_user_file(fit_dirs, user_folder):
    theirs = write(user_folder, "results.json", '{"mine": 1}')
    result = runner.invoke(
        app,
        ["compare", str(fit_dirs["beta-binomial"]), str(fit_dirs["crossed-logit"]),
         "--out", str(theirs)],
    )  # fmt: skip
    one_line_error(result)
    assert theirs.read_text() == '{"mine": 1}'


def test_demo_never_writes_over_existing_files(tmp_path):
    folder = tmp_path / "demo"
    (folder / "fit").mkdir(parents=True)
    write(folder / "fit", "mine.txt", "my fit notes\n")
    write(folder, "demo_study.csv", "part,appraiser,call\nmy,own,data\n")
    before = snapshot(folder)
    message = one_line_error(runner.invoke(app, ["demo", "--out", str(folder), "--quiet"]))
    assert "demo_study.csv" in message
    (folder / "demo_study.csv").unlink()
    message = one_line_error(runner.invoke(app, ["demo", "--out", str(folder), "--quiet"]))
    assert "fit" in message
    del before["demo_study.csv"]
    assert snapshot(folder) == before


def test_demo_describe_only_reuses_its_own_data(tmp_path):
    folder = tmp_path / "demo"
    for _ in range(2):
        result = runner.invoke(app, ["demo", "--out", str(folder), "--describe-only"])
        assert result.exit_code == 0, result.output


@pytest.mark.parametrize("case", ["parent missing", "parent is a file", "out is a file"])
def test_bad_output_place_is_refused_before_reading(tmp_path, case):
    blocker = write(tmp_path, "afile", "x")
    out = {
        "parent missing": tmp_path / "no" / "such" / "fit",
        "parent is a file": blocker / "fit",
        "out is a file": blocker,
    }[case]
    # The data file does not exist: an error about --out proves it was checked first.
    result = runner.invoke(app, ["fit", str(tmp_path / "missing.csv"), "--out", str(out)])
    message = one_line_error(result)
    assert message.startswith("error: --out"), message
    assert blocker.read_text() == "x"
    assert not (tmp_path / "no").exists()


def test_folder_without_write_permission_is_refused_before_reading(tmp_path, monkeypatch):
    # As root a chmod 555 folder is writable, so the test stands in os.access's answer
    # (the check acts on it; the read-only mount test below shows a real refusal).
    real_access = os.access
    locked = tmp_path / "locked"
    locked.mkdir()
    monkeypatch.setattr(
        os, "access", lambda p, mode: False if Path(p) == locked else real_access(p, mode)
    )
    result = runner.invoke(app, ["fit", str(tmp_path / "missing.csv"), "--out",
                                 str(locked / "fit")])  # fmt: skip
    assert "no permission to write" in one_line_error(result)


@pytest.fixture
def read_only_mount(tmp_path):
    mount = tmp_path / "ro"
    mount.mkdir()
    done = subprocess.run(
        ["mount", "-t", "tmpfs", "-o", "ro,size=1m", "tmpfs", str(mount)], capture_output=True
    )
    if done.returncode != 0:
        if os.environ.get("CI"):
            pytest.fail(f"cannot mount a read-only tmpfs in CI: {done.stderr!r}")
        pytest.skip("mounting a read-only tmpfs needs root")
    yield mount
    subprocess.run(["umount", str(mount)], check=False)


def test_read_only_file_system_is_refused_before_reading(tmp_path, read_only_mount):
    result = runner.invoke(
        app, ["fit", str(tmp_path / "missing.csv"), "--out", str(read_only_mount / "fit")]
    )
    assert "read-only file system" in one_line_error(result)


def test_check_output_dir_allows_a_new_or_empty_folder(tmp_path):
    check_output_dir(tmp_path / "new")
    (tmp_path / "empty").mkdir()
    check_output_dir(tmp_path / "empty")
    shutil.rmtree(tmp_path / "empty")


def test_demo_checks_a_new_folder_without_creating_anything_first(tmp_path, monkeypatch):
    # A new --out folder passes the checks (its fit folder is new too); the fit itself is
    # stood in for: this test is about the order of the checks, not about sampling.
    import bayes_rr.cli.study_commands as commands

    calls = []
    interrupted = lambda *a, **k: calls.append(a) or (_ for _ in ()).throw(KeyboardInterrupt)  # noqa: E731
    monkeypatch.setattr(commands, "run_fit", interrupted)
    result = runner.invoke(app, ["demo", "--out", str(tmp_path / "new"), "--quiet"])
    assert result.exit_code == 130 and calls, result.output
    assert (tmp_path / "new" / "demo_study.csv").is_file()


def test_overwrite_refuses_a_fit_folder_holding_a_users_file(fits, tmp_path):
    # A user's sign-off note inside a fit folder is not the toolkit's to delete.
    out = write_fit(fits["beta-binomial"], tmp_path / "fit")
    note = out / "sign-off.txt"
    note.write_text("approved by QA")
    with pytest.raises(OutputError) as err:
        check_output_dir(out, overwrite=True)
    assert "'sign-off.txt'" in str(err.value)
    with pytest.raises(OutputError):
        write_fit(fits["beta-binomial"], out, overwrite=True)
    assert note.read_text() == "approved by QA"
    # a report the toolkit wrote, and its checks, are its own: replaced without a word
    note.unlink()
    (out / "checks.json").write_text('{"generator": "bayes-rr 0"}\n')
    (out / "report.html").write_text('<meta name="generator" content="bayes-rr 0">')
    write_fit(fits["beta-binomial"], out, overwrite=True)
    # but a report.html of someone else's is not
    (out / "report.html").write_text("<p>my own notes</p>")
    with pytest.raises(OutputError, match=r"report\.html"):
        check_output_dir(out, overwrite=True)


def test_a_fit_folder_inside_a_fit_folder_is_refused(fits, tmp_path):
    outer = write_fit(fits["beta-binomial"], tmp_path / "earlier")
    with pytest.raises(OutputError, match="inside the fit folder"):
        check_output_dir(outer / "sub")
    assert not (outer / "sub").exists()


def test_a_claimed_folder_is_refused_to_a_second_run(tmp_path):
    from bayes_rr.io.output_safety import CLAIM, claim_output_dir, claimed

    out = tmp_path / "fit"
    assert claim_output_dir(out) is True
    with pytest.raises(OutputError, match="claimed"):
        claim_output_dir(out)  # the same folder, claimed again
    # a claim by another live process (pid 1 is always running) refuses the folder
    (out / CLAIM).write_text(json.dumps({"pid": 1}))
    with pytest.raises(OutputError, match="another bayes-rr run"):
        check_output_dir(out)
    # a claim left by a process that is gone is stale: the folder is free again
    (out / CLAIM).write_text(json.dumps({"pid": 2**22 + 12345}))
    check_output_dir(out)
    # a block that fails releases its claim and removes the folder it created
    fresh = tmp_path / "fresh"
    with pytest.raises(RuntimeError), claimed(fresh):
        assert (fresh / CLAIM).is_file()
        raise RuntimeError("sampling failed")
    assert not fresh.exists()


@pytest.mark.slow
def test_two_fits_started_together_into_one_folder(demo_csv, tmp_path):
    # Two processes race for one new --out: one writes, the other is refused; no
    # complete fit folder is lost (run side by side, not one after the other).
    out = tmp_path / "fit"
    command = ["bayes-rr", "fit", str(demo_csv), "--out", str(out), "--draws", "200",
               "--seed", "1", "--quiet"]  # fmt: skip
    runs = [subprocess.Popen(command, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
            for _ in range(2)]  # fmt: skip
    results = [(run.wait(timeout=600), run.communicate()[1]) for run in runs]
    codes = [code for code, _ in results]
    # 3: written but not converged at these few draws; either way written
    assert sorted(code == 2 for code in codes) == [False, True], results
    assert all(code in (0, 2, 3) for code in codes), results
    assert any("another bayes-rr run" in err or "claimed" in err for _, err in results)
    assert (out / MARKER).is_file() and (out / "summary.json").is_file()
