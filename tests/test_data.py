"""Reading study files: layouts, labels, validation errors, invariances."""

import hashlib

import numpy as np
import pandas as pd
import pytest
from helpers import write
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from bayes_rr.core.errors import DataError
from bayes_rr.core.jsonio import jsonable
from bayes_rr.study.data import ReadOptions, read_study, study_from_frame
from bayes_rr.study.describe import describe_study

TIDY = """part,appraiser,trial,call,reference
P1,A,1,pass,pass
P1,A,2,pass,pass
P1,B,1,fail,pass
P1,B,2,pass,pass
P2,A,1,fail,fail
P2,A,2,fail,fail
P2,B,1,fail,fail
P2,B,2,fail,fail
"""

WIDE = """Part;A_1;A_2;B-1;B trial 2;Reference
P1;pass;pass;fail;pass;pass
P2;fail;fail;fail;fail;fail
"""


def test_tidy_and_wide_give_the_same_study(tmp_path):
    tidy = read_study(write(tmp_path, "t.csv", TIDY))
    wide = read_study(write(tmp_path, "w.csv", WIDE))
    assert tidy.sha256 == wide.sha256
    assert tidy.cells[["part", "appraiser", "n", "s"]].equals(
        wide.cells[["part", "appraiser", "n", "s"]]
    )
    assert tidy.reference.tolist() == [0, 1]
    assert tidy.cells["s"].tolist() == [0, 1, 2, 2]


def test_bom_tabs_and_renamed_columns(tmp_path):
    text = "\ufeffItem\tInspector\tRound\tVerdict\n1\tX\t1\tOK\n1\tX\t2\tNG\n2\tY\t1\tok\n"
    path = write(tmp_path, "b.tsv", text)
    opts = ReadOptions(columns={"appraiser": "Inspector", "trial": "Round", "call": "Verdict"})
    study = read_study(path, opts)
    assert study.parts == ("1", "2") and study.appraisers == ("X", "Y")
    assert study.calls["call"].tolist() == [0, 1, 0]


def test_xlsx_with_sheet(tmp_path):
    frame = pd.read_csv(write(tmp_path, "t.csv", TIDY))
    path = tmp_path / "study.xlsx"
    with pd.ExcelWriter(path) as writer:
        pd.DataFrame({"x": [1]}).to_excel(writer, sheet_name="notes", index=False)
        frame.to_excel(writer, sheet_name="calls", index=False)
    study = read_study(path, ReadOptions(sheet="calls"))
    assert study.sha256 == read_study(tmp_path / "t.csv").sha256
    with pytest.raises(DataError, match=r"no sheet 'nope'.*calls"):
        read_study(path, ReadOptions(sheet="nope"))


@pytest.mark.parametrize(
    ("accept", "reject"),
    [("0", "1"), ("Pass", "FAIL"), ("go", "No-Go"), ("good", "bad"), ("OK", "n g"),
     ("Conforming", "non-conforming"), ("accept", "reject"), ("OK", "NOK"),
     ("i.O.", "n.i.O."), ("IO", "NIO"), ("GO", "NOGO")],
)  # fmt: skip
def test_vocabularies(tmp_path, accept, reject):
    text = f"part,appraiser,call\n1,A,{accept}\n1,A,{reject}\n2,A,{reject}\n"
    study = read_study(write(tmp_path, "v.csv", text))
    assert study.calls["call"].tolist() == [0, 1, 1]
    assert any("file order" in note for note in study.notes)


def test_declared_reject_label(tmp_path):
    text = "part,appraiser,call\n1,A,crack\n1,A,none\n2,A,crack\n"
    path = write(tmp_path, "d.csv", text)
    with pytest.raises(DataError, match="unknown or mixed call labels"):
        read_study(path)
    study = read_study(path, ReadOptions(reject_label="Crack"))
    assert study.calls["call"].tolist() == [1, 0, 1]


def test_declared_reject_label_with_several_others(tmp_path):
    text = "part,appraiser,call\n1,A,crack\n1,A,none\n2,A,fine\n"
    path = write(tmp_path, "d.csv", text)
    with pytest.raises(DataError, match="--accept-label"):
        read_study(path, ReadOptions(reject_label="crack"))
    study = read_study(path, ReadOptions(reject_label="crack", accept_labels=("none", "fine")))
    assert study.calls["call"].sum() == 1
    with pytest.raises(DataError, match="neither the reject label"):
        read_study(path, ReadOptions(reject_label="crack", accept_labels=("none",)))


def test_unbalanced_and_missing_cells(tmp_path):
    text = "part,appraiser,trial,call\n1,A,1,1\n1,A,2,1\n1,B,1,0\n2,A,1,0\n"
    study = read_study(write(tmp_path, "u.csv", text))
    assert len(study.cells) == 3
    assert study.design()["empty_cells"] == 1
    assert study.design()["balanced"] is False


def test_drop_missing_reports_lines(tmp_path):
    text = "part,appraiser,trial,call\n1,A,1,1\n1,A,2,\n2,A,1,0\n2,A,2,\n"
    path = write(tmp_path, "m.csv", text)
    with pytest.raises(DataError, match=r"2 empty call\(s\) at lines 3, 5.*--drop-missing"):
        read_study(path)
    study = read_study(path, ReadOptions(drop_missing=True))
    assert study.n_calls == 2
    assert any("dropped 2" in n for n in study.notes)


def test_line_numbers_count_comment_lines(tmp_path):
    text = "# a comment\npart,appraiser,trial,call\n1,A,1,1\n1,A,2,\n"
    with pytest.raises(DataError, match="line 4"):
        read_study(write(tmp_path, "c.csv", text))


# ---------------------------------------------------------------------------
# property tests: nothing about the file's form changes a result


@st.composite
def studies(draw):
    n_parts = draw(st.integers(2, 5))
    n_app = draw(st.integers(2, 3))
    n_trials = draw(st.integers(1, 3))
    rows = []
    for i in range(n_parts):
        for j in range(n_app):
            for k in range(n_trials):
                rows.append((f"P{i + 1}", f"Op{j + 1}", str(k + 1), draw(st.booleans())))
    reference = [draw(st.booleans()) for _ in range(n_parts)]
    return rows, reference, n_trials


def _tidy_frame(rows, reference, accept="pass", reject="fail"):
    return pd.DataFrame(
        {
            "part": [r[0] for r in rows],
            "appraiser": [r[1] for r in rows],
            "trial": [r[2] for r in rows],
            "call": [reject if r[3] else accept for r in rows],
            "reference": [reject if reference[int(r[0][1:]) - 1] else accept for r in rows],
        }
    )


def _result(study):
    out = jsonable(describe_study(study))
    out["design"].pop("source")
    return out


@settings(max_examples=25, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(studies(), st.randoms(use_true_random=False))
def test_row_order_label_case_and_layout_do_not_change_results(data, rnd):
    rows, reference, _ = data
    base = study_from_frame(_tidy_frame(rows, reference))
    expected = _result(base)

    shuffled = rows[:]
    rnd.shuffle(shuffled)
    assert _result(study_from_frame(_tidy_frame(shuffled, reference))) == expected

    recased = study_from_frame(_tidy_frame(rows, reference, accept=" PASS", reject="Fail "))
    assert _result(recased) == expected

    tidy = _tidy_frame(rows, reference)
    wide = tidy.pivot_table(
        index=["part", "reference"], columns=["appraiser", "trial"], values="call",
        aggfunc="first",
    )  # fmt: skip
    wide.columns = [f"{a}_{t}" for a, t in wide.columns]
    wide = wide.reset_index().sample(frac=1.0, random_state=rnd.randint(0, 1000))
    wide_study = study_from_frame(wide)
    assert wide_study.sha256 == base.sha256
    assert _result(wide_study) == expected


def test_hash_changes_with_one_call(tmp_path):
    a = read_study(write(tmp_path, "a.csv", TIDY))
    b = read_study(write(tmp_path, "b.csv", TIDY.replace("P1,A,1,pass", "P1,A,1,fail")))
    assert a.sha256 != b.sha256


def test_input_file_is_never_modified(tmp_path, demo_csv):
    path = tmp_path / "copy.csv"
    path.write_bytes(demo_csv.read_bytes())
    before = hashlib.sha256(path.read_bytes()).hexdigest()
    read_study(path)
    assert hashlib.sha256(path.read_bytes()).hexdigest() == before


def test_demo_is_marked_invented_and_realistic(demo_csv):
    assert "INVENTED" in demo_csv.read_text().splitlines()[0]
    study = read_study(demo_csv)
    assert 30 <= len(study.parts) <= 60 and len(study.appraisers) == 3
    assert study.has_reference
    rates = study.cells.groupby("part")[["s", "n"]].sum()
    share = rates["s"] / rates["n"]
    assert ((share > 0.1) & (share < 0.9)).sum() >= 5  # parts near the limit
    assert np.isin(study.cells["n"], [2, 3]).all()
