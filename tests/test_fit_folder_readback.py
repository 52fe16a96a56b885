"""A damaged fit folder gives exit 2 and one line naming the file, never a traceback."""

import hashlib
import json
import shutil

import pytest
from typer.testing import CliRunner

from bayes_rr.cli import app

runner = CliRunner()


def _truncate(path):
    data = path.read_bytes()
    path.write_bytes(data[: len(data) // 3])


def _drop_key(path, key):
    document = json.loads(path.read_text())
    del document[key]
    path.write_text(json.dumps(document))


def _flip_first_call(text):
    return text.replace(",1\n", ",0\n", 1)


def _drop_row_key(path):
    document = json.loads(path.read_text())
    del document["estimands"][0]["mean"]
    path.write_text(json.dumps(document))


DAMAGE = {
    "posterior.nc truncated": ("posterior.nc", _truncate),
    "posterior.nc empty": ("posterior.nc", lambda p: p.write_bytes(b"")),
    "summary.json is {}": ("summary.json", lambda p: p.write_text("{}")),
    "summary.json row lacks a key": ("summary.json", _drop_row_key),
    "summary.json not JSON": ("summary.json", lambda p: p.write_text('{"prob": 0.9,')),
    "summary.json a list": ("summary.json", lambda p: p.write_text("[]")),
    "run.json lacks spec_text": ("run.json", lambda p: _drop_key(p, "spec_text")),
    "run.json lacks versions": ("run.json", lambda p: _drop_key(p, "versions")),
    "classical.json lacks kappa": ("classical.json", lambda p: _drop_key(p, "kappa")),
    "calls.csv missing": ("calls.csv", lambda p: p.unlink()),
    "calls.csv garbage": ("calls.csv", lambda p: p.write_text("a\n\x01\n")),
    "calls.csv changed": ("calls.csv", lambda p: p.write_text(_flip_first_call(p.read_text()))),
}  # fmt: skip


@pytest.fixture
def damaged(fit_dirs, tmp_path, request):
    name, damage = DAMAGE[request.param]
    folder = tmp_path / "fit"
    shutil.copytree(fit_dirs["beta-binomial"], folder)
    damage(folder / name)
    return folder, name


def _hashes(folder):
    return {p.name: hashlib.sha256(p.read_bytes()).hexdigest() for p in folder.iterdir()
            if p.is_file()}  # fmt: skip


@pytest.mark.parametrize("damaged", list(DAMAGE), indirect=True)
@pytest.mark.parametrize("command", ["check", "report", "compare"])
def test_damaged_folder_is_one_clean_line(damaged, command, fit_dirs):
    folder, name = damaged
    before = _hashes(folder)
    args = {
        "check": ["check", str(folder)],
        "report": ["report", str(folder)],
        "compare": ["compare", str(folder), str(fit_dirs["crossed-logit"])],
    }[command]
    result = runner.invoke(app, args)
    assert result.exit_code == 2, result.output
    assert isinstance(result.exception, SystemExit), result.exception
    message = result.stderr.strip()
    assert "\n" not in message and "Traceback" not in result.output, message
    assert name in message or str(folder) in message, message
    assert "fit" in message  # says to run 'bayes-rr fit' again
    assert _hashes(folder) == before  # nothing in the damaged folder was touched


def test_compact_draws_hold_what_later_commands_read(fits, tmp_path):
    """The default posterior.nc keeps hyper-parameters exactly and the study-level
    estimands to single precision, leaves out per-part estimand draws, and is smaller
    than the full one ('--keep-all-draws')."""
    import numpy as np

    from bayes_rr.io.fit_folder import load_fit, write_fit

    result = fits["crossed-logit"]
    compact = load_fit(write_fit(result, tmp_path / "compact"))
    full_dir = write_fit(result, tmp_path / "full", keep_all_draws=True)
    full = load_fit(full_dir)
    post = result.idata.posterior
    np.testing.assert_array_equal(compact.idata.posterior["sigma_part"], post["sigma_part"])
    name = "study__study__reproducibility_share"
    np.testing.assert_allclose(compact.idata["estimands"][name], result.estimands[name],
                               rtol=1e-6)  # fmt: skip
    assert "study__part__rr_variance" not in compact.idata["estimands"]
    assert "study__part__rr_variance" in full.idata["estimands"]
    size = (tmp_path / "compact" / "posterior.nc").stat().st_size
    assert size < 0.5 * (full_dir / "posterior.nc").stat().st_size
    assert "compact" in compact.summary["draws_stored"]
