"""Pieces shared by the survival forest's tree builders: input checks, the time grid,
bootstrap multiplicities, leaf curves on the grid and the training fingerprint."""

from __future__ import annotations

import hashlib
from numbers import Integral
from typing import NamedTuple

import numpy as np

from workbench.errors import ModelError

DEFAULT_GRID_SIZE = 100


class GrownTree(NamedTuple):
    """One fitted tree with what the forest keeps of it, and its out-of-bag predictions."""

    tree: object  # children_left, children_right, feature, threshold, node_count, apply
    node_to_leaf: np.ndarray  # (n_nodes,) row in surv / risk, -1 for internal nodes
    surv: np.ndarray  # (n_leaves, n_grid) leaf Kaplan-Meier on the grid
    risk: np.ndarray  # (n_leaves,) leaf Nelson-Aalen hazard summed over the event times
    seed: int  # seed of the tree's bootstrap
    oob_rows: np.ndarray  # training rows the tree's bootstrap left out
    oob_risk: np.ndarray  # the tree's risk for those rows


def column_names(X) -> np.ndarray | None:
    cols = getattr(X, "columns", None)
    if cols is None or not all(isinstance(c, str) for c in cols):
        return None
    return np.asarray(list(cols), dtype=object)


def as_float32(X, what: str) -> np.ndarray:
    # the trees compare float32 values, as scikit-learn converts them
    try:
        Xa = np.ascontiguousarray(np.asarray(X, dtype=np.float32))
    except (TypeError, ValueError) as exc:
        raise ModelError(
            f"{what} contain non-numeric values ({exc}); encode categories as numbers "
            "(for example one column per category) before fitting the forest."
        ) from exc
    if Xa.ndim != 2:
        raise ModelError(f"{what} must be a table (2-D), got an array with {Xa.ndim} dimension(s).")
    if not np.all(np.isfinite(Xa)):
        rows = np.flatnonzero(~np.isfinite(Xa).all(axis=1))
        raise ModelError(
            f"{what} contain missing or infinite values (rows {rows[:5].tolist()}); "
            "impute or drop them before using the forest."
        )
    return Xa


def make_grid(spec, event_times: np.ndarray) -> np.ndarray:
    if spec is None:
        spec = DEFAULT_GRID_SIZE
    if isinstance(spec, str):
        if spec != "all":
            raise ModelError(f"time_grid={spec!r} is not understood; use None, an integer, 'all' or times.")
        return event_times.copy()
    if isinstance(spec, Integral) and not isinstance(spec, bool):
        if spec < 2:
            raise ModelError(f"time_grid={spec} is too small; ask for at least 2 grid times.")
        levels = np.linspace(0.0, 1.0, int(spec))
        # inverted_cdf picks observed event times, where the curves are exact
        return np.unique(np.quantile(event_times, levels, method="inverted_cdf"))
    grid = np.asarray(spec, dtype=float).ravel()
    if grid.size == 0 or not np.all(np.isfinite(grid)) or np.any(grid < 0):
        raise ModelError("time_grid must hold finite, non-negative times.")
    if np.any(np.diff(grid) <= 0):
        raise ModelError("time_grid times must be strictly increasing; sort them and drop duplicates.")
    return grid


def bootstrap_counts(seed: int, n: int) -> np.ndarray:
    # each tree's bootstrap is RandomState(seed).randint(0, n, n), as scikit-learn's forest draws it;
    # (the library builder checks the reconstruction against its own trees)
    idx = np.random.RandomState(seed).randint(0, n, n)
    return np.bincount(idx, minlength=n).astype(np.int64)


def leaf_estimates(leaf, n_leaves, time, event, weight, grid, event_times):
    """Leaf Kaplan-Meier on ``grid`` and leaf summed Nelson-Aalen hazard, in one sort."""
    inbag = weight > 0
    order = np.lexsort((time[inbag], leaf[inbag]))
    lf, t = leaf[inbag][order], time[inbag][order]
    w = weight[inbag][order]
    d = np.where(event[inbag][order], w, 0)
    # integer weights keep the at-risk counts exact
    before = np.cumsum(w) - w
    leaf_first = np.searchsorted(lf, lf, side="left")
    at_risk = np.bincount(lf, weights=w, minlength=n_leaves)[lf] - (before - before[leaf_first])
    start = np.flatnonzero(np.r_[True, (lf[1:] != lf[:-1]) | (t[1:] != t[:-1])])
    d_g = np.add.reduceat(d, start)
    keep = d_g > 0
    l_g, t_g = lf[start][keep], t[start][keep]
    n_g, d_g = at_risk[start][keep], d_g[keep].astype(float)

    factors = np.ones((n_leaves, grid.size + 1))
    np.multiply.at(factors, (l_g, np.searchsorted(grid, t_g, side="left")), 1.0 - d_g / n_g)
    surv = np.cumprod(factors[:, :-1], axis=1)

    later_event_times = event_times.size - np.searchsorted(event_times, t_g, side="left")
    risk = np.bincount(l_g, weights=d_g / n_g * later_event_times, minlength=n_leaves)
    return surv, risk


def fingerprint(Xa: np.ndarray, time: np.ndarray, event: np.ndarray) -> str:
    h = hashlib.sha256()
    for part in (np.asarray(Xa.shape, dtype=np.int64), Xa, time.astype(np.float64), event.astype(np.uint8)):
        h.update(np.ascontiguousarray(part).tobytes())
    return h.hexdigest()


def leaf_numbering(tree) -> tuple[np.ndarray, int]:
    """Row of each node among the tree's leaves (-1 for internal nodes), and the number of leaves."""
    is_leaf = np.asarray(tree.children_left) == -1
    node_to_leaf = np.full(tree.node_count, -1, dtype=np.int32)
    node_to_leaf[is_leaf] = np.arange(int(is_leaf.sum()), dtype=np.int32)
    return node_to_leaf, int(is_leaf.sum())
