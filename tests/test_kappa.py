"""Fleiss' and Cohen's kappa against Fleiss (1971), Cohen (1960) and statsmodels."""

import numpy as np
import pytest
from statsmodels.stats.inter_rater import aggregate_raters, cohens_kappa
from statsmodels.stats.inter_rater import fleiss_kappa as sm_fleiss_kappa

from bayes_rr.study.kappa import cohen_kappa, fleiss_kappa

# Fleiss (1971), Psychological Bulletin 76:378-382: 30 patients x 6 psychiatrists x
# 5 diagnoses, as the `diagnoses` array of statsmodels' test file
# statsmodels/stats/tests/test_inter_rater.py (category totals 26, 26, 30, 55, 43).
DIAGNOSES = np.array(
    [
        [4, 4, 4, 4, 4, 4], [2, 2, 2, 5, 5, 5], [2, 3, 3, 3, 3, 5], [5, 5, 5, 5, 5, 5],
        [2, 2, 2, 4, 4, 4], [1, 1, 3, 3, 3, 3], [3, 3, 3, 3, 5, 5], [1, 1, 3, 3, 3, 4],
        [1, 1, 4, 4, 4, 4], [5, 5, 5, 5, 5, 5], [1, 4, 4, 4, 4, 4], [1, 2, 4, 4, 4, 4],
        [2, 2, 2, 3, 3, 3], [1, 4, 4, 4, 4, 4], [2, 2, 4, 4, 4, 5], [3, 3, 3, 3, 3, 5],
        [1, 1, 1, 4, 5, 5], [1, 1, 1, 1, 1, 2], [2, 2, 4, 4, 4, 4], [1, 3, 3, 5, 5, 5],
        [5, 5, 5, 5, 5, 5], [2, 4, 4, 4, 4, 4], [2, 2, 4, 5, 5, 5], [1, 1, 4, 4, 4, 4],
        [1, 4, 4, 4, 4, 5], [2, 2, 2, 2, 2, 4], [1, 1, 1, 1, 5, 5], [2, 2, 4, 4, 4, 4],
        [1, 3, 3, 3, 3, 3], [5, 5, 5, 5, 5, 5],
    ]
)  # fmt: skip


@pytest.fixture(scope="module")
def fleiss_table():
    table, _ = aggregate_raters(DIAGNOSES)
    assert table.sum(axis=0).tolist() == [26, 26, 30, 55, 43]
    return table


def test_fleiss_1971_kappa(fleiss_table):
    result = fleiss_kappa(fleiss_table)
    assert result.kappa == pytest.approx(0.430, abs=5e-4)  # Fleiss (1971), printed [2]
    assert result.kappa == pytest.approx(sm_fleiss_kappa(fleiss_table), abs=1e-12)  # statsmodels
    assert result.kappa == pytest.approx(0.43024452006, abs=1e-10)  # [C]


def test_fleiss_standard_errors(fleiss_table):
    result = fleiss_kappa(fleiss_table)
    # Fleiss (1971) SE formula: ~0.028 printed [2], 0.027503 computed [C].
    assert result.se_fleiss_1971 == pytest.approx(0.027503, abs=1e-6)
    # Null SE of Fleiss, Nee & Landis (1979): 0.024374, z = 17.65183 [C].
    assert result.se_null_fnl_1979 == pytest.approx(0.024374, abs=1e-6)
    assert result.z == pytest.approx(17.65183, abs=1e-4)


@pytest.mark.parametrize(
    ("category", "expected"), [(0, 0.2448), (1, 0.2448), (2, 0.5200), (3, 0.4711), (4, 0.5661)]
)
def test_fleiss_binary_category_kappas(fleiss_table, category, expected):
    # Each category against the rest (binary), docs/statistics.md (outside reference values) [C];
    # Fleiss (1971) printed .248 .248 .517 .470 .565 from rounded p_j [2].
    binary = np.column_stack(
        [fleiss_table.sum(axis=1) - fleiss_table[:, category], fleiss_table[:, category]]
    )
    result = fleiss_kappa(binary)
    assert result.kappa == pytest.approx(expected, abs=6e-5)
    assert result.kappa == pytest.approx(sm_fleiss_kappa(binary), abs=1e-12)  # statsmodels


def test_fleiss_10_subjects_14_raters_statsmodels_table():
    # statsmodels test_inter_rater.py table1 (10 subjects x 14 raters): 0.210 [S].
    table1 = np.array(
        [
            [0, 0, 0, 0, 14], [0, 2, 6, 4, 2], [0, 0, 3, 5, 6], [0, 3, 9, 2, 0],
            [2, 2, 8, 1, 1], [7, 7, 0, 0, 0], [3, 2, 6, 3, 0], [2, 5, 3, 2, 2],
            [6, 5, 2, 1, 0], [0, 2, 2, 3, 7],
        ]
    )  # fmt: skip
    assert fleiss_kappa(table1).kappa == pytest.approx(0.210, abs=5e-4)


COHEN_1960_TABLE_2 = np.array([[88, 14, 18], [10, 40, 10], [2, 6, 12]])


def test_cohen_1960_table_2():
    result = cohen_kappa(COHEN_1960_TABLE_2)
    # Cohen (1960) printed kappa .492, SE .055 [2]; Cohen's SE formula 0.054922 [C].
    assert result.kappa == pytest.approx(0.492, abs=5e-4)
    assert result.se_cohen_1960 == pytest.approx(0.054922, abs=1e-6)
    assert result.se_cohen_1960 == pytest.approx(0.055, abs=5e-4)
    # The printed CI .384-.600 is kappa +- 1.96 SE with Cohen's SE.
    assert result.kappa - 1.96 * result.se_cohen_1960 == pytest.approx(0.384, abs=1e-3)
    assert result.kappa + 1.96 * result.se_cohen_1960 == pytest.approx(0.600, abs=1e-3)


def test_cohen_matches_statsmodels_cohens_kappa():
    # statsmodels cohens_kappa: std_kappa is Fleiss-Cohen-Everitt (1969), std_kappa0 null.
    ref = cohens_kappa(COHEN_1960_TABLE_2)
    result = cohen_kappa(COHEN_1960_TABLE_2)
    assert result.kappa == pytest.approx(ref.kappa, abs=1e-12)
    assert result.se_fce_1969 == pytest.approx(ref.std_kappa, abs=1e-10)
    assert result.se_null == pytest.approx(ref.std_kappa0, abs=1e-10)
    assert result.se_fce_1969 == pytest.approx(0.051002, abs=1e-6)  # [C]
    assert result.se_null == pytest.approx(0.051979, abs=1e-6)  # [C]


def test_cohen_statsmodels_unweighted_test_case():
    # statsmodels TestUnweightedCohens, table [[0,4,1],[0,8,0],[0,1,5]] [S].
    result = cohen_kappa([[0, 4, 1], [0, 8, 0], [0, 1, 5]])
    assert result.kappa == pytest.approx(0.4842, abs=5e-5)
    assert result.se_fce_1969 == pytest.approx(0.1380, abs=5e-5)
    assert result.se_null == pytest.approx(0.1484, abs=5e-5)
    assert result.z == pytest.approx(3.2626, abs=5e-5)
    low = result.kappa - 1.959964 * result.se_fce_1969
    upp = result.kappa + 1.959964 * result.se_fce_1969
    assert (low, upp) == pytest.approx((0.2137, 0.7547), abs=5e-5)


@pytest.mark.parametrize("seed", range(5))
def test_binary_cohen_random_tables_match_statsmodels(seed):
    table = np.random.default_rng(seed).integers(1, 40, size=(2, 2))
    ref = cohens_kappa(table)
    result = cohen_kappa(table)
    assert (result.kappa, result.se_fce_1969, result.se_null) == pytest.approx(
        (ref.kappa, ref.std_kappa, ref.std_kappa0), abs=1e-10
    )


def test_degenerate_tables_raise():
    with pytest.raises(ValueError, match="one category"):
        fleiss_kappa([[3, 0], [2, 0]])
    with pytest.raises(ValueError, match="one category"):
        cohen_kappa([[5, 0], [0, 0]])


# ---------------------------------------------------------------------------
# intervals and trial labels (issue: kappa SEs and trial pairing)


def _study(seed: int, trials: int = 3):
    from bayes_rr.simulation.known_truth import simulate_crossed_logit

    return simulate_crossed_logit(
        25, 3, trials, mu=0.0, sigma_part=1.5, sigma_appraiser=0.5, sigma_interaction=0.4,
        seed=seed,
    ).study  # fmt: skip


def _relabel_trials(study, seed: int):
    """The same calls with trial numbers shuffled within every cell."""
    from bayes_rr.study.data import build_study

    rng = np.random.default_rng(seed)
    calls = study.calls.copy()
    for _, index in calls.groupby(["part", "appraiser"]).groups.items():
        calls.loc[index, "trial"] = rng.permutation(calls.loc[index, "trial"].to_numpy())
    return build_study(calls, source="relabelled")


@pytest.mark.parametrize("seed", [1, 2, 3, 4])
def test_cohen_pairs_do_not_depend_on_trial_labels(seed):
    """Property: relabelling trials within cells leaves every pair's kappa unchanged
    (trial-matched pairing moved it from 0.20 to 0.50 on one study)."""
    from bayes_rr.study.kappa import kappas

    study = _study(seed)
    before = {
        (r.appraiser, r.other): r.value for r in kappas(study)[0] if r.kind == "appraiser_pair"
    }
    after = {(r.appraiser, r.other): r.value for r in kappas(_relabel_trials(study, seed))[0]
             if r.kind == "appraiser_pair"}  # fmt: skip
    assert before.keys() == after.keys() and before
    for key, value in before.items():
        assert after[key].kappa == pytest.approx(value.kappa, abs=1e-12)
        assert after[key].lower == pytest.approx(value.lower, abs=1e-12)


def test_cohen_pairs_with_one_trial_match_statsmodels():
    """One trial each: the all-pairings table is the table of paired calls
    (statsmodels.stats.inter_rater.cohens_kappa)."""
    from bayes_rr.study.kappa import kappas

    study = _study(5, trials=1)
    wide = study.calls.pivot_table(index="part", columns="appraiser", values="call")
    for row in (r for r in kappas(study)[0] if r.kind == "appraiser_pair"):
        table = pd_crosstab(wide[row.appraiser], wide[row.other])
        assert row.value.kappa == pytest.approx(cohens_kappa(table).kappa, abs=1e-12)


def pd_crosstab(x, y) -> np.ndarray:
    table = np.zeros((2, 2))
    for a, b in zip(x.astype(int), y.astype(int), strict=True):
        table[a, b] += 1
    return table


def test_fleiss_bootstrap_interval_matches_a_plain_bootstrap():
    """Our vectorised bootstrap over parts against a loop over resampled tables scored
    by statsmodels.stats.inter_rater.fleiss_kappa (two Monte Carlo runs: agree within
    0.03)."""
    from bayes_rr.study.kappa import fleiss_kappa

    study = _study(6)
    per_part = study.cells.groupby("part")[["n", "s"]].sum()
    counts = np.column_stack([per_part["n"] - per_part["s"], per_part["s"]])
    ours = fleiss_kappa(counts, prob=0.95)
    rng = np.random.default_rng(99)
    values = [
        sm_fleiss_kappa(counts[rng.integers(0, len(counts), len(counts))]) for _ in range(2000)
    ]
    lo, hi = np.quantile(values, [0.025, 0.975])
    assert ours.lower == pytest.approx(lo, abs=0.03)
    assert ours.upper == pytest.approx(hi, abs=0.03)
    assert ours.lower < ours.kappa < ours.upper
    # the null SE is not the estimate's uncertainty: the interval is wider than +-1.96 of it
    assert ours.upper - ours.lower > 2 * 1.96 * ours.se_null_fnl_1979


def test_cohen_pair_bootstrap_interval_matches_a_plain_bootstrap():
    """Bootstrap over parts of the all-pairings kappa, against a loop that rebuilds the
    table from resampled parts and scores it with statsmodels' cohens_kappa."""
    from bayes_rr.study.kappa import cohen_kappa_pairs, pair_tables

    study = _study(7)
    per_part = pair_tables(study.cells, "A1", "A2")
    ours = cohen_kappa_pairs(per_part, 0.95)
    rng = np.random.default_rng(5)
    values = []
    for _ in range(2000):
        table = per_part[rng.integers(0, len(per_part), len(per_part))].sum(axis=0)
        values.append(cohens_kappa(table).kappa)
    lo, hi = np.quantile(values, [0.025, 0.975])
    assert ours.lower == pytest.approx(lo, abs=0.03)
    assert ours.upper == pytest.approx(hi, abs=0.03)
