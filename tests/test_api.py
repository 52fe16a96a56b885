"""The Python face (``import bayes_rr as brr``): a study from a DataFrame, a fit, tidy
frames, InferenceData, save and load, the notebook display."""

import subprocess
import sys

import numpy as np
import pandas as pd
import pytest

import bayes_rr as brr
from bayes_rr.core.errors import DataError, OutputError, SpecError

FAST = {"draws": 1000, "tune": 1000, "chains": 4, "seed": 3}
NUMBERS = ("mean", "median", "sd", "lower", "upper", "r_hat", "ess_bulk", "ess_tail")


def _frame(sim, names=None) -> pd.DataFrame:
    """The simulated study as a user's DataFrame: own column names, labels as text."""
    calls = sim.study.calls.copy()
    status = dict(zip(sim.study.parts, sim.study.reference.to_numpy(), strict=True))
    frame = pd.DataFrame(
        {
            "Part No": calls["part"],
            "Inspector": calls["appraiser"].map(names or (lambda a: a)),
            "Round": calls["trial"],
            "Verdict": np.where(calls["call"].astype(int) == 1, "fail", "pass"),
            "Known": [("fail" if status[p] else "pass") for p in calls["part"]],
        }
    )
    return frame


@pytest.fixture(scope="module")
def face_fit(small_sim):
    study = brr.read_study(
        _frame(small_sim), part="Part No", appraiser="Inspector", trial="Round", call="Verdict",
        reference="Known",
    )  # fmt: skip
    return brr.fit(study, **FAST)


def test_importing_the_package_loads_neither_pymc_nor_pandas():
    code = "import sys, bayes_rr; print('pymc' in sys.modules, 'pandas' in sys.modules)"
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.split() == ["False", "False"]


def test_a_dataframe_reads_as_the_same_study_as_its_file(small_sim, tmp_path):
    frame = _frame(small_sim)
    path = tmp_path / "study.csv"
    frame.to_csv(path, index=False)
    columns = {"part": "Part No", "appraiser": "Inspector", "trial": "Round", "call": "Verdict",
               "reference": "Known"}  # fmt: skip
    from_frame = brr.read_study(frame, **columns)
    from_file = brr.read_study(path, **columns)
    assert from_frame.sha256 == from_file.sha256
    assert list(from_frame.parts) == list(from_file.parts)
    # the calls survive the user's labels: reject counts of each cell as simulated
    assert from_frame.cells["s"].sum() == small_sim.study.cells["s"].sum()


def test_read_study_refuses_what_is_neither_a_path_nor_a_frame():
    with pytest.raises(DataError, match="expected a file path or a pandas DataFrame"):
        brr.read_study([1, 2, 3])


def test_describe_gives_tidy_classical_frames(small_sim):
    description = brr.describe(small_sim.study)
    table = description.by_appraiser()
    assert list(table.columns) == ["appraiser", "statistic", "estimate", "lower", "upper"]
    own = table[(table["statistic"] == "own") & table["appraiser"].notna()]
    assert set(own["appraiser"]) == set(small_sim.study.appraisers)
    assert ((own["lower"] <= own["estimate"]) & (own["estimate"] <= own["upper"])).all()
    moments = description.moments()
    assert {"plug_in", "corrected"} <= set(moments["estimate"])


def test_summary_columns_and_dtypes(face_fit):
    summary = face_fit.summary()
    assert list(summary.columns[:5]) == ["key", "level", "scope", "appraiser", "part"]
    for column in NUMBERS:
        assert summary[column].dtype == np.float64, column
    assert set(summary["level"]) >= {"study", "part", "appraiser", "system"}
    assert set(summary["scope"].dropna()) == {"study", "population"}
    # the summary is the fit's own rows, not a recomputation
    assert len(summary) == len(face_fit.result.estimand_rows)
    assert (summary["lower"] <= summary["upper"]).all()


def test_rates_hold_both_wrong_call_rates(face_fit):
    rates = face_fit.rates()
    assert {"false_reject_rate", "false_accept_rate"} <= set(rates["key"])
    per_appraiser = rates[(rates["level"] == "appraiser") & (rates["scope"] == "study")]
    assert set(per_appraiser["appraiser"]) == set(face_fit.study.appraisers)
    assert rates["mean"].between(0, 1).all()


def test_rates_of_a_model_without_them_say_which_model_gives_them(fits, small_sim):
    from bayes_rr.api.fitting import Fit
    from bayes_rr.io.fit_folder import summary_document

    result = fits["crossed-logit"]
    plain = Fit(result.study, result.spec, summary_document(result), {}, result.provenance,
                result.idata, result=result)  # fmt: skip
    with pytest.raises(SpecError, match="reference-logit"):
        plain.rates()


def test_posterior_is_inference_data_with_the_estimands(face_fit):
    groups = set(face_fit.posterior.groups())
    assert {"posterior", "log_likelihood", "estimands", "observed_data"} <= groups
    assert "study__system__false_reject_rate" in face_fit.posterior["estimands"]


def test_save_then_load_gives_the_same_summary(face_fit, tmp_path):
    folder = face_fit.save(tmp_path / "fit")
    loaded = brr.load(folder)
    pd.testing.assert_frame_equal(loaded.summary(), face_fit.summary())
    assert loaded.folder == folder
    with pytest.raises(OutputError, match="saved there already"):
        loaded.save(tmp_path / "again")


def test_check_and_report_from_python(face_fit, tmp_path):
    checks = face_fit.check(draws=100)
    assert checks["posterior_predictive"]["statistics"]
    path = face_fit.report(tmp_path / "report.html", title="Face test")
    text = path.read_text(encoding="utf-8")
    assert "Face test" in text and "(not saved)" in text
    assert not list(tmp_path.glob("bayes-rr-*")), "the temporary fit folder was left behind"


def test_notebook_display_escapes_user_strings(small_sim, tmp_path):
    names = {a: f"<script>{a}</script>&" for a in small_sim.study.appraisers}
    path = tmp_path / "<i>odd&.csv"
    _frame(small_sim, names).to_csv(path, index=False)
    study = brr.read_study(path, part="Part No", appraiser="Inspector", trial="Round",
                           call="Verdict", reference="Known")  # fmt: skip
    fitted = brr.fit(study, model="reference-logit", **FAST)
    html = fitted._repr_html_()
    assert "&lt;i&gt;odd&amp;.csv" in html
    assert "<script>" not in html
    assert fitted.converged and "<table" in html  # the answer table, not only the header
    assert "<script>" in repr(fitted.summary()["appraiser"].dropna().tolist())


def test_plan_request_takes_counts_as_numbers_lists_or_text():
    from bayes_rr.api.planning import plan_request

    by_list = plan_request("beta-binomial", parts=[10, 20], appraisers=3, trials=(2,))
    by_text = plan_request("beta-binomial", parts="10,20", appraisers="3", trials="2")
    assert by_list.designs == by_text.designs
    assert [(d.parts, d.appraisers, d.trials) for d in by_list.designs] == [(10, 3, 2), (20, 3, 2)]
    with pytest.raises(SpecError, match="parts"):
        plan_request("beta-binomial", parts=1)
