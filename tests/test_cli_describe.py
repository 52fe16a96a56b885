"""The describe/demo commands and how bad input is refused (exit 2, one line, no traceback)."""

import hashlib
import json
import subprocess
import sys

import pytest
from helpers import write
from typer.testing import CliRunner

from bayes_rr import __version__
from bayes_rr.cli import app

runner = CliRunner()

GOOD = "part,appraiser,trial,call\n1,A,1,pass\n1,A,2,fail\n1,B,1,pass\n1,B,2,pass\n"


def run(*args):
    return runner.invoke(app, [str(a) for a in args])


def test_version():
    result = run("--version")
    assert result.exit_code == 0 and __version__ in result.output


def test_describe_json_schema(demo_csv):
    result = run("describe", demo_csv, "--json", "--prob", "0.9")
    assert result.exit_code == 0, result.output
    data = json.loads(result.stdout)
    assert data["prob"] == 0.9
    design = data["design"]
    for key in ("parts", "appraisers", "trials_per_cell_min", "trials_per_cell_max", "calls",
                "reject_share", "has_reference"):  # fmt: skip
        assert key in design
    for kind in ("plug_in", "corrected"):
        study = data["classical"][kind]["study"]
        for key in ("rr_variance", "repeatability_variance", "reproducibility_variance",
                    "reproducibility_share"):  # fmt: skip
            assert key in study
    per_part = data["classical"]["plug_in"]["per_part"]
    assert len(per_part) == design["parts"] and {"part", "rr_variance"} <= set(per_part[0])
    assert data["agreement"] and data["kappa"] and data["appraiser_differences"]
    for row in data["agreement"]:
        assert {i["method"] for i in row["intervals"]} == {"Clopper-Pearson exact", "Wilson score"}
        assert all(i["prob"] == 0.9 for i in row["intervals"])


def test_describe_tables(demo_csv):
    result = run("describe", demo_csv)
    assert result.exit_code == 0
    text = " ".join(result.output.split())
    assert "Moment estimates" in text
    assert "Classical agreement, appraiser by appraiser" in text
    assert "Appraisers two by two" in text


def test_describe_agreement_is_one_table_a_row_per_appraiser(demo_csv, monkeypatch):
    """One table, one row per appraiser (and one for all of them), every figure of that
    appraiser on its row; whole numbers at 80 columns (common practice: a table read
    across its rows)."""
    monkeypatch.setenv("COLUMNS", "80")
    result = run("describe", demo_csv)
    lines = result.output.splitlines()
    assert all(len(line) <= 80 for line in lines)
    start = next(i for i, line in enumerate(lines) if "appraiser by appraiser" in line)
    end = next(i for i in range(start, len(lines)) if "two by two" in lines[i])
    block = lines[start:end]
    for name in ("Ayla", "Bruno", "Chen"):
        row = next(line for line in block if line.strip().startswith(name))
        assert len(row.split()) == 7, row  # name and six figures on one line
    assert sum(line.strip().startswith("all") for line in block) == 1
    assert "Each appraiser against the reference" not in result.output


def test_demo_writes_data(tmp_path):
    result = run("demo", "--out", tmp_path / "d", "--describe-only")
    assert result.exit_code == 0, result.output
    assert "invented" in result.output.lower()
    assert (tmp_path / "d" / "demo_study.csv").exists()


def _bad_cases(tmp_path):
    big = "part," + ",".join(f"A_{k}" for k in range(1, 1002)) + "\n"
    big += "".join(f"P{i}," + ",".join(["0"] * 1001) + "\n" for i in range(1000))
    binary = tmp_path / "bin.csv"
    binary.write_bytes(b"\x00\x01\x02PK\x00")
    return {
        "missing file": (tmp_path / "nope.csv", "file not found"),
        "empty file": (write(tmp_path, "empty.csv", ""), "empty"),
        "binary file": (binary, "not a text file"),
        "not a table": (write(tmp_path, "one.csv", "hello\nworld\n"), "not a table"),
        "missing column": (
            write(tmp_path, "nocall.csv", "part,appraiser,trial,remark\n1,A,1,pass\n"),
            "columns found",
        ),
        "unknown labels": (
            write(tmp_path, "lab.csv", "part,appraiser,call\n1,A,maybe\n1,A,fail\n"),
            "'maybe' (1)",
        ),
        "mixed labels": (
            write(tmp_path, "mix.csv", "part,appraiser,call\n1,A,pass\n1,A,reject\n2,A,ok\n"),
            "unknown or mixed",
        ),
        "empty calls": (write(tmp_path, "emp.csv", GOOD + "2,A,1,\n"), "line 6"),
        "duplicate trial": (write(tmp_path, "dup.csv", GOOD + "1,A,1,fail\n"), "trial '1'"),
        "two references": (
            write(
                tmp_path,
                "ref.csv",
                "part,appraiser,call,reference\n1,A,pass,pass\n1,B,pass,fail\n",
            ),
            "2 different references",
        ),
        "too many calls": (write(tmp_path, "big.csv", big), "1,001,000 calls"),
    }


@pytest.mark.parametrize(
    "case",
    ["missing file", "empty file", "binary file", "not a table", "missing column",
     "unknown labels", "mixed labels", "empty calls", "duplicate trial", "two references",
     "too many calls"],
)  # fmt: skip
def test_bad_input_is_refused_cleanly(tmp_path, case):
    path, expected = _bad_cases(tmp_path)[case]
    before = path.read_bytes() if path.exists() else None
    result = run("describe", path)
    assert result.exit_code == 2, result.output
    message = result.stderr.strip()
    assert "\n" not in message, message
    assert message.startswith("error:") and expected in message, message
    assert "Traceback" not in result.output
    assert result.stdout == ""
    if before is not None:
        assert path.read_bytes() == before


def test_drop_missing_option(tmp_path):
    path = write(tmp_path, "emp.csv", GOOD + "2,A,1,\n")
    result = run("describe", path, "--drop-missing", "--json")
    assert result.exit_code == 0
    assert "dropped 1" in json.loads(result.stdout)["design"]["notes"][0]


def test_real_process_exit_code_and_stderr(tmp_path):
    path = write(tmp_path, "lab.csv", "part,appraiser,call\n1,A,maybe\n1,A,fail\n")
    digest = hashlib.sha256(path.read_bytes()).hexdigest()
    proc = subprocess.run(
        [sys.executable, "-m", "bayes_rr.cli", "describe", str(path)],
        capture_output=True,
        text=True,
        check=False,
    )
    assert proc.returncode == 2
    assert proc.stderr.count("\n") == 1 and "Traceback" not in proc.stderr
    assert "--reject-label" in proc.stderr
    assert hashlib.sha256(path.read_bytes()).hexdigest() == digest


def test_explicit_wide_mapping(tmp_path):
    path = write(
        tmp_path, "w.csv", "part,Op one first,Op one second,Other\n1,ok,ng,ok\n2,ok,ok,ng\n"
    )
    result = run("describe", path, "--layout", "wide", "--json",
                 "--wide-column", "Op one first=Ann:1", "--wide-column", "Op one second=Ann:2",
                 "--wide-column", "Other=Bo:1")  # fmt: skip
    assert result.exit_code == 0, result.output
    design = json.loads(result.stdout)["design"]
    assert design["appraiser_names"] == ["Ann", "Bo"] and design["calls"] == 6
    bad = run("describe", path, "--wide-column", "nonsense")
    assert bad.exit_code == 2 and "COLUMN=APPRAISER:TRIAL" in bad.stderr


def test_bundled_demo_data_is_what_the_script_writes():
    # The demo study is reproducible from its seeded script, and both copies agree.
    import importlib.util
    from pathlib import Path

    root = Path(__file__).resolve().parent.parent
    spec = importlib.util.spec_from_file_location("make_demo_data", root / "examples" /
                                                  "make_demo_data.py")  # fmt: skip
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    text = module.demo_text()
    assert text.startswith("# INVENTED DATA")
    for copy in (root / "examples" / "demo_study.csv", root / "bayes_rr" / "demo" /
                 "demo_study.csv"):  # fmt: skip
        assert copy.read_text() == text


@pytest.mark.parametrize("width", [40, 60, 80, 120])
def test_terminal_tables_never_cut_a_value(fits, small_sim, width):
    """At any width the fit's and describe's tables wrap or stack their cells; none ends
    in an ellipsis (rich's mark of a cut value)."""
    from bayes_rr import cli
    from bayes_rr.io.fit_folder import summary_document
    from bayes_rr.study.classical import classical_statistics
    from bayes_rr.study.describe import describe_study

    result = fits["crossed-logit"]
    classical = classical_statistics(small_sim.study).as_dict()
    old = cli.out.width
    cli.out.width = width
    try:
        with cli.out.capture() as captured:
            cli.print_fit(summary_document(result), classical)
            cli.print_description(describe_study(small_sim.study))
    finally:
        cli.out.width = old
    text = captured.get()
    assert "…" not in text
    assert "0.0" in text  # the tables were printed


@pytest.mark.parametrize("command", ["describe", "prior", "models", "fit", "check", "compare",
                                     "report", "demo", "plan", "calibrate", "batch"])  # fmt: skip
def test_help_at_80_columns_cuts_no_word_and_shows_brackets(command, monkeypatch):
    """Every command's --help in an 80-column terminal: no line wider, no word cut short
    with an ellipsis, and TOML tables such as [[statement]] printed as written."""
    monkeypatch.setenv("COLUMNS", "80")
    result = runner.invoke(app, [command, "--help"])
    assert result.exit_code == 0, result.output
    lines = result.output.splitlines()
    assert max(len(line) for line in lines) <= 80
    assert "…" not in result.output
    if command == "prior":
        assert "[[statement]]" in result.output
