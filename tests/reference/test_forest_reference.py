"""SurvivalForest against scikit-survival's RandomSurvivalForest on public data.

Sources:
- German Breast Cancer Study Group 2 (Schumacher et al. 1994), as shipped in
  scikit-survival (``sksurv.datasets.load_gbsg2``), categories one-hot encoded
  with ``sksurv.preprocessing.OneHotEncoder``.
- Veterans' Administration lung cancer trial (Kalbfleisch & Prentice 1980), as
  shipped in scikit-survival (``sksurv.datasets.load_veterans_lung_cancer``).
- Reference values: ``sksurv.ensemble.RandomSurvivalForest`` (scikit-survival
  0.28) grown with the same seed and tree settings, its
  ``predict_survival_function``, ``predict`` and ``oob_score_``, and
  ``sksurv.metrics.concordance_index_censored``.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy.stats import spearmanr
from sklearn.model_selection import train_test_split
from sksurv.datasets import load_gbsg2, load_veterans_lung_cancer
from sksurv.ensemble import RandomSurvivalForest
from sksurv.metrics import concordance_index_censored
from sksurv.preprocessing import OneHotEncoder

from workbench.cohort.outcome import make_outcome
from workbench.models.forest import SurvivalForest, permutation_importance

# small forests keep the file fast; the identity holds tree by tree. builder="library" grows
# the library's own trees, so these tests check our leaf curves, risks, out-of-bag C and
# importance exactly; our own builder is compared in test_forest_builder_reference.py
GBSG2_TREES = dict(n_estimators=50, min_samples_leaf=15, max_features="sqrt", random_state=0)
OURS = dict(GBSG2_TREES, builder="library")
# floating-point reordering of the same products and sums, nothing more
EXACT = 1e-10


def _split(loader, event_field, time_field):
    X, y = loader()
    X = OneHotEncoder().fit_transform(X).to_numpy(dtype=float)
    y = make_outcome(y[time_field], y[event_field])
    return train_test_split(X, y, test_size=0.3, random_state=0)


@pytest.fixture(scope="module")
def gbsg2():
    return _split(load_gbsg2, "cens", "time")


@pytest.fixture(scope="module")
def library_forest(gbsg2):
    X_train, _, y_train, _ = gbsg2
    return RandomSurvivalForest(oob_score=True, **GBSG2_TREES).fit(X_train, y_train)


def test_survival_on_full_grid_equals_library(gbsg2, library_forest):
    X_train, X_test, y_train, _ = gbsg2
    ours = SurvivalForest(time_grid="all", **OURS).fit(X_train, y_train)
    lib_probs = library_forest.predict_survival_function(X_test, return_array=True)
    # the library's own time axis includes censoring times, where curves stay flat
    our_probs = ours.predict_survival(X_test, library_forest.unique_times_)
    np.testing.assert_allclose(our_probs, lib_probs, rtol=0, atol=EXACT)


def test_survival_on_coarse_grid_equals_library_at_grid_and_is_bounded_between(gbsg2, library_forest):
    X_train, X_test, y_train, _ = gbsg2
    ours = SurvivalForest(time_grid=20, **OURS).fit(X_train, y_train)
    grid = ours.time_grid_
    lib_fns = library_forest.predict_survival_function(X_test)
    at_grid = np.array([fn(grid) for fn in lib_fns])
    np.testing.assert_allclose(ours.predict_survival(X_test), at_grid, rtol=0, atol=EXACT)

    # documented tolerance between grid times g_k <= t < g_k+1: 0 <= ours - library <= S(g_k) - S(g_k+1)
    times = library_forest.unique_times_
    lib_all = library_forest.predict_survival_function(X_test, return_array=True)
    ours_all = ours.predict_survival(X_test, times)
    on_grid = ours.predict_survival(X_test)
    k = np.searchsorted(grid, times, side="right") - 1
    drop_to_next = np.zeros_like(ours_all)
    inside = (k >= 0) & (k < grid.size - 1)
    drop_to_next[:, inside] = on_grid[:, k[inside]] - on_grid[:, k[inside] + 1]
    diff = ours_all - lib_all
    assert diff.min() >= -EXACT
    assert np.all(diff <= drop_to_next + EXACT)
    # the coarse grid really loses resolution between grid times, so the bound is not vacuous
    assert diff.max() > 0.01


def test_risk_equals_library_predict_whatever_the_grid(gbsg2, library_forest):
    X_train, X_test, y_train, y_test = gbsg2
    lib_risk = library_forest.predict(X_test)
    for grid in (None, 10):
        ours = SurvivalForest(time_grid=grid, **OURS).fit(X_train, y_train)
        risk = ours.predict_risk(X_test)
        np.testing.assert_allclose(risk, lib_risk, rtol=1e-12)
        assert spearmanr(risk, lib_risk).statistic == pytest.approx(1.0, abs=1e-12)
        c_ours = concordance_index_censored(y_test["event"], y_test["time"], risk)[0]
        c_lib = concordance_index_censored(y_test["event"], y_test["time"], lib_risk)[0]
        assert c_ours == c_lib


def test_out_of_bag_c_equals_library(gbsg2, library_forest):
    X_train, _, y_train, _ = gbsg2
    ours = SurvivalForest(**OURS).fit(X_train, y_train)
    assert ours.oob_score_ == pytest.approx(library_forest.oob_score_, abs=1e-12)


def test_other_tree_settings_on_veterans_data():
    X_train, X_test, y_train, _ = _split(load_veterans_lung_cancer, "Status", "Survival_in_days")
    settings = dict(n_estimators=30, min_samples_leaf=5, max_features=None, max_depth=4, random_state=2)
    lib = RandomSurvivalForest(**settings).fit(X_train, y_train)
    ours = SurvivalForest(time_grid="all", builder="library", **settings).fit(X_train, y_train)
    np.testing.assert_allclose(
        ours.predict_survival(X_test, lib.unique_times_),
        lib.predict_survival_function(X_test, return_array=True),
        rtol=0,
        atol=EXACT,
    )
    np.testing.assert_allclose(ours.predict_risk(X_test), lib.predict(X_test), rtol=1e-12)


def test_permutation_importance_equals_brute_force_with_library(gbsg2, library_forest):
    """Same shuffles, re-predicted by the library forest and scored by sksurv's C."""
    X_train, X_test, y_train, y_test = gbsg2
    ours = SurvivalForest(**OURS).fit(X_train, y_train)
    res = permutation_importance(ours, X_test, y_test, n_repeats=2, random_state=7)

    def c(risk):
        return concordance_index_censored(y_test["event"], y_test["time"], risk)[0]

    baseline = c(library_forest.predict(X_test))
    rng = np.random.default_rng(7)  # the documented order of shuffles
    expected = np.empty((X_test.shape[1], 2))
    for j in range(X_test.shape[1]):
        for r in range(2):
            Xp = X_test.copy()
            Xp[:, j] = X_test[rng.permutation(len(X_test)), j]
            expected[j, r] = baseline - c(library_forest.predict(Xp))
    order = [int(name[1:]) for name in res.features]
    assert res.baseline == pytest.approx(baseline, abs=1e-12)
    np.testing.assert_allclose(res.drops, expected[order], rtol=0, atol=1e-12)
    # GBSG2 pnodes (column 4 after encoding) is the strongest single prognostic factor
    # in this data set (Schumacher et al. 1994)
    assert res.features[0] == "x4"
