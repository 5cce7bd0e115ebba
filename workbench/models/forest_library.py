"""Trees grown by scikit-survival's builder (``SurvivalForest(builder="library")``).

Kept so that the leaf curves, risk scores and out-of-bag C of
:class:`~workbench.models.forest.SurvivalForest` can be checked tree by tree
against ``sksurv.ensemble.RandomSurvivalForest`` grown with the same seed: the
library builds its trees in low-memory mode (no curve in any node), and the
leaf curves are rebuilt here from each leaf's in-bag rows on the time grid.
"""

from __future__ import annotations

import numpy as np

from workbench.errors import ModelError
from workbench.models.forest_parts import (
    GrownTree,
    bootstrap_counts,
    leaf_estimates,
    leaf_numbering,
)


def grow_with_library(Xa, y, time, event, grid, event_times, settings: dict) -> list[GrownTree]:
    """Grow the trees with ``RandomSurvivalForest`` and summarise each on the grid."""
    from sksurv.ensemble import RandomSurvivalForest

    forest = RandomSurvivalForest(**settings, low_memory=True)
    try:
        forest.fit(Xa, y)
    except ValueError as exc:
        raise ModelError(
            f"the survival forest could not be grown: {exc}. Check the forest settings "
            "(number of trees, leaf size, features per split)."
        ) from exc
    n = Xa.shape[0]
    out = []
    for est in forest.estimators_:
        tree = est.tree_
        seed = int(est.random_state)
        weight = bootstrap_counts(seed, n) if settings["bootstrap"] else np.ones(n, dtype=np.int64)
        node_to_leaf, n_leaves = leaf_numbering(tree)
        leaf = node_to_leaf[tree.apply(Xa)]
        _check_leaf_weights(tree, node_to_leaf, leaf, weight)
        surv, risk = leaf_estimates(leaf, n_leaves, time, event, weight, grid, event_times)
        oob = np.flatnonzero(weight == 0)
        out.append(GrownTree(tree, node_to_leaf, surv, risk, seed, oob, risk[leaf[oob]]))
    return out


def _check_leaf_weights(tree, node_to_leaf, leaf, weight) -> None:
    per_leaf = np.bincount(leaf, weights=weight, minlength=int(node_to_leaf.max()) + 1)
    expected = tree.weighted_n_node_samples[node_to_leaf >= 0]
    if not np.allclose(per_leaf, expected):
        raise ModelError(
            "the bootstrap samples of the installed scikit-learn could not be reconstructed, "
            "so leaf curves would be wrong; report this together with the scikit-learn version."
        )
