"""Unit tests for the histogram tree builder (workbench.models.survtree, forest_grow).

Synthetic cohorts are generated in fixtures with fixed seeds; the builder's
splits are checked against an exhaustive log-rank search on public data in
tests/reference/test_forest_builder_reference.py.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from workbench.cohort.outcome import make_outcome
from workbench.errors import ModelError
from workbench.metrics.concordance import harrell_c
from workbench.models.forest import SurvivalForest, permutation_importance
from workbench.models.forest_parts import bootstrap_counts
from workbench.models.survtree import apply_binned, bin_columns, bin_edges, grow_tree
from workbench.predictions import RiskScores

few_trees = pytest.mark.filterwarnings("ignore::workbench.errors.WorkbenchWarning")


@pytest.fixture(scope="module")
def cohort():
    rng = np.random.default_rng(21)
    n = 600
    X = rng.standard_normal((n, 5))
    X[:, 4] = rng.integers(0, 3, n)  # a predictor with three values
    event_time = rng.exponential(np.exp(-X[:, 0] + 0.5 * X[:, 1]))
    censor_time = rng.exponential(1.5, n)
    y = make_outcome(np.round(np.minimum(event_time, censor_time), 2) + 0.01, event_time <= censor_time)
    return pd.DataFrame(X, columns=[f"x{j}" for j in range(5)]), y


def _leaf_rows(forest, b, X):
    """Distinct in-bag training rows in each leaf of tree b."""
    weight = bootstrap_counts(int(forest.tree_seeds_[b]), len(X)) if forest.bootstrap else np.ones(len(X))
    leaves = forest.trees_[b].apply(X.to_numpy(np.float32))
    return np.bincount(leaves[weight > 0], minlength=forest.trees_[b].node_count)


def test_bins_reproduce_the_thresholds():
    rng = np.random.default_rng(3)
    X = np.column_stack([rng.standard_normal(2000), rng.integers(0, 4, 2000)]).astype(np.float32)
    edges = bin_edges(X, 255)
    assert edges[0].size == 254 and edges[1].size == 3  # quantile bins; one bin per value
    Xb = bin_columns(X, edges)
    for j in range(2):
        for b in (0, 1, edges[j].size - 1):
            # "bin <= b" is "x <= edge b", the rule the fitted tree applies to raw values
            np.testing.assert_array_equal(Xb[j] <= b, X[:, j].astype(np.float64) <= edges[j][b])


@few_trees
def test_leaf_size_depth_and_leaf_count_limits(cohort):
    X, y = cohort
    f = SurvivalForest(5, min_samples_leaf=25, random_state=1).fit(X, y)
    for b, tree in enumerate(f.trees_):
        counts = _leaf_rows(f, b, X)
        assert counts[tree.children_left == -1].min() >= 25
    deep = SurvivalForest(3, min_samples_leaf=5, max_depth=2, random_state=1).fit(X, y)
    assert all(t.node_count <= 7 for t in deep.trees_)
    capped = SurvivalForest(3, min_samples_leaf=5, max_leaf_nodes=6, random_state=1).fit(X, y)
    free = SurvivalForest(3, min_samples_leaf=5, random_state=1).fit(X, y)
    for t, full in zip(capped.trees_, free.trees_, strict=True):
        assert int((t.children_left == -1).sum()) == 6
        # the best-first tree is the top of the full tree: same root split
        assert t.feature[0] == full.feature[0] and t.threshold[0] == full.threshold[0]


@few_trees
def test_threads_grow_the_same_forest(cohort):
    X, y = cohort
    one = SurvivalForest(6, min_samples_leaf=5, random_state=4, n_jobs=1).fit(X, y)
    two = SurvivalForest(6, min_samples_leaf=5, random_state=4, n_jobs=2).fit(X, y)
    np.testing.assert_array_equal(one.predict_survival(X), two.predict_survival(X))
    np.testing.assert_array_equal(one.predict_risk(X), two.predict_risk(X))
    assert one.oob_score_ == two.oob_score_


def test_out_of_bag_risk_is_the_mean_over_trees_that_left_the_row_out(cohort):
    X, y = cohort
    f = SurvivalForest(40, min_samples_leaf=10, random_state=2).fit(X, y)
    Xa = X.to_numpy(np.float32)
    num = np.zeros(len(y))
    den = np.zeros(len(y))
    for seed, tree, to_leaf, risk in zip(f.tree_seeds_, f.trees_, f.node_to_leaf_, f.leaf_risk_, strict=True):
        out = bootstrap_counts(int(seed), len(y)) == 0
        num[out] += risk[to_leaf[tree.apply(Xa)]][out]
        den[out] += 1
    scored = den > 0
    np.testing.assert_allclose(f.oob_risk_[scored], num[scored] / den[scored], rtol=1e-12)
    assert np.isnan(f.oob_risk_[~scored]).all()
    c = harrell_c(y[scored], RiskScores(f.oob_risk_[scored], model="forest")).c_index
    assert f.oob_score_ == pytest.approx(c, abs=1e-12)


def test_no_bootstrap_means_no_out_of_bag_estimate(cohort):
    X, y = cohort
    f = SurvivalForest(2, min_samples_leaf=10, bootstrap=False, max_features=None, random_state=0).fit(X, y)
    assert np.isnan(f.oob_score_) and np.isnan(f.oob_risk_).all()
    # every row in every tree and every predictor tried: both trees are the same
    np.testing.assert_array_equal(f.trees_[0].threshold, f.trees_[1].threshold)
    with pytest.raises(ModelError, match="bootstrap"):
        permutation_importance(f, X, y, random_state=0, rows="out-of-bag")


@pytest.mark.parametrize("bad", [dict(builder="other"), dict(max_features="half"), dict(max_features=9),
                                 dict(max_bins=256), dict(min_samples_leaf=0), dict(max_depth=-1),
                                 dict(max_leaf_nodes=1), dict(n_estimators=0)])
def test_bad_settings_are_refused(cohort, bad):
    X, y = cohort
    with pytest.raises(ModelError):
        SurvivalForest(**{"n_estimators": 2, **bad}).fit(X, y)


def test_grown_tree_partitions_its_rows():
    rng = np.random.default_rng(8)
    n = 300
    X = rng.standard_normal((n, 3)).astype(np.float32)
    time = rng.exponential(1.0, n)
    event = (rng.random(n) < 0.7).astype(np.uint8)
    edges = bin_edges(X, 255)
    Xb = bin_columns(X, edges)
    n_bins = np.array([e.size + 1 for e in edges], dtype=np.int64)
    rank = np.unique(time, return_inverse=True)[1].astype(np.int64)
    samples = np.argsort(time, kind="stable").astype(np.int32)
    left, right, feat, bthr, stat = grow_tree(Xb, n_bins, rank, event, np.ones(n), samples, 3, 7, 14, -1, 1)
    leaf = apply_binned(Xb, left, right, feat, bthr)
    assert np.all(left[leaf] == -1)
    sizes = np.bincount(leaf, minlength=left.size)[left == -1]
    assert sizes.sum() == n and sizes.min() >= 7
    internal = left != -1
    assert np.all(left[internal] > np.flatnonzero(internal)) and np.all(stat[internal] > 0)
