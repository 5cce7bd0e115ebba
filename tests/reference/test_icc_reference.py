"""Intraclass correlation (preprocess/reproducibility.py) against a published table and a reference library.

* Shrout & Fleiss (Psychol Bull 1979;86:420-8), table 2: 6 targets rated by 4 judges. The
  data and the ICCs they print, ICC(1,1) = 0.17, ICC(2,1) = 0.29, ICC(3,1) = 0.71, are
  recalled from memory.
* pingouin's ``intraclass_corr`` (general-purpose statistics package; its ICC(1,1), ICC(A,1)
  and ICC(C,1) are our ICC(1,1), ICC(2,1) and ICC(3,1)) on the same table and on a simulated
  table of 40 patients x 2 measurements; pingouin rounds its intervals to 2 decimals.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from workbench.errors import CohortError
from workbench.preprocess.reproducibility import (
    family_counts,
    feature_icc,
    icc,
    reproducible_features,
)

SHROUT_FLEISS = np.array([[9, 2, 5, 8], [6, 1, 3, 2], [8, 4, 6, 8], [7, 1, 2, 6], [10, 5, 6, 9], [6, 2, 4, 7]],
                         dtype=float)
PINGOUIN_TYPE = {"ICC(1,1)": "ICC(1,1)", "ICC(2,1)": "ICC(A,1)", "ICC(3,1)": "ICC(C,1)"}


def _pingouin(y):
    pg = pytest.importorskip("pingouin")
    n, k = y.shape
    long = pd.DataFrame({"t": np.repeat(np.arange(n), k), "r": np.tile(np.arange(k), n), "s": y.ravel()})
    return pg.intraclass_corr(long, targets="t", raters="r", ratings="s").set_index("Type")


def test_shrout_fleiss_table_2():
    published = {"ICC(1,1)": 0.17, "ICC(2,1)": 0.29, "ICC(3,1)": 0.71}  # recalled from memory
    for form, value in published.items():
        assert icc(SHROUT_FLEISS, form).value == pytest.approx(value, abs=0.005)


@pytest.mark.parametrize("seed", [None, 3])
def test_against_pingouin(seed):
    if seed is None:
        y = SHROUT_FLEISS
    else:
        rng = np.random.default_rng(seed)
        true = rng.normal(0, 1, 40)
        y = np.column_stack([true + rng.normal(0, 0.6, 40), true + 0.3 + rng.normal(0, 0.6, 40)])
    ref = _pingouin(y)
    for form, t in PINGOUIN_TYPE.items():
        ours = icc(y, form)
        row = ref.loc[t]
        assert ours.value == pytest.approx(row["ICC"], abs=1e-10), form
        assert ours.f_stat == pytest.approx(row["F"], rel=1e-10)
        assert (ours.df1, ours.df2) == (row["df1"], row["df2"])
        assert ours.p_value == pytest.approx(row["pval"], rel=1e-8, abs=1e-300)
        lo, hi = row["CI95"]
        if form == "ICC(2,1)" and y.shape[1] == 2:
            # withdrawn with two measurements (bench_icc: unreliable); the formula, on request, is pingouin's
            assert np.isnan(ours.lower) and np.isnan(ours.upper)
            ours = icc(y, form, with_two_measure_interval=True)
        assert ours.lower == pytest.approx(lo, abs=0.005) and ours.upper == pytest.approx(hi, abs=0.005), form


def test_forms_answer_different_questions():
    # a constant shift of the second measurement: consistency (3,1) ignores it, agreement (2,1) does not
    rng = np.random.default_rng(1)
    true = rng.normal(0, 1, 50)
    y = np.column_stack([true + rng.normal(0, 0.2, 50), true + 1.0 + rng.normal(0, 0.2, 50)])
    assert icc(y, "ICC(3,1)").value > 0.9 > 0.75 > icc(y, "ICC(2,1)").value
    with pytest.raises(CohortError, match="unknown ICC form"):
        icc(y, "ICC(4,1)")
    with pytest.raises(CohortError, match="at least 2 targets"):
        icc(y[:1], "ICC(3,1)")


def test_feature_table_filter_and_families():
    rng = np.random.default_rng(7)
    ids = [f"P{i}" for i in range(30)]
    true = rng.normal(0, 1, (30, 3))
    noise = np.array([0.1, 0.5, 2.0])  # ICC about 0.99, 0.8, 0.2
    first = pd.DataFrame(true + rng.normal(0, 1, (30, 3)) * noise, index=ids,
                         columns=["stat_mean", "cm_contrast", "cm_energy"])
    repeat = pd.DataFrame(true + rng.normal(0, 1, (30, 3)) * noise, index=ids, columns=first.columns).iloc[:20]
    table = feature_icc(first, repeat, "ICC(3,1)")
    assert table["n"].tolist() == [20, 20, 20]
    y = np.column_stack([first.loc[ids[:20], "cm_energy"], repeat["cm_energy"]])
    assert table.loc["cm_energy", "icc"] == pytest.approx(icc(y).value)
    kept, removed = reproducible_features(table, 0.75)
    assert kept == ["stat_mean", "cm_contrast"] and removed == ["cm_energy"]
    fc = family_counts(table, 0.75)
    assert fc.loc["cm"].tolist() == [2, 1, 1] and fc.loc["stat"].tolist() == [1, 1, 0]
    with pytest.raises(CohortError, match="at least 10"):
        feature_icc(first, repeat.iloc[:5])
    with pytest.raises(CohortError, match="lacks 1 feature column"):
        feature_icc(first, repeat.drop(columns=["cm_energy"]))
