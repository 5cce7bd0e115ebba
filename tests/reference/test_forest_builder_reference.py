"""Our histogram tree builder against scikit-survival's forest and an exhaustive log-rank search.

Sources:
- German Breast Cancer Study Group 2 (Schumacher et al. 1994) and the Worcester
  Heart Attack Study (Hosmer, Lemeshow & May, Applied Survival Analysis, 2nd ed.
  2008), as shipped in scikit-survival (``sksurv.datasets.load_gbsg2``,
  ``load_whas500``), categories one-hot encoded with
  ``sksurv.preprocessing.OneHotEncoder``.
- Reference forest: ``sksurv.ensemble.RandomSurvivalForest`` (scikit-survival
  0.28) with the same settings (trees, leaf size, predictors per split), its
  ``oob_score_`` and ``predict``, scored with
  ``sksurv.metrics.concordance_index_censored``.
- Reference split: every candidate threshold scored with
  ``lifelines.statistics.logrank_test`` (lifelines 0.30), whose chi-square
  statistic is the square of the standardised statistic the builder maximises
  (every candidate scored with the same formula written out in the test, checked
  against lifelines on the best two).
"""

from __future__ import annotations

import numpy as np
import pytest
from lifelines.statistics import logrank_test
from sklearn.model_selection import train_test_split
from sksurv.datasets import load_gbsg2, load_whas500
from sksurv.ensemble import RandomSurvivalForest
from sksurv.metrics import concordance_index_censored
from sksurv.preprocessing import OneHotEncoder

from workbench.cohort.outcome import make_outcome
from workbench.models.forest import SurvivalForest
from workbench.models.survtree import bin_edges

DATASETS = {
    "gbsg2": (load_gbsg2, "cens", "time"),
    "whas500": (load_whas500, "fstat", "lenfol"),
}


def _data(name):
    loader, event_field, time_field = DATASETS[name]
    X, y = loader()
    X = OneHotEncoder().fit_transform(X).to_numpy(dtype=float)
    return X, make_outcome(y[time_field], y[event_field])


@pytest.mark.slow
@pytest.mark.parametrize("name", ["gbsg2", "whas500"])
def test_discrimination_matches_library_forest_over_five_seeds(name):
    X, y = _data(name)
    diffs = []
    for seed in range(5):
        X_train, X_test, y_train, y_test = train_test_split(X, y, test_size=0.3, random_state=seed)
        settings = dict(n_estimators=100, min_samples_leaf=15, max_features="sqrt", random_state=seed)
        lib = RandomSurvivalForest(oob_score=True, **settings).fit(X_train, y_train)
        ours = SurvivalForest(**settings).fit(X_train, y_train)

        def c(risk, y_test=y_test):
            return concordance_index_censored(y_test["event"], y_test["time"], risk)[0]

        diffs.append((ours.oob_score_ - lib.oob_score_, c(ours.predict_risk(X_test)) - c(lib.predict(X_test))))
    oob_diff, held_out_diff = np.mean(diffs, axis=0)
    # tolerance 0.01 C averaged over 5 seeds (project requirement); the seeds' own spread is
    # about 0.005 per seed on these data, so a real difference in split quality would show
    assert abs(oob_diff) <= 0.01
    assert abs(held_out_diff) <= 0.01


def _logrank_chi2(time, event, left):
    """Two-group log-rank chi-square (hypergeometric variance), written out directly."""
    t_ev = np.unique(time[event])
    at_risk = time.size - np.searchsorted(np.sort(time), t_ev, side="left")
    at_risk_l = left.sum() - np.searchsorted(np.sort(time[left]), t_ev, side="left")
    deaths = np.bincount(np.searchsorted(t_ev, time[event]), minlength=t_ev.size)
    deaths_l = np.bincount(np.searchsorted(t_ev, time[event & left]), minlength=t_ev.size)
    u = np.sum(deaths_l - deaths * at_risk_l / at_risk)
    with np.errstate(invalid="ignore", divide="ignore"):
        v = deaths * (at_risk_l / at_risk) * (1 - at_risk_l / at_risk) * (at_risk - deaths) / (at_risk - 1)
    return u * u / np.nansum(v)


def _exhaustive_root_split(X, y, min_leaf):
    """Every candidate (chi-square, feature, threshold), best first.

    Candidates: the midpoints between neighbouring distinct values of a column (every
    split of the raw values) when it has at most 255 distinct values, else the
    builder's bin edges (the splits a 255-bin histogram can make).
    """
    edges = bin_edges(X.astype(np.float32), 255)
    found = []
    for j in range(X.shape[1]):
        col = X[:, j].astype(np.float32).astype(np.float64)
        u = np.unique(col)
        cands = (u[:-1] + u[1:]) / 2 if u.size <= 255 else edges[j]
        for thr in cands:
            left = col <= thr
            if left.sum() >= min_leaf and (~left).sum() >= min_leaf:
                found.append((_logrank_chi2(y["time"], y["event"], left), j, thr))
    return sorted(found, key=lambda c: -c[0])


@pytest.mark.parametrize("name", ["gbsg2", "whas500"])
def test_first_split_matches_exhaustive_logrank_search(name):
    X, y = _data(name)
    min_leaf = 20
    tree_settings = dict(n_estimators=1, bootstrap=False, max_features=None, max_depth=1,
                         min_samples_leaf=min_leaf, random_state=0)
    forest = SurvivalForest(**tree_settings).fit(X, y)
    tree = forest.trees_[0]
    ranked = _exhaustive_root_split(X, y, min_leaf)
    (best, feature, threshold), (second, _, _) = ranked[0], ranked[1]
    # the direct formula is lifelines' statistic (checked on the two best candidates)
    for stat, j, thr in ranked[:2]:
        left = X[:, j].astype(np.float32) <= thr
        ref = logrank_test(y["time"][left], y["time"][~left], y["event"][left], y["event"][~left])
        assert stat == pytest.approx(ref.test_statistic, rel=1e-9)
    # the best split is unique on these data, so the comparison is not decided by a tie
    assert best - second > 1e-6
    assert tree.node_count == 3
    assert tree.feature[0] == feature
    assert tree.threshold[0] == pytest.approx(threshold, rel=0, abs=1e-9)
    assert np.isnan(forest.oob_score_)
    # the root split's leaves hold at least min_leaf patients, as asked
    leaves = tree.apply(X.astype(np.float32))
    assert np.bincount(leaves)[1:].min() >= min_leaf


def test_every_split_of_a_deeper_tree_matches_exhaustive_search_on_its_rows():
    # GBSG2: every column has at most 255 distinct values, so the search is over all raw splits
    X, y = _data("gbsg2")
    min_leaf = 20
    forest = SurvivalForest(n_estimators=1, bootstrap=False, max_features=None, max_depth=3,
                            min_samples_leaf=min_leaf, random_state=0).fit(X, y)
    tree = forest.trees_[0]
    Xf = X.astype(np.float32)
    path_rows = {0: np.arange(len(y))}
    checked = 0
    for node in range(tree.node_count):
        if tree.children_left[node] == -1:
            continue
        rows = path_rows[node]
        go_left = Xf[rows, tree.feature[node]] <= tree.threshold[node]
        path_rows[tree.children_left[node]] = rows[go_left]
        path_rows[tree.children_right[node]] = rows[~go_left]
        ranked = _exhaustive_root_split(X[rows], y[rows], min_leaf)
        (best, feature, threshold), (second, _, _) = ranked[0], ranked[1]
        if best - second <= 1e-6 * best:
            continue  # two candidates tie; either is a correct answer
        assert tree.feature[node] == feature
        # any threshold between the same two neighbouring values of the node's rows is the same split
        np.testing.assert_array_equal(go_left, Xf[rows, feature] <= threshold)
        checked += 1
    assert checked >= 5
