"""Awkward study files: each is read right or refused in one line naming what to do.

Every CLI case asserts the exit code, one line on stderr without a traceback and
the input's SHA-256 unchanged.
"""

import hashlib
import json

import pytest
from helpers import write
from typer.testing import CliRunner

from bayes_rr.cli import app
from bayes_rr.core.errors import DataError
from bayes_rr.study.data import read_study

runner = CliRunner()
HEAD = "part,appraiser,trial,call\n"


def sha(path):
    return hashlib.sha256(path.read_bytes()).hexdigest()


def describe(path, *extra):
    before = sha(path)
    result = runner.invoke(app, ["describe", str(path), *extra])
    assert sha(path) == before
    return result


def refused(path, *extra) -> str:
    result = describe(path, *extra)
    assert result.exit_code == 2, result.output
    assert isinstance(result.exception, SystemExit), result.exception
    message = result.stderr.strip()
    assert message and "\n" not in message and "Traceback" not in result.output, message
    return message


def test_row_with_more_fields_than_the_header_is_refused_with_its_line(tmp_path):
    path = write(tmp_path, "s.csv", "part,appraiser,call\n1,A,pass\n1,B,pass,extra\n2,A,fail\n")
    message = refused(path)
    assert "line 3 has 4" in message and "header has 3" in message


def test_row_with_fewer_fields_is_refused(tmp_path):
    path = write(tmp_path, "s.csv", "part,appraiser,call\n1,A,pass\n1,B\n")
    assert "line 3 has 2" in refused(path)


def test_trailing_delimiters_are_padding_not_fields(tmp_path):
    path = write(tmp_path, "s.csv", "part,appraiser,call,\n1,A,pass,\n1,B,fail,\n")
    assert read_study(path).n_calls == 2


def test_line_numbers_count_quoted_line_breaks(tmp_path):
    text = 'part,appraiser,call\n"P\n1",A,pass\n2,A,pass\n3,A,\n'
    with pytest.raises(DataError, match="line 5"):
        read_study(write(tmp_path, "q.csv", text))


def test_trial_labels_are_compared_as_numbers(tmp_path):
    path = write(tmp_path, "t.csv", HEAD + "1,A,02,pass\n1,A,2,fail\n")
    message = refused(path)
    assert "share a (part, appraiser, trial)" in message and "trial '2'" in message
    ok = read_study(write(tmp_path, "u.csv", HEAD + "1,A,01,pass\n1,A,2,fail\n1,B,1,pass\n"))
    assert set(ok.calls["trial"]) == {"1", "2"}


@pytest.mark.parametrize(
    "header",
    ["part,appraiser,call,call", "part,Ana_1,Ana_1,Ben_1"],
)
def test_duplicate_column_names_are_refused_naming_them(tmp_path, header):
    width = header.count(",") + 1
    path = write(tmp_path, "d.csv", header + "\n" + ",".join(["1"] + ["pass"] * (width - 1)) + "\n")
    message = refused(path)
    name = "call" if "call,call" in header else "Ana_1"
    assert f"'{name}'" in message and "more than once" in message


@pytest.mark.parametrize("name", ["Na", "NA", "None", "null", "nan", "N/A"])
def test_names_that_look_like_missing_values_are_names(tmp_path, name):
    text = HEAD + f"1,{name},1,pass\n1,{name},2,fail\n1,Bo,1,pass\n"
    study = read_study(write(tmp_path, "n.csv", text))
    assert name in study.appraisers and study.n_calls == 3


def test_only_a_truly_empty_cell_is_a_missing_call(tmp_path):
    message = refused(write(tmp_path, "m.csv", HEAD + "1,A,1,pass\n1,A,2,NA\n"))
    assert "'NA' (1)" in message  # an unknown label, listed, not silently dropped


def test_markup_like_names_and_labels_print_literally(tmp_path):
    text = "part,appraiser,call\n[bold]x,[/],[/]\n[bold]x,B,ok\n2,[/],ok\n2,B,[/]\n"
    path = write(tmp_path, "m.csv", text)
    result = describe(path, "--reject-label", "[/]")
    assert result.exit_code == 0, result.output
    assert "[/]" in result.stdout  # the appraiser's name, printed as it is
    bad = write(tmp_path, "bad.csv", "part,appraiser,call\n1,[/],[red]maybe\n1,B,ok\n")
    assert "[red]maybe" in refused(bad)


def test_unused_columns_are_listed_in_terminal_and_json(tmp_path):
    text = HEAD.strip() + ",Comment\n1,A,1,pass,fine\n1,A,2,fail,smudge\n"
    path = write(tmp_path, "c.csv", text)
    result = describe(path, "--json")
    assert json.loads(result.stdout)["design"]["ignored_columns"] == ["Comment"]
    assert "Comment" in " ".join(describe(path).stdout.split())


def test_master_and_round_columns_are_recognised(tmp_path):
    text = "Part,Inspector,Round,Result,Master\n" + "".join(
        f"{p},{a},{r},{c},{m}\n"
        for p, m in (("1", "pass"), ("2", "fail"))
        for a in ("A", "B")
        for r, c in (("1", m), ("2", "pass"))
    )
    study = read_study(write(tmp_path, "m.csv", text))
    assert study.has_reference and study.reference.to_dict() == {"1": 0, "2": 1}
    assert set(study.calls["trial"]) == {"1", "2"}
    assert study.ignored_columns == ()


def test_unrecognised_wide_column_error_names_the_mapping_options(tmp_path):
    path = write(tmp_path, "w.csv", "part,Ana_1,Ana_2,Gauge check\n1,pass,pass,pass\n")
    message = refused(path)
    assert "--wide-column" in message and "--reference-col" in message


def _workbook(path, sheets):
    import openpyxl

    book = openpyxl.Workbook()
    book.remove(book.active)
    for name, rows in sheets.items():
        sheet = book.create_sheet(name)
        for row in rows:
            sheet.append(row)
    book.save(path)
    return path


def test_workbook_whose_first_sheet_is_not_the_data_names_the_sheet(tmp_path):
    path = _workbook(
        tmp_path / "s.xlsx",
        {
            "Cover": [["Study of the crimp check"], ["prepared by", "QA"]],
            "Data": [["part", "appraiser", "call"], [1, "A", "pass"], [1, "B", "fail"]],
        },
    )
    message = refused(path)
    assert "'Cover'" in message and "--sheet" in message and "'Data'" in message
    assert describe(path, "--sheet", "Data").exit_code == 0


def test_formulas_without_saved_values_are_named(tmp_path):
    path = _workbook(
        tmp_path / "f.xlsx",
        {"Calls": [["part", "appraiser", "call"], [1, "A", "pass"], [2, "A", '=IF(1,"pass")']]},
    )
    message = refused(path)
    assert "formulas without saved values" in message and "C3" in message


@pytest.mark.parametrize(
    ("name", "content", "expected"),
    [
        ("secret.xlsx", b"\xd0\xcf\x11\xe0\xa1\xb1\x1a\xe1" + b"\x00" * 600, "encrypted"),
        ("study.csv", b"%PDF-1.7\n1 0 obj\n", "a PDF document"),
        ("study.xlsx", b"PK\x03\x04" + b"\x00" * 100, "not an XLSX file"),
        ("study.csv", b"\x1f\x8b\x08\x00" + b"\x00" * 50, "gzip"),
    ],
)
def test_renamed_or_encrypted_files_say_what_they_are(tmp_path, name, content, expected):
    path = tmp_path / name
    path.write_bytes(content)
    assert expected in refused(path)


def test_sheet_option_on_a_csv_is_refused(tmp_path):
    path = write(tmp_path, "s.csv", HEAD + "1,A,1,pass\n")
    assert "not an XLSX workbook" in refused(path, "--sheet", "Data")
