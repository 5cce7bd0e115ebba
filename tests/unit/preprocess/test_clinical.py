"""Unit tests of clinical predictor terms (workbench.preprocess.clinical and .values).

Tables are the German Breast Cancer Study Group 2 data (Schumacher et al. 1994)
shipped with scikit-survival; where a detection limit is needed, progesterone
receptor values below 10 fmol are rewritten as the text "<10", as a laboratory
would report them. Expected values come from numpy/scipy on the same columns,
from the spline formula, or from arithmetic written beside the check.
"""

from __future__ import annotations

import copy
import dataclasses
import pickle
import warnings

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy.stats import norm
from sklearn.base import clone
from sksurv.datasets import load_gbsg2

from workbench.cohort import Cohort, make_outcome
from workbench.errors import CohortError, DataQualityWarning, ModelError, NotFittedError, SpecError
from workbench.preprocess.clinical import (
    ClinicalTransformer,
    DesignMatrix,
    PredictorSpec,
    hazard_ratio_rows,
    term_contribution,
)
from workbench.preprocess.splines import HARRELL_QUANTILES, rcs_basis
from workbench.preprocess.values import level_keys, parse_measurements


@pytest.fixture(scope="module")
def gbsg2_frame() -> pd.DataFrame:
    X, y = load_gbsg2()
    frame = X.copy()
    frame["tgrade"] = frame["tgrade"].astype(str)
    frame["horTh"] = frame["horTh"].astype(str)
    # laboratory-style reporting of a value below the assay's limit
    pr = frame["progrec"].to_numpy()
    frame["pr_text"] = np.where(pr < 10, "<10", pr.astype(int).astype(str)).astype(object)
    frame["time"] = y["time"]
    frame["event"] = y["cens"]
    return frame.reset_index(drop=True)


@pytest.fixture()
def frame(gbsg2_frame) -> pd.DataFrame:
    return gbsg2_frame.copy()


def _cohort(frame: pd.DataFrame) -> Cohort:
    n = len(frame)
    return Cohort(
        ids=np.array([f"GB{i:04d}" for i in range(n)]),
        y=make_outcome(frame["time"], frame["event"]),
        clinical=frame.drop(columns=["time", "event"]),
        features=pd.DataFrame(index=range(n)),
    )


SPECS = (
    PredictorSpec("age", "spline", knots=4, unit="years"),
    PredictorSpec("tsize", transform="log2", unit="mm"),
    PredictorSpec("pr_text", transform="log", detection_limit="auto", label="PR", unit="fmol"),
    PredictorSpec("horTh", "categorical"),
    PredictorSpec("tgrade", "ordinal", levels=("I", "II", "III")),
)


# ------------------------------------------------------------------ reading cells


def test_detection_limit_texts_numbers_and_blanks_parse():
    cells = ["<0.5", "< 0.5", "<0.50", "<=0.5", "0.7", 1.25, "3", "", "  ", None, np.nan, "NA", " n/a "]
    p = parse_measurements(cells)
    np.testing.assert_array_equal(p.value[:7], [0.5, 0.5, 0.5, 0.5, 0.7, 1.25, 3.0])
    np.testing.assert_array_equal(p.below_limit, [True] * 4 + [False] * 9)
    np.testing.assert_array_equal(p.missing, [False] * 7 + [True] * 6)
    assert not p.invalid.any() and np.all(np.isnan(p.value[7:]))


def test_unreadable_cells_are_flagged_not_guessed():
    p = parse_measurements(["abc", ">5", "0,5", "inf", "1e3", "-2"])
    np.testing.assert_array_equal(p.invalid, [True, True, True, True, False, False])
    np.testing.assert_array_equal(p.value[4:], [1000.0, -2.0])


def test_numeric_column_fast_path():
    p = parse_measurements(pd.Series([1.0, np.nan, np.inf]))
    np.testing.assert_array_equal(p.missing, [False, True, False])
    np.testing.assert_array_equal(p.invalid, [False, False, True])


@settings(max_examples=60, deadline=None)
@given(st.floats(min_value=1e-9, max_value=1e9, allow_nan=False))
def test_any_written_number_reads_back_exactly(x):
    p = parse_measurements([repr(x), f"<{x!r}", f"< {x!r}", x])
    np.testing.assert_array_equal(p.value, [x] * 4)
    np.testing.assert_array_equal(p.below_limit, [False, True, True, False])


def test_level_keys_match_numbers_typed_differently():
    keys, missing = level_keys([2, 2.0, "2", " 2 ", "II", "", None, 2.5])
    assert keys.tolist() == ["2", "2", "2", "2", "II", None, None, "2.5"]
    np.testing.assert_array_equal(missing, [False] * 5 + [True, True, False])


# ------------------------------------------------------------------ specifications


@pytest.mark.parametrize(
    ("kwargs", "fragment"),
    [
        ({"kind": "quadratic"}, "kind 'quadratic' is not known"),
        ({"kind": "spline", "knots": 2}, "3 to 7 knots"),
        ({"kind": "spline", "knots": 8}, "3 to 7 knots"),
        ({"kind": "spline", "knots": 4.5}, "3 to 7 knots"),
        ({"knots": 4}, "knots apply to spline terms only"),
        ({"transform": "sqrt"}, "transform 'sqrt' is not known"),
        ({"kind": "categorical", "transform": "log"}, "needs a linear or spline term"),
        ({"kind": "ordinal"}, "needs its levels in order"),
        ({"kind": "ordinal", "levels": ("I", "I")}, "at least two distinct"),
        ({"kind": "categorical", "levels": ("a", "b"), "reference": "c"}, "reference 'c' is not among"),
        ({"levels": ("a", "b")}, "categorical or ordinal terms only"),
        ({"transform": "log", "detection_limit": 0.0}, "positive detection limit"),
        ({"detection_limit": "half"}, "'auto', a number or absent"),
        ({"kind": "categorical", "detection_limit": "auto"}, "linear or spline terms only"),
        ({"missing": "drop"}, "missing 'drop' is not known"),
        ({"unseen": "ignore"}, "unseen 'ignore' is not known"),
    ],
)
def test_bad_specifications_are_explained(kwargs, fragment):
    with pytest.raises(SpecError, match=fragment):
        PredictorSpec("x", **kwargs)


def test_specification_defaults_and_normalisation():
    s = PredictorSpec("age", "spline")
    assert s.knots == 4 and s.label == "age" and s.detection_limit is None
    o = PredictorSpec("grade", "ordinal", levels=(1, 2, 3.0), reference=2)
    assert o.levels == ("1", "2", "3") and o.reference == "2"
    assert PredictorSpec("crp", detection_limit=1).detection_limit == 1.0
    with pytest.raises(dataclasses.FrozenInstanceError):
        s.kind = "linear"


def test_transformer_checks_its_predictor_list(frame):
    with pytest.raises(SpecError, match="more than once"):
        ClinicalTransformer((PredictorSpec("age"), PredictorSpec("age", "spline"))).fit(frame)
    with pytest.raises(SpecError, match="non-empty tuple of PredictorSpec"):
        ClinicalTransformer(("age",)).fit(frame)
    with pytest.raises(CohortError, match="no column.*'agee'"):
        ClinicalTransformer((PredictorSpec("agee"),)).fit(frame)


# ------------------------------------------------------------------ estimator rules, design


def test_estimator_rules(frame):
    ct = ClinicalTransformer(SPECS)
    assert vars(ct) == {"predictors": SPECS}
    with pytest.raises(NotFittedError):
        ct.transform(frame)
    assert ct.fit(frame) is ct
    assert clone(ct).get_params() == {"predictors": SPECS}
    assert not hasattr(clone(ct), "terms_")
    # nothing of training size is kept: only summaries
    for value in vars(ct).values():
        assert not isinstance(value, (pd.DataFrame, pd.Series, np.ndarray))


def test_design_columns_and_values(frame):
    dm = ClinicalTransformer(SPECS).fit_transform(frame)
    assert isinstance(dm, DesignMatrix)
    assert dm.columns == (
        "age", "age:nl1", "age:nl2", "log2(tsize)", "log(pr_text)", "pr_text:below_limit",
        "horTh=yes", "tgrade:score",
    )
    assert dm.X.shape == (len(frame), 8) and dm.rows_used.all() and dm.n_dropped == 0
    age = frame["age"].to_numpy()
    knots = np.percentile(age, np.array(HARRELL_QUANTILES[4]) * 100)
    np.testing.assert_allclose(dm.X[:, :3], rcs_basis(age, knots), rtol=1e-12)
    np.testing.assert_allclose(dm.X[:, 3], np.log2(frame["tsize"]), rtol=1e-12)
    np.testing.assert_array_equal(dm.X[:, 6], (frame["horTh"] == "yes").astype(float))
    np.testing.assert_array_equal(dm.X[:, 7], frame["tgrade"].map({"I": 0, "II": 1, "III": 2}))
    spans = [(t.start, t.stop) for t in dm.terms]
    assert spans == [(0, 3), (3, 4), (4, 6), (6, 7), (7, 8)]
    assert dm.to_frame().columns.tolist() == list(dm.columns)


def test_categorical_reference_and_level_order(frame):
    default = ClinicalTransformer((PredictorSpec("tgrade", "categorical"),)).fit(frame)
    assert default.terms_[0].reference == "I"
    assert default.columns_ == ("tgrade=II", "tgrade=III")
    chosen = ClinicalTransformer((PredictorSpec("tgrade", "categorical", reference="II"),)).fit(frame)
    assert chosen.columns_ == ("tgrade=I", "tgrade=III")
    declared = ClinicalTransformer(
        (PredictorSpec("tgrade", "categorical", levels=("III", "II", "I")),)
    ).fit(frame)
    assert declared.terms_[0].levels == ("III", "II", "I") and declared.terms_[0].reference == "III"
    counts = frame["tgrade"].value_counts()
    assert declared.terms_[0].level_counts == tuple(counts[lv] for lv in ("III", "II", "I"))


def test_ordinal_scores_follow_the_declared_order_not_the_alphabet():
    df = pd.DataFrame({"risk": ["low", "high", "mid", "mid", "low"]})
    spec = PredictorSpec("risk", "ordinal", levels=("low", "mid", "high"), reference="mid")
    dm = ClinicalTransformer((spec,)).fit_transform(df)
    np.testing.assert_array_equal(dm.X[:, 0], [-1, 1, 0, 0, -1])
    grades = pd.DataFrame({"g": [1, 2.0, "3", 2]})
    dm = ClinicalTransformer((PredictorSpec("g", "ordinal", levels=(1, 2, 3)),)).fit_transform(grades)
    np.testing.assert_array_equal(dm.X[:, 0], [0, 1, 2, 1])


def test_levels_that_cannot_give_an_effect(frame):
    only_no = frame[frame["horTh"] == "no"]
    with pytest.raises(SpecError, match="at least two are needed"):
        ClinicalTransformer((PredictorSpec("horTh", "categorical"),)).fit(only_no)
    no_grade_one = frame[frame["tgrade"] != "I"]
    with pytest.raises(SpecError, match="reference level 'I' does not occur"):
        ClinicalTransformer((PredictorSpec("tgrade", "categorical", reference="I"),)).fit(no_grade_one)


# ------------------------------------------------------------------ detection limit


def test_detection_limit_indicator_and_value_at_the_limit(frame):
    ct = ClinicalTransformer((SPECS[2],)).fit(frame)
    term = ct.terms_[0]
    below = frame["progrec"].to_numpy() < 10
    assert term.detection_limit == 10.0 and term.has_limit_indicator
    assert term.n_below_limit_train == below.sum()
    dm = ct.transform(frame)
    np.testing.assert_array_equal(dm.X[:, 1], below.astype(float))
    # below-limit rows sit at log(10), never at log(5) (half the limit)
    np.testing.assert_allclose(dm.X[below, 0], np.log(10.0), rtol=1e-15)
    np.testing.assert_allclose(dm.X[~below, 0], np.log(frame["progrec"].to_numpy()[~below]), rtol=1e-12)
    assert term.train_min >= 10.0
    # knots and percentiles describe the detectable values
    detectable = frame["progrec"].to_numpy()[~below]
    assert term.percentile(50) == np.percentile(detectable, 50)


def test_numeric_limit_gives_the_same_terms_as_texts(frame):
    texts = ClinicalTransformer((SPECS[2],)).fit_transform(frame)
    numeric = ClinicalTransformer(
        (PredictorSpec("progrec", transform="log", detection_limit=10.0),)
    ).fit_transform(frame)
    np.testing.assert_array_equal(texts.X, numeric.X)


def test_several_limits_warn_and_the_largest_is_used(frame):
    frame.loc[:4, "pr_text"] = "<5"
    with pytest.warns(DataQualityWarning, match="several detection limits"):
        ct = ClinicalTransformer((SPECS[2],)).fit(frame)
    assert ct.terms_[0].detection_limit == 10.0


def test_limit_texts_without_a_limit_policy_are_refused(frame):
    with pytest.raises(CohortError, match=r"column 'pr_text'.*detection_limit = 'auto'"):
        ClinicalTransformer((PredictorSpec("pr_text", transform="log"),)).fit(frame)


def test_below_limit_patients_need_training_counterparts(frame):
    detectable = frame[frame["progrec"] >= 10]
    ct = ClinicalTransformer((SPECS[2],)).fit(detectable)
    assert not ct.terms_[0].has_limit_indicator
    with pytest.raises(ModelError, match="no training patient did"):
        ct.transform(frame)


def test_a_looser_limit_at_transform_is_flagged(frame):
    ct = ClinicalTransformer((SPECS[2],)).fit(frame)
    new = frame.head(3).copy()
    new["pr_text"] = ["<20", "<10", "55"]
    with pytest.warns(DataQualityWarning, match="row 0"):
        dm = ct.transform(new)
    np.testing.assert_array_equal(dm.X[:, 1], [1, 1, 0])


def test_all_values_below_the_limit_is_an_error():
    df = pd.DataFrame({"crp": ["<1"] * 5})
    with pytest.raises(SpecError, match="every training value lies below"):
        ClinicalTransformer((PredictorSpec("crp", detection_limit="auto"),)).fit(df)


def test_log_of_values_at_or_below_zero_is_an_error(frame):
    with pytest.raises(SpecError, match=r"column 'progrec'.*zero or below.*log transform"):
        ClinicalTransformer((PredictorSpec("progrec", transform="log"),)).fit(frame)
    ct = ClinicalTransformer((PredictorSpec("tsize", transform="log2"),)).fit(frame)
    new = frame.head(3).copy()
    new.loc[1, "tsize"] = 0.0
    with pytest.raises(SpecError, match="row 1"):
        ct.transform(new)


# ------------------------------------------------------------------ missing values


def test_complete_case_rows_and_alignment_with_the_outcome(frame):
    frame.loc[[3, 10, 11], "age"] = np.nan
    frame.loc[10, "tgrade"] = ""  # same row twice still counts once
    cohort = _cohort(frame)
    ct = ClinicalTransformer(SPECS).fit(cohort)
    assert ct.n_dropped_train_ == 3 and ct.n_train_ == len(frame)
    dm = ct.transform(cohort)
    expected = np.ones(len(frame), dtype=bool)
    expected[[3, 10, 11]] = False
    np.testing.assert_array_equal(dm.rows_used, expected)
    assert dm.n_dropped == 3 and dm.X.shape[0] == len(frame) - 3
    assert cohort.y[dm.rows_used].shape[0] == dm.X.shape[0]
    # everything is learned on the complete cases, the rows the model will see
    reference = ClinicalTransformer(SPECS).fit(frame.drop(index=[3, 10, 11]))
    assert ct.terms_ == reference.terms_


def test_imputation_uses_training_values_and_is_counted(frame):
    train, test = frame.iloc[:400].copy(), frame.iloc[400:].copy()
    train.loc[[0, 1], "tsize"] = np.nan
    train.loc[5, "horTh"] = None
    test.loc[[400, 401, 402], "tsize"] = np.nan
    specs = (
        PredictorSpec("tsize", transform="log2", missing="impute"),
        PredictorSpec("horTh", "categorical", missing="impute"),
    )
    ct = ClinicalTransformer(specs).fit(train)
    med = np.nanmedian(train["tsize"])
    mode = train["horTh"].mode().iloc[0]
    assert ct.terms_[0].impute_value == med and ct.terms_[1].impute_value == mode
    assert dict(ct.n_imputed_train_) == {"tsize": 2, "horTh": 1}
    dm = ct.transform(test)
    assert dm.rows_used.all() and dict(dm.n_imputed) == {"tsize": 3, "horTh": 0}
    np.testing.assert_allclose(dm.X[:3, 0], np.log2(med), rtol=1e-15)  # not the test rows' median


def test_imputation_below_the_limit_when_most_values_are():
    df = pd.DataFrame({"crp": ["<1", "<1", "<1", "2", "4", None]})
    ct = ClinicalTransformer((PredictorSpec("crp", detection_limit="auto", missing="impute"),)).fit(df)
    assert ct.terms_[0].impute_value == "<1.0"
    np.testing.assert_array_equal(ct.transform(df).X[5], [1.0, 1.0])


def test_unseen_level_policies(frame):
    new = frame.head(4).copy()
    new["tgrade"] = ["II", "IV", "I", "IV"]
    strict = ClinicalTransformer((PredictorSpec("tgrade", "categorical"),)).fit(frame)
    cohort = _cohort(new)
    with pytest.raises(ModelError) as err:
        strict.transform(cohort)
    msg = str(err.value)
    assert "column 'tgrade'" in msg and "'IV'" in msg and "rows 1, 3" in msg and "GB0001, GB0003" in msg
    dropping = ClinicalTransformer((PredictorSpec("tgrade", "categorical", unseen="missing"),)).fit(frame)
    dm = dropping.transform(new)
    np.testing.assert_array_equal(dm.rows_used, [True, False, True, False])
    imputing = ClinicalTransformer(
        (PredictorSpec("tgrade", "categorical", unseen="missing", missing="impute"),)
    ).fit(frame)
    dm = imputing.transform(new)
    assert imputing.terms_[0].impute_value == "II"  # most frequent grade in GBSG2
    np.testing.assert_array_equal(dm.X[[1, 3]], [[1.0, 0.0], [1.0, 0.0]])
    assert dm.n_imputed["tgrade"] == 2


def test_unreadable_value_names_column_and_rows(frame):
    bad = frame.copy()
    bad["tsize"] = bad["tsize"].astype(object)
    bad.loc[[7, 9], "tsize"] = "abc"
    with pytest.raises(CohortError, match=r"column 'tsize'.*'abc' in rows 7, 9"):
        ClinicalTransformer((PredictorSpec("tsize"),)).fit(bad)
    ct = ClinicalTransformer((PredictorSpec("tsize", label="Tumour size"),)).fit(frame)
    with pytest.raises(CohortError, match=r"\(Tumour size\).*'abc'.*patient GB0007, GB0009"):
        ct.transform(_cohort(bad))


# ------------------------------------------------------------------ leakage and purity


def _mutate_rows(frame: pd.DataFrame, rows) -> None:
    frame.loc[rows, "age"] = 120.0
    frame.loc[rows, "tsize"] = 1e4
    frame.loc[rows, "pr_text"] = "<50"
    frame.loc[rows, "horTh"] = "unknown"
    frame.loc[rows, "tgrade"] = np.nan


def test_held_out_rows_cannot_change_what_was_learned(frame):
    held_out = frame.index[400:]
    train = frame.iloc[:400]
    ct = ClinicalTransformer(SPECS).fit(train)
    terms, X = ct.terms_, ct.transform(train).X.copy()
    _mutate_rows(frame, held_out)  # in place, in the parent table
    assert ct.terms_ == terms
    np.testing.assert_array_equal(ct.transform(frame.iloc[:400]).X, X)
    refit = ClinicalTransformer(SPECS).fit(frame.iloc[:400])
    assert refit.terms_ == terms
    # the check has teeth: a fit that does see the mutated rows learns other knots
    seen = ClinicalTransformer(SPECS[:2]).fit(frame.iloc[:500]).terms_
    assert seen[0].knots != terms[0].knots and seen[1].train_max == 1e4


def test_transform_never_mutates_its_input(frame):
    frame.loc[3, "age"] = np.nan
    frame.loc[4, "tsize"] = None
    specs = (
        PredictorSpec("age", "spline", missing="impute"),
        PredictorSpec("tsize", transform="log2", missing="impute"),
        *SPECS[2:],
    )
    ct = ClinicalTransformer(specs).fit(frame)
    before = frame.copy(deep=True)
    cohort = _cohort(frame)
    clinical_before = cohort.clinical.copy(deep=True)
    ct.transform(frame)
    ct.transform(cohort)
    term_contribution(ct.terms_[2], np.ones(2), frame["pr_text"])
    pd.testing.assert_frame_equal(frame, before)
    pd.testing.assert_frame_equal(cohort.clinical, clinical_before)


def test_fitted_transformer_and_design_survive_pickling(frame):
    # worker processes and saved model bundles pickle the fitted transformer
    ct = ClinicalTransformer(SPECS).fit(frame)
    dm = ct.transform(frame)
    again = pickle.loads(pickle.dumps(ct))
    assert again.terms_ == ct.terms_
    np.testing.assert_array_equal(again.transform(frame).X, dm.X)
    assert pickle.loads(pickle.dumps(dm)).columns == dm.columns


def test_fitted_terms_are_frozen(frame):
    ct = ClinicalTransformer(SPECS).fit(frame)
    with pytest.raises(dataclasses.FrozenInstanceError):
        ct.terms_[0].knots = (1.0, 2.0, 3.0)
    assert copy.deepcopy(ct.terms_) == ct.terms_


# ------------------------------------------------------------------ contributions and hazard ratios


def test_term_contribution_by_kind(frame):
    ct = ClinicalTransformer(SPECS).fit(frame)
    age, tsize, pr, horth, grade = ct.terms_
    b = np.array([0.02, 0.3, -0.5, 0.4, -0.2, 0.6, -0.35, 0.45])
    x = np.array([30.0, 50.0, 70.0])
    np.testing.assert_allclose(term_contribution(age, b[:3], x), rcs_basis(x, age.knots) @ b[:3])
    np.testing.assert_allclose(term_contribution(age, b, x), term_contribution(age, b[:3], x))
    np.testing.assert_allclose(term_contribution(tsize, b, [16.0]), [0.4 * 4])
    # "<10": log(10) * b_cont + b_below ; 100: log(100) * b_cont
    np.testing.assert_allclose(
        term_contribution(pr, b, ["<10", 100, None]), [-0.2 * np.log(10) + 0.6, -0.2 * np.log(100), np.nan]
    )
    np.testing.assert_allclose(term_contribution(horth, b, ["no", "yes"]), [0.0, -0.35])
    np.testing.assert_allclose(term_contribution(grade, b, ["I", "II", "III"]), [0.0, 0.45, 0.9])
    with pytest.raises(ModelError, match="'IV'"):
        term_contribution(grade, b, ["IV"])
    with pytest.raises(ModelError, match="2 coefficient"):
        term_contribution(age, b[:2], x)


def test_hazard_ratio_rows_arithmetic(frame):
    specs = (
        PredictorSpec("tsize", unit="mm"),
        PredictorSpec("pnodes", transform="log2"),
        PredictorSpec("progrec", transform="log", detection_limit=10.0),
        PredictorSpec("tgrade", "ordinal", levels=("I", "II", "III")),
    )
    ct = ClinicalTransformer(specs).fit(frame)
    b = np.array([0.015, 0.4, 0.3, 0.2, 0.5])
    se = np.array([0.005, 0.1, 0.08, 0.15, 0.12])
    cov = np.diag(se**2)
    z = norm.ppf(0.975)
    (per_mm,) = hazard_ratio_rows(ct.terms_[0], b, cov)
    (per10,) = hazard_ratio_rows(ct.terms_[0], b, cov, per=10)
    assert per_mm.contrast == "per 1 mm" and per10.contrast == "per 10 mm"
    assert per10.hr == pytest.approx(np.exp(0.15)) and per10.se == pytest.approx(0.05)
    (doubling,) = hazard_ratio_rows(ct.terms_[1], b, cov)
    assert doubling.hr == pytest.approx(np.exp(0.4))
    assert doubling.lower == pytest.approx(np.exp(0.4 - z * 0.1))
    assert doubling.p_value == pytest.approx(2 * norm.sf(4.0))
    efold, dbl, below = hazard_ratio_rows(ct.terms_[2], b, cov)
    assert efold.hr == pytest.approx(np.exp(0.3))
    assert dbl.hr == pytest.approx(2**0.3) and dbl.se == pytest.approx(0.08 * np.log(2))
    assert below.design_columns == ("progrec:below_limit",) and below.hr == pytest.approx(np.exp(0.2))
    (step,) = hazard_ratio_rows(ct.terms_[3], b, cov, level=0.9)
    assert step.upper == pytest.approx(np.exp(0.5 + norm.ppf(0.95) * 0.12))
    sub = hazard_ratio_rows(ct.terms_[2], b[2:4], cov[2:4, 2:4])
    assert sub == (efold, dbl, below)
    with pytest.raises(SpecError, match="between 0 and 1"):
        hazard_ratio_rows(ct.terms_[0], b, cov, level=95)


def test_spline_hazard_ratio_is_a_quartile_contrast(frame):
    ct = ClinicalTransformer((PredictorSpec("age", "spline", knots=5),)).fit(frame)
    term = ct.terms_[0]
    rng = np.random.default_rng(3)
    b = rng.normal(0, 0.05, 4)
    a = rng.normal(0, 0.01, (4, 4))
    cov = a @ a.T + 1e-4 * np.eye(4)
    (row,) = hazard_ratio_rows(term, b, cov)
    q75, q25 = np.percentile(frame["age"], [75, 25])
    diff = term_contribution(term, b, [q75]) - term_contribution(term, b, [q25])
    assert row.log_hr == pytest.approx(diff[0], rel=1e-12)
    c = rcs_basis([q75], term.knots)[0] - rcs_basis([q25], term.knots)[0]
    assert row.se == pytest.approx(np.sqrt(c @ cov @ c), rel=1e-12)
    assert row.design_columns == term.columns and "75th vs 25th" in row.contrast
    # with a detection limit the quartile row uses the spline columns only, and
    # the indicator gets its own "below the limit" row
    lim = ClinicalTransformer((PredictorSpec("pr_text", "spline", knots=3, detection_limit="auto"),)).fit(frame)
    quartiles, below = hazard_ratio_rows(lim.terms_[0], np.array([0.01, 0.02, 0.3]), np.eye(3) * 1e-4)
    assert quartiles.design_columns == ("pr_text", "pr_text:nl1")
    assert below.design_columns == ("pr_text:below_limit",) and below.hr == pytest.approx(np.exp(0.3))


def test_no_warnings_on_a_clean_table(frame):
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        design = ClinicalTransformer(SPECS).fit_transform(frame)
    assert design.X.shape[0] == len(frame) - design.n_dropped
