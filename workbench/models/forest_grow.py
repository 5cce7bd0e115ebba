"""Grow a forest of histogram survival trees (the default builder of ``SurvivalForest``).

Predictors are binned once (:func:`~workbench.models.survtree.bin_edges`); each
tree draws its bootstrap as multiplicities (``RandomState(seed).randint(0, n, n)``
counted per row, the draw scikit-learn's forests make), grows on the in-bag rows
with those multiplicities as frequency weights, and is summarised at once into
leaf curves on the time grid and out-of-bag risks. Trees grow in threads: the
compiled builder releases the GIL.
"""

from __future__ import annotations

import math
from numbers import Integral, Real

import numpy as np
from joblib import Parallel, delayed

from workbench.errors import ModelError
from workbench.models.forest_parts import (
    GrownTree,
    bootstrap_counts,
    leaf_estimates,
    leaf_numbering,
)
from workbench.models.survtree import (
    SurvivalTree,
    apply_binned,
    bin_columns,
    bin_edges,
    grow_tree,
    limit_leaves,
)

MAX_BINS = 255


def grow_histogram_forest(Xa, time, event, grid, event_times, *, seeds, settings: dict,
                          n_jobs: int | None) -> list[GrownTree]:
    """Grow one tree per seed.

    ``settings`` holds resolved integers: ``mtry``, ``min_leaf``, ``min_split``,
    ``max_depth`` (-1: none), ``max_leaf_nodes`` (0: none), ``max_bins`` and the
    flag ``bootstrap``.
    """
    edges = bin_edges(Xa, settings["max_bins"])
    Xb = bin_columns(Xa, edges)
    n_bins = np.array([e.size + 1 for e in edges], dtype=np.int64)
    edge_flat = np.concatenate([*edges, [0.0]])
    edge_start = np.concatenate([[0], np.cumsum([e.size for e in edges])]).astype(np.int64)
    _, rank = np.unique(time, return_inverse=True)
    rank = rank.astype(np.int64)
    order = np.argsort(time, kind="stable")
    ev8 = event.astype(np.uint8)

    def one(seed: int) -> GrownTree:
        n = time.size
        weight = bootstrap_counts(seed, n) if settings["bootstrap"] else np.ones(n, dtype=np.int64)
        samples = order[weight[order] > 0].astype(np.int32)
        # the builder's predictor draws get their own stream, not the bootstrap's
        split_seed = (int(seed) * 2654435761 + 97) % (2**32 - 1)
        left, right, feat, bthr, stat = grow_tree(
            Xb, n_bins, rank, ev8, weight.astype(np.float64), samples, settings["mtry"],
            settings["min_leaf"], settings["min_split"], settings["max_depth"], split_seed)
        if settings["max_leaf_nodes"] > 0:
            left, right, feat, bthr, stat = limit_leaves(left, right, feat, bthr, stat, settings["max_leaf_nodes"])
        node = apply_binned(Xb, left, right, feat, bthr)
        internal = left != -1
        threshold = np.full(left.size, -2.0)
        threshold[internal] = edge_flat[edge_start[feat[internal]] + bthr[internal]]
        tree = SurvivalTree(left, right, feat, threshold)
        node_to_leaf, n_leaves = leaf_numbering(tree)
        leaf = node_to_leaf[node]
        surv, risk = leaf_estimates(leaf, n_leaves, time, event, weight, grid, event_times)
        oob = np.flatnonzero(weight == 0)
        return GrownTree(tree, node_to_leaf, surv, risk, int(seed), oob, risk[leaf[oob]])

    if n_jobs in (None, 1) or len(seeds) == 1:
        return [one(s) for s in seeds]
    return Parallel(n_jobs=n_jobs, prefer="threads")(delayed(one)(s) for s in seeds)


def resolve_settings(params: dict, n: int, p: int) -> dict:
    """The forest's tree settings (``get_params()``) as the compiled builder takes them, checked."""
    def whole(name, value, low):
        if not isinstance(value, Integral) or isinstance(value, bool) or value < low:
            raise ModelError(f"{name} must be a whole number of at least {low}, got {value!r}.")
        return int(value)

    def count_or_fraction(name, value, low, high):
        if isinstance(value, Integral) and not isinstance(value, bool):
            return whole(name, value, low)
        if isinstance(value, Real) and 0.0 < value <= high:
            return max(int(math.ceil(value * n)), low)
        raise ModelError(f"{name} must be a whole number >= {low} or a fraction in (0, {high}], got {value!r}.")

    leaf = count_or_fraction("min_samples_leaf", params["min_samples_leaf"], 1, 0.5)
    split = count_or_fraction("min_samples_split", params["min_samples_split"], 2, 1.0)
    mf = params["max_features"]
    if mf is None:
        mtry = p
    elif mf == "sqrt":
        mtry = max(1, int(math.sqrt(p)))
    elif mf == "log2":
        mtry = max(1, int(math.log2(p)))
    elif isinstance(mf, Integral) and not isinstance(mf, bool) and 1 <= mf <= p:
        mtry = int(mf)
    elif isinstance(mf, Real) and not isinstance(mf, (bool, Integral)) and 0.0 < mf <= 1.0:
        mtry = max(1, int(mf * p))
    else:
        raise ModelError(
            f"max_features={mf!r} is not understood; use 'sqrt', 'log2', None, a whole number "
            f"from 1 to {p} or a fraction in (0, 1]."
        )
    depth = -1 if params["max_depth"] is None else whole("max_depth", params["max_depth"], 0)
    leaves = 0 if params["max_leaf_nodes"] is None else whole("max_leaf_nodes", params["max_leaf_nodes"], 2)
    bins = whole("max_bins", params["max_bins"], 2)
    if bins > MAX_BINS:
        raise ModelError(f"max_bins must be at most {MAX_BINS}, got {bins}.")
    return {"n_trees": whole("n_estimators", params["n_estimators"], 1), "mtry": mtry, "min_leaf": leaf,
            "min_split": max(split, 2 * leaf), "max_depth": depth, "max_leaf_nodes": leaves,
            "max_bins": bins, "bootstrap": bool(params["bootstrap"])}
