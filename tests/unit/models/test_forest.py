"""Unit tests for workbench.models.forest (SurvivalForest, permutation_importance).

Synthetic cohorts here are generated in fixtures with fixed seeds; checks against
scikit-survival on public data live in tests/reference/test_forest_reference.py.
"""

from __future__ import annotations

import dataclasses

import numpy as np
import pandas as pd
import pytest
from sklearn.base import clone

from workbench.cohort.outcome import make_outcome
from workbench.errors import MetricError, ModelError, NotFittedError, WorkbenchWarning
from workbench.models.forest import SurvivalForest, permutation_importance
from workbench.predictions import RiskScores, SurvivalCurves

SETTINGS = dict(n_estimators=30, min_samples_leaf=10, random_state=3)
# a forest of very few trees leaves some rows without out-of-bag predictions (tested below)
few_trees = pytest.mark.filterwarnings("ignore::workbench.errors.WorkbenchWarning")


def _cohort(n: int, seed: int):
    """One strong predictor (x0), three pure-noise columns."""
    rng = np.random.default_rng(seed)
    X = rng.standard_normal((n, 4))
    event_time = rng.exponential(np.exp(-1.5 * X[:, 0]))
    censor_time = rng.exponential(1.5, n)
    y = make_outcome(np.minimum(event_time, censor_time), event_time <= censor_time)
    return pd.DataFrame(X, columns=["strong", "noise_a", "noise_b", "noise_c"]), y


@pytest.fixture(scope="module")
def train():
    return _cohort(400, seed=11)


@pytest.fixture(scope="module")
def held_out_rows():
    return _cohort(400, seed=12)


@pytest.fixture(scope="module")
def fitted(train):
    X, y = train
    return SurvivalForest(**SETTINGS).fit(X, y)


# ------------------------------------------------------------ estimator rules


def test_init_only_stores_arguments():
    f = SurvivalForest(n_estimators=7, time_grid="all", random_state=1)
    assert f.get_params()["n_estimators"] == 7
    assert f.get_params()["time_grid"] == "all"
    assert not [k for k in vars(f) if k.endswith("_")]
    assert clone(f).get_params() == f.get_params()


def test_fit_returns_self_and_keeps_no_training_rows(train):
    X, y = train
    f = SurvivalForest(**SETTINGS)
    assert f.fit(X, y) is f
    Xa = X.to_numpy(np.float32)
    for name, value in vars(f).items():
        arrays = value if isinstance(value, list) else [value]
        for arr in arrays:
            if isinstance(arr, np.ndarray) and arr.ndim >= 1 and arr.shape[0] == len(y):
                assert not np.array_equal(arr, y["time"]), name
                assert arr.ndim == 1 or not np.array_equal(arr, Xa), name


def test_pickled_forest_predicts_the_same(fitted, held_out_rows):
    import pickle

    Xt, _ = held_out_rows
    again = pickle.loads(pickle.dumps(fitted))
    np.testing.assert_array_equal(again.predict_survival(Xt), fitted.predict_survival(Xt))
    np.testing.assert_array_equal(again.predict_risk(Xt), fitted.predict_risk(Xt))


def test_predict_before_fit_raises():
    with pytest.raises(NotFittedError, match="not been fitted"):
        SurvivalForest().predict_risk(np.zeros((2, 3)))


@few_trees
def test_same_seed_same_forest_other_seed_other_forest(train, held_out_rows):
    X, y = train
    Xt, _ = held_out_rows
    small = {**SETTINGS, "n_estimators": 8}
    a = SurvivalForest(**small).fit(X, y).predict_survival(Xt)
    b = SurvivalForest(**small).fit(X, y).predict_survival(Xt)
    c = SurvivalForest(**{**small, "random_state": 4}).fit(X, y).predict_survival(Xt)
    np.testing.assert_array_equal(a, b)
    assert np.abs(a - c).max() > 1e-3


# ------------------------------------------------------------------ time grid


def test_default_grid_is_at_most_100_observed_event_times(fitted, train):
    _, y = train
    ev = np.unique(y["time"][y["event"]])
    g = fitted.time_grid_
    assert 2 <= g.size <= 100
    assert np.all(np.isin(g, ev))
    assert g[0] == ev[0] and g[-1] == ev[-1]
    assert np.all(np.diff(g) > 0)


@few_trees
def test_integer_and_all_grids(train):
    X, y = train
    ev = np.unique(y["time"][y["event"]])
    small = SurvivalForest(**{**SETTINGS, "n_estimators": 3, "time_grid": 5}).fit(X, y)
    assert small.time_grid_.size == 5
    full = SurvivalForest(**{**SETTINGS, "n_estimators": 3, "time_grid": "all"}).fit(X, y)
    np.testing.assert_array_equal(full.time_grid_, ev)


@few_trees
@pytest.mark.parametrize("grid", [[1.0, 0.5], [0.2, 0.2], [-1.0, 1.0], [np.nan], "fine", 1])
def test_bad_grids_are_refused(train, grid):
    X, y = train
    with pytest.raises(ModelError):
        SurvivalForest(n_estimators=2, time_grid=grid).fit(X, y)


def test_step_lookup_is_right_continuous(fitted, held_out_rows):
    Xt, _ = held_out_rows
    g = fitted.time_grid_
    on_grid = fitted.predict_survival(Xt)
    between = fitted.predict_survival(Xt, 0.5 * (g[:-1] + g[1:]))
    np.testing.assert_array_equal(between, on_grid[:, :-1])
    np.testing.assert_array_equal(fitted.predict_survival(Xt, g), on_grid)


def test_before_first_event_is_one_and_after_last_is_last_value(fitted, held_out_rows):
    Xt, _ = held_out_rows
    probs = fitted.predict_survival(Xt, [0.0, 0.5 * fitted.first_event_time_, 10 * fitted.last_event_time_])
    np.testing.assert_array_equal(probs[:, :2], 1.0)
    np.testing.assert_array_equal(probs[:, 2], fitted.predict_survival(Xt)[:, -1])


def test_curves_are_probabilities_and_non_increasing(fitted, held_out_rows):
    Xt, _ = held_out_rows
    p = fitted.predict_survival(Xt)
    assert p.shape == (len(Xt), fitted.time_grid_.size)
    assert np.all((p >= 0) & (p <= 1))
    assert np.all(np.diff(p, axis=1) <= 1e-15)


@few_trees
def test_times_outside_a_user_grid_are_refused(train, held_out_rows):
    X, y = train
    Xt, _ = held_out_rows
    ev = np.unique(y["time"][y["event"]])
    f = SurvivalForest(**{**SETTINGS, "n_estimators": 3, "time_grid": ev[5:20]}).fit(X, y)
    with pytest.raises(ModelError, match="beyond the forest's last grid time"):
        f.predict_survival(Xt, [ev[30]])
    with pytest.raises(ModelError, match="before the forest's first grid time"):
        f.predict_survival(Xt, [ev[2]])
    assert f.predict_survival(Xt, [ev[10]]).shape == (len(Xt), 1)


def test_negative_prediction_time_is_refused(fitted, held_out_rows):
    with pytest.raises(ModelError, match="non-negative"):
        fitted.predict_survival(held_out_rows[0], [-1.0])


# ------------------------------------------------------------ input checks


def test_columns_are_matched_by_name(fitted, held_out_rows):
    Xt, _ = held_out_rows
    np.testing.assert_array_equal(
        fitted.predict_risk(Xt[Xt.columns[::-1]]), fitted.predict_risk(Xt)
    )
    with pytest.raises(ModelError, match="lack the column"):
        fitted.predict_risk(Xt.drop(columns="strong"))
    with pytest.raises(ModelError, match="columns"):
        fitted.predict_risk(Xt.to_numpy()[:, :3])


@few_trees
def test_missing_and_text_values_are_refused(train):
    X, y = train
    bad = X.copy()
    bad.iloc[3, 1] = np.nan
    with pytest.raises(ModelError, match="rows \\[3\\]"):
        SurvivalForest(n_estimators=2).fit(bad, y)
    text = X.astype(object)
    text.iloc[0, 0] = "high"
    with pytest.raises(ModelError, match="non-numeric"):
        SurvivalForest(n_estimators=2).fit(text, y)


@few_trees
def test_outcome_checks(train):
    X, y = train
    with pytest.raises(ModelError, match="rows"):
        SurvivalForest(n_estimators=2).fit(X.iloc[:10], y)
    no_events = make_outcome(y["time"], np.zeros(len(y), bool))
    with pytest.raises(ModelError, match="no events"):
        SurvivalForest(n_estimators=2).fit(X, no_events)


def test_rows_without_out_of_bag_trees_are_left_out_with_a_warning(train):
    X, y = train
    with pytest.warns(WorkbenchWarning, match="no out-of-bag prediction"):
        f = SurvivalForest(n_estimators=2, random_state=0).fit(X, y)
    assert 0.0 <= f.oob_score_ <= 1.0


def test_typed_predictions(fitted, held_out_rows):
    Xt, _ = held_out_rows
    r = fitted.predict_risk_scores(Xt)
    assert isinstance(r, RiskScores)
    np.testing.assert_array_equal(r.values, fitted.predict_risk(Xt))
    c = fitted.predict_survival_curves(Xt)
    assert isinstance(c, SurvivalCurves)
    np.testing.assert_array_equal(c.probs, fitted.predict_survival(Xt))


def test_risk_is_higher_for_the_strong_predictor(fitted, held_out_rows):
    Xt, yt = held_out_rows
    from sksurv.metrics import concordance_index_censored

    # synthetic truth: hazard exp(1.5 * strong), so a working forest ranks well
    c = concordance_index_censored(yt["event"], yt["time"], fitted.predict_risk(Xt))[0]
    assert c > 0.7
    assert 0.6 < fitted.oob_score_ < 0.9


# ------------------------------------------------------ permutation importance


def test_importance_separates_planted_signal_from_noise(fitted, held_out_rows):
    Xt, yt = held_out_rows
    res = permutation_importance(fitted, Xt, yt, n_repeats=5, random_state=0)
    assert res.features[0] == "strong"
    imp = dict(zip(res.features, res.mean_drop, strict=True))
    assert imp["strong"] > 0.1
    for col in ("noise_a", "noise_b", "noise_c"):
        assert abs(imp[col]) < 0.02
    assert np.all(np.diff(res.mean_drop) <= 0)
    assert res.drops.shape == (4, 5) and res.n_rows == len(yt) and res.rows == "held-out"
    np.testing.assert_allclose(res.sd_drop, res.drops.std(axis=1, ddof=1))


def test_out_of_bag_importance_on_training_rows(fitted, train, held_out_rows):
    X, y = train
    res = permutation_importance(fitted, X, y, n_repeats=3, random_state=0, rows="out-of-bag")
    assert res.features[0] == "strong" and res.mean_drop[0] > 0.1
    assert res.baseline == pytest.approx(fitted.oob_score_, abs=1e-12)
    with pytest.raises(ModelError, match="training"):
        permutation_importance(fitted, *held_out_rows, random_state=0, rows="out-of-bag")


def test_importance_is_reproducible_and_frozen(fitted, held_out_rows):
    a = permutation_importance(fitted, *held_out_rows, n_repeats=2, random_state=5)
    b = permutation_importance(fitted, *held_out_rows, n_repeats=2, random_state=5)
    np.testing.assert_array_equal(a.drops, b.drops)
    with pytest.raises(dataclasses.FrozenInstanceError):
        a.baseline = 0.0
    with pytest.raises(ValueError):
        a.mean_drop[0] = 1.0
    assert list(a.to_frame()["feature"]) == list(a.features)


def test_unused_predictor_has_exactly_zero_importance(train, held_out_rows):
    X, y = train
    Xc = X.assign(constant=1.0)
    f = SurvivalForest(**SETTINGS).fit(Xc, y)
    Xt = held_out_rows[0].assign(constant=1.0)
    res = permutation_importance(f, Xt, held_out_rows[1], n_repeats=2, random_state=0)
    i = res.features.index("constant")
    np.testing.assert_array_equal(res.drops[i], 0.0)


def test_importance_argument_checks(fitted, held_out_rows):
    Xt, yt = held_out_rows
    with pytest.raises(MetricError, match="not available"):
        permutation_importance(fitted, Xt, yt, random_state=0, metric="brier")
    with pytest.raises(ModelError, match="rows="):
        permutation_importance(fitted, Xt, yt, random_state=0, rows="train")
    with pytest.raises(ModelError, match="n_repeats"):
        permutation_importance(fitted, Xt, yt, random_state=0, n_repeats=0)
    with pytest.raises(ModelError, match="SurvivalForest"):
        permutation_importance(object(), Xt, yt, random_state=0)


def test_custom_metric_is_used(fitted, held_out_rows):
    Xt, yt = held_out_rows

    def mean_risk_of_events(y, risk):
        return float(risk[y["event"]].mean())

    res = permutation_importance(fitted, Xt, yt, n_repeats=2, random_state=0, metric=mean_risk_of_events)
    assert res.metric == "mean_risk_of_events"
    assert res.baseline == pytest.approx(mean_risk_of_events(yt, fitted.predict_risk(Xt)))
