"""Histogram survival trees: binning, log-rank split search, and tree walking, compiled with numba.

Predictors are cut once, on all training rows, into at most ``max_bins`` quantile
bins (:func:`bin_edges`, :func:`bin_columns`). A tree is then grown on bin
numbers only (:func:`grow_tree`): at every node, for each candidate predictor,
the node's rows are counted by bin, and one sweep over the bins in increasing
order evaluates the log-rank statistic of every threshold from running sums by
event time. Bootstrap multiplicities enter as frequency weights, so no row is
copied. The compiled functions release the GIL, so trees grow in parallel
threads, and they are cached on disk (``cache=True``): only the first call in a
fresh environment pays for the compilation.

Cost of one node with ``m`` in-bag rows, ``K`` distinct event times and ``B``
occupied bins of a predictor: ``O(m + B K)`` per candidate predictor.

The split statistic at threshold ``b`` (left: bins ``<= b``) is the standardised
log-rank statistic :math:`|U| / \\sqrt{V}` with, over the node's event times
:math:`t_k` (weighted at-risk :math:`n_k`, events :math:`d_k`, left at-risk
:math:`n_{Lk}`, left events :math:`d_{Lk}`),

.. math::

    U = \\sum_k d_{Lk} - d_k n_{Lk} / n_k, \\qquad
    V = \\sum_k d_k \\frac{n_{Lk}}{n_k}\\Big(1 - \\frac{n_{Lk}}{n_k}\\Big)\\frac{n_k - d_k}{n_k - 1}.

References
----------
.. [1] Ishwaran H, Kogalur UB, Blackstone EH, Lauer MS. Random survival forests.
   Ann Appl Stat 2008;2(3):841-60.
.. [2] LeBlanc M, Crowley J. Survival trees by goodness of split. J Am Stat
   Assoc 1993;88:457-67.
.. [3] Ke G, Meng Q, Finley T, et al. LightGBM: a highly efficient gradient
   boosting decision tree. NeurIPS 2017 (histogram-based split search).
"""

from __future__ import annotations

import numpy as np
from numba import njit

__all__ = ["SurvivalTree", "bin_columns", "bin_edges", "grow_tree", "add_leaf_values"]

LEAF = -1  # children of a leaf
UNDEFINED = -2  # feature of a leaf, as scikit-learn marks it


# ------------------------------------------------------------------ binning


def bin_edges(Xa: np.ndarray, max_bins: int = 255) -> list[np.ndarray]:
    """Bin edges of each column: a value ``x`` falls in bin ``#(edges < x)``.

    A column with at most ``max_bins`` distinct values gets one bin per value
    (edges at the midpoints between neighbouring values, so every split of the
    raw values is available); otherwise the edges are the midpoint quantiles at
    levels ``1/max_bins, ..., (max_bins - 1)/max_bins``, duplicates removed.
    Edges are float64 and the values are compared in float64.
    """
    edges = []
    levels = np.linspace(0.0, 1.0, max_bins + 1)[1:-1]
    for j in range(Xa.shape[1]):
        col = Xa[:, j].astype(np.float64)
        u = np.unique(col)
        if u.size <= max_bins:
            edges.append((u[:-1] + u[1:]) / 2.0)
        else:
            edges.append(np.unique(np.quantile(col, levels, method="midpoint")))
    return edges


def bin_columns(Xa: np.ndarray, edges: list[np.ndarray]) -> np.ndarray:
    """Bin numbers as uint8, one row per predictor (shape ``(n_features, n_samples)``)."""
    out = np.empty((Xa.shape[1], Xa.shape[0]), dtype=np.uint8)
    for j, e in enumerate(edges):
        out[j] = np.searchsorted(e, Xa[:, j].astype(np.float64), side="left")
    return out


# ------------------------------------------------------------ tree growing


@njit(cache=True, nogil=True)
def grow_tree(Xb, n_bins, rank, event, weight, samples, mtry, min_leaf, min_split, max_depth, seed):
    """Grow one survival tree on binned predictors.

    Parameters
    ----------
    Xb : uint8 array (n_features, n_samples)
    n_bins : int array (n_features,)
    rank : int array (n_samples,)
        Rank of each row's time among the distinct training times.
    event : uint8 array (n_samples,)
    weight : float64 array (n_samples,)
        Frequency weight (bootstrap multiplicity) of each row.
    samples : int32 array
        Rows with positive weight, sorted by time.
    mtry, min_leaf, min_split : int
        Predictors tried per node; minimum rows (distinct, in-bag) per leaf and to split.
    max_depth : int
        Negative for no limit.
    seed : int
        Seed of the predictor draws.

    Returns
    -------
    left, right, feature, bin_threshold : int arrays (n_nodes,)
        Node ``i`` sends a row to ``left[i]`` when its bin of ``feature[i]`` is
        ``<= bin_threshold[i]``; leaves have ``left == right == -1``. Children
        are numbered after their parent.
    statistic : float64 array (n_nodes,)
        Log-rank statistic of each node's split (0 for leaves).
    """
    np.random.seed(seed)
    p = Xb.shape[0]
    m0 = samples.size
    cap = 2 * m0 + 1
    left = np.full(cap, LEAF, np.int64)
    right = np.full(cap, LEAF, np.int64)
    feat = np.full(cap, UNDEFINED, np.int64)
    bthr = np.full(cap, -1, np.int64)
    stat_out = np.zeros(cap)
    samples = samples.copy()
    tmp = np.empty(m0, np.int32)
    slot = np.empty(m0, np.int64)
    byb = np.empty(m0, np.int64)
    max_nb = 1
    for f in range(p):
        max_nb = max(max_nb, n_bins[f])
    cnt = np.zeros(max_nb, np.int64)
    off = np.zeros(max_nb + 1, np.int64)
    dk = np.zeros(m0 + 1)
    nk = np.zeros(m0 + 1)
    ak = np.zeros(m0 + 1)
    ck = np.zeros(m0 + 1)
    cl = np.zeros(m0 + 1)
    dl = np.zeros(m0 + 1)
    perm = np.arange(p)
    st_node = np.empty(cap, np.int64)
    st_lo = np.empty(cap, np.int64)
    st_hi = np.empty(cap, np.int64)
    st_depth = np.empty(cap, np.int64)
    sp = 0
    st_node[0], st_lo[0], st_hi[0], st_depth[0] = 0, 0, m0, 0
    sp = 1
    n_nodes = 1
    while sp > 0:
        sp -= 1
        node, lo, hi, depth = st_node[sp], st_lo[sp], st_hi[sp], st_depth[sp]
        m = hi - lo
        if m < min_split or m < 2 * min_leaf or (max_depth >= 0 and depth >= max_depth):
            continue
        # event times of the node: slot[q] = number of node event times <= time of row q
        n_ev = 0
        q = lo
        while q < hi:
            r = rank[samples[q]]
            q2 = q
            dsum = 0.0
            while q2 < hi and rank[samples[q2]] == r:
                dsum += weight[samples[q2]] * event[samples[q2]]
                q2 += 1
            if dsum > 0.0:
                n_ev += 1
                dk[n_ev] = dsum
            for qq in range(q, q2):
                slot[qq] = n_ev
            q = q2
        if n_ev == 0:
            continue
        for k in range(n_ev + 1):
            cl[k] = 0.0
        for q in range(lo, hi):
            cl[slot[q]] += weight[samples[q]]
        acc = 0.0
        for k in range(n_ev, 0, -1):
            acc += cl[k]
            nk[k] = acc
            ak[k] = dk[k] / acc
            ck[k] = dk[k] * (acc - dk[k]) / ((acc - 1.0) * acc * acc) if acc > 1.0 else 0.0
        best_stat = -1.0
        best_f = -1
        best_b = -1
        visited = 0
        j = 0
        while j < p and visited < mtry:
            r = j + np.random.randint(0, p - j)
            f = perm[r]
            perm[r] = perm[j]
            perm[j] = f
            j += 1
            nb = n_bins[f]
            for b in range(nb):
                cnt[b] = 0
            for q in range(lo, hi):
                cnt[Xb[f, samples[q]]] += 1
            occupied = 0
            for b in range(nb):
                if cnt[b] > 0:
                    occupied += 1
            if occupied < 2:
                continue  # constant in this node: does not count towards mtry
            visited += 1
            off[0] = 0
            for b in range(nb):
                off[b + 1] = off[b] + cnt[b]
                cnt[b] = off[b]  # reused as the fill position
            for q in range(lo, hi):
                b = Xb[f, samples[q]]
                byb[cnt[b]] = q
                cnt[b] += 1
            for k in range(n_ev + 1):
                cl[k] = 0.0
                dl[k] = 0.0
            n_left = 0
            for b in range(nb):
                if off[b + 1] == off[b]:
                    continue
                for t in range(off[b], off[b + 1]):
                    q = byb[t]
                    s = samples[q]
                    cl[slot[q]] += weight[s]
                    dl[slot[q]] += weight[s] * event[s]
                n_left += off[b + 1] - off[b]
                if m - n_left < min_leaf:
                    break
                if n_left < min_leaf:
                    continue
                acc = 0.0
                u = 0.0
                v = 0.0
                for k in range(n_ev, 0, -1):
                    acc += cl[k]
                    u += dl[k] - ak[k] * acc
                    v += ck[k] * acc * (nk[k] - acc)
                st = abs(u) / np.sqrt(v) if v > 0.0 else 0.0
                if st > best_stat:
                    best_stat, best_f, best_b = st, f, b
        if best_f < 0:
            continue
        # stable partition keeps each child's rows sorted by time
        n_l = 0
        n_r = 0
        for q in range(lo, hi):
            s = samples[q]
            if Xb[best_f, s] <= best_b:
                samples[lo + n_l] = s
                n_l += 1
            else:
                tmp[n_r] = s
                n_r += 1
        for t in range(n_r):
            samples[lo + n_l + t] = tmp[t]
        lc, rc = n_nodes, n_nodes + 1
        n_nodes += 2
        left[node], right[node], feat[node], bthr[node], stat_out[node] = lc, rc, best_f, best_b, best_stat
        st_node[sp], st_lo[sp], st_hi[sp], st_depth[sp] = rc, lo + n_l, hi, depth + 1
        sp += 1
        st_node[sp], st_lo[sp], st_hi[sp], st_depth[sp] = lc, lo, lo + n_l, depth + 1
        sp += 1
    return left[:n_nodes], right[:n_nodes], feat[:n_nodes], bthr[:n_nodes], stat_out[:n_nodes]


@njit(cache=True, nogil=True)
def apply_binned(Xb, left, right, feat, bthr):
    """Node reached by every row of binned predictors ``Xb`` (n_features, n_samples)."""
    n = Xb.shape[1]
    out = np.empty(n, np.int64)
    for i in range(n):
        node = 0
        while left[node] != LEAF:
            node = left[node] if Xb[feat[node], i] <= bthr[node] else right[node]
        out[i] = node
    return out


# ------------------------------------------------------------ tree walking


@njit(cache=True, nogil=True)
def _apply(X, left, right, feat, thr):
    n = X.shape[0]
    out = np.empty(n, np.int64)
    for i in range(n):
        node = 0
        while left[node] != LEAF:
            # float32 inputs against float64 thresholds, as scikit-learn's trees compare them
            node = left[node] if np.float64(X[i, feat[node]]) <= thr[node] else right[node]
        out[i] = node
    return out


@njit(cache=True, nogil=True)
def add_leaf_values(X, left, right, feat, thr, node_to_leaf, values, out, lo, hi):
    """``out[i] += values[leaf of row i]`` for rows ``lo <= i < hi`` of one tree."""
    width = values.shape[1]
    for i in range(lo, hi):
        node = 0
        while left[node] != LEAF:
            node = left[node] if np.float64(X[i, feat[node]]) <= thr[node] else right[node]
        row = node_to_leaf[node]
        for k in range(width):
            out[i, k] += values[row, k]


class SurvivalTree:
    """A fitted tree's structure: go left when ``x[feature] <= threshold``.

    Holds ``children_left``, ``children_right``, ``feature``, ``threshold`` and
    ``node_count`` (the names scikit-learn's trees use, so either kind serves
    the forest) and :meth:`apply`. Children are numbered after their parent.
    """

    def __init__(self, children_left, children_right, feature, threshold):
        self.children_left = np.ascontiguousarray(children_left, dtype=np.int64)
        self.children_right = np.ascontiguousarray(children_right, dtype=np.int64)
        self.feature = np.ascontiguousarray(feature, dtype=np.int64)
        self.threshold = np.ascontiguousarray(threshold, dtype=np.float64)
        self.node_count = int(self.children_left.size)

    def apply(self, X) -> np.ndarray:
        """Leaf node index of every row of ``X`` (compared in float64)."""
        X = np.ascontiguousarray(X)
        if X.dtype not in (np.float32, np.float64):
            X = X.astype(np.float64)
        return _apply(X, self.children_left, self.children_right, self.feature, self.threshold)


def limit_leaves(left, right, feat, bthr, stat, max_leaf_nodes: int):
    """Keep the splits a best-first growth to ``max_leaf_nodes`` leaves would make.

    Splits do not depend on their siblings, so growing the full tree and then
    expanding, from the root, always the frontier node with the largest split
    statistic gives the tree best-first growth would have grown.
    """
    import heapq

    keep = np.zeros(left.size, dtype=bool)
    frontier = [(-stat[0], 0)] if left[0] != LEAF else []
    leaves = 1
    while frontier and leaves < max_leaf_nodes:
        _, node = heapq.heappop(frontier)
        keep[node] = True
        leaves += 1
        for child in (left[node], right[node]):
            if left[child] != LEAF:
                heapq.heappush(frontier, (-stat[child], child))
    # renumber the kept part depth-first so that children still follow their parent
    new_id = np.full(left.size, -1, dtype=np.int64)
    order = []
    stack = [0]
    while stack:
        node = stack.pop()
        new_id[node] = len(order)
        order.append(node)
        if keep[node]:
            stack.extend((right[node], left[node]))
    order = np.asarray(order)
    kept = keep[order]
    nl = np.where(kept, new_id[left[order]], LEAF)
    nr = np.where(kept, new_id[right[order]], LEAF)
    return nl, nr, np.where(kept, feat[order], UNDEFINED), np.where(kept, bthr[order], -1), np.where(kept, stat[order], 0.0)
