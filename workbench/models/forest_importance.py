"""Permutation importance of the predictors of a fitted survival forest."""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass
from numbers import Integral

import numpy as np

from workbench.cohort.outcome import check_outcome, split_outcome
from workbench.errors import MetricError, ModelError
from workbench.metrics.concordance import harrell_c
from workbench.models.forest_parts import bootstrap_counts, fingerprint
from workbench.predictions import RiskScores

__all__ = ["PermutationImportanceResult", "permutation_importance"]


@dataclass(frozen=True)
class PermutationImportanceResult:
    """Loss of concordance when one predictor is shuffled, most important first.

    Attributes
    ----------
    features : tuple of str
        Predictor names, sorted by decreasing ``mean_drop`` (ties keep column order).
    mean_drop, sd_drop : ndarray of shape (n_features,)
        Mean and sample standard deviation (ddof=1; 0 for a single repeat) over
        repeats of ``baseline - score with the predictor shuffled``.
    drops : ndarray of shape (n_features, n_repeats)
        Every repeat, in the same order as ``features``.
    baseline : float
        Score of the unshuffled predictions on the same rows.
    metric : str
    rows : {"held-out", "out-of-bag"}
    n_rows : int
        Patients that entered the score.
    n_repeats : int
    """

    features: tuple[str, ...]
    mean_drop: np.ndarray
    sd_drop: np.ndarray
    drops: np.ndarray
    baseline: float
    metric: str
    rows: str
    n_rows: int
    n_repeats: int

    def __post_init__(self):
        for name in ("mean_drop", "sd_drop", "drops"):
            arr = np.array(getattr(self, name), dtype=float)
            arr.setflags(write=False)
            object.__setattr__(self, name, arr)

    def to_frame(self):
        """The result as a pandas DataFrame, one row per predictor."""
        import pandas as pd

        return pd.DataFrame(
            {"feature": list(self.features), "mean_drop": self.mean_drop, "sd_drop": self.sd_drop}
        )


def permutation_importance(
    forest,
    X,
    y,
    *,
    n_repeats: int = 5,
    random_state: int | np.random.Generator | None,
    metric: str | Callable[[np.ndarray, np.ndarray], float] = "harrell_c",
    rows: str = "held-out",
) -> PermutationImportanceResult:
    """Permutation importance of each predictor for a fitted :class:`SurvivalForest`.

    Parameters
    ----------
    forest : SurvivalForest
        A fitted forest.
    X : array-like or DataFrame of shape (n_samples, n_features)
    y : outcome array
        Built with :func:`workbench.cohort.make_outcome`.
    n_repeats : int, default 5
        Shuffles per predictor.
    random_state : int, numpy Generator or None
        Seed of the shuffles; required so that tables can be reproduced (pass
        None explicitly for fresh randomness).
    metric : "harrell_c" or callable, default "harrell_c"
        Score where higher is better; a callable receives ``(y, risk)`` with
        ``risk`` higher = worse and returns a float.
    rows : {"held-out", "out-of-bag"}, default "held-out"
        "held-out": ``X, y`` are patients the forest was not trained on and every
        tree predicts every row. "out-of-bag": ``X, y`` must be exactly the
        training rows (checked against a fingerprint); each row is predicted
        only by the trees whose bootstrap left it out, as for ``oob_score_``,
        so no refit or held-out set is needed.

    Returns
    -------
    PermutationImportanceResult

    Notes
    -----
    For every predictor and repeat, the column is shuffled across all rows of
    ``X`` (one permutation shared by all trees) and the ensemble risk score is
    scored again. The shuffles are ``numpy.random.default_rng(random_state)
    .permutation(n_samples)``, drawn predictor by predictor (in column order),
    repeat by repeat. Only trees that split on that predictor change their
    predictions, so only those are re-evaluated. This is permutation
    importance, not impurity importance, which favours predictors with many
    distinct values. With correlated predictors (as radiomic features are), a
    shuffled predictor's information is partly still carried by its partners,
    so each importance is a lower bound on what the predictor contributes.

    References
    ----------
    .. [1] Breiman L. Random forests. Mach Learn 2001;45:5-32.
    .. [2] Ishwaran H, Kogalur UB, Blackstone EH, Lauer MS. Random survival
       forests. Ann Appl Stat 2008;2(3):841-60.
    .. [3] Harrell FE, Califf RM, Pryor DB, Lee KL, Rosati RA. Evaluating the
       yield of medical tests. JAMA 1982;247:2543-6.
    """
    from workbench.models.forest import SurvivalForest  # the forest module re-exports this one

    if not isinstance(forest, SurvivalForest):
        raise ModelError(f"permutation_importance needs a SurvivalForest, got {type(forest).__name__}.")
    if rows not in ("held-out", "out-of-bag"):
        raise ModelError(f"rows={rows!r} is not understood; use 'held-out' or 'out-of-bag'.")
    if not isinstance(n_repeats, Integral) or n_repeats < 1:
        raise ModelError(f"n_repeats must be a positive whole number, got {n_repeats!r}.")
    score, metric_name = _resolve_metric(metric)
    Xa = forest._validate_X(X)
    y = check_outcome(y)
    time, event = split_outcome(y)
    n, p = Xa.shape
    if time.size != n:
        raise ModelError(f"the predictors have {n} rows but the outcome has {time.size}; they must match.")

    n_trees = len(forest.trees_)
    if rows == "out-of-bag":
        if not getattr(forest, "bootstrap", True):
            raise ModelError("rows='out-of-bag' needs a forest grown on bootstrap samples (bootstrap=True).")
        if n != forest.n_train_ or fingerprint(Xa, time, event) != forest.training_fingerprint_:
            raise ModelError(
                "rows='out-of-bag' needs exactly the training predictors and outcome, in the "
                "training order; for other patients use rows='held-out'."
            )
        weight = np.stack([bootstrap_counts(s, n) == 0 for s in forest.tree_seeds_]).astype(float)
    else:
        weight = np.ones((n_trees, n))
    den = weight.sum(axis=0)
    scored = den > 0
    if scored.sum() < 2:
        raise ModelError("fewer than two patients have predictions to score; use more trees or rows.")
    y_scored = y[scored]

    contrib = np.empty((n_trees, n))
    uses = np.zeros((n_trees, p), dtype=bool)
    for b, (tree, node_to_leaf, risk) in enumerate(
        zip(forest.trees_, forest.node_to_leaf_, forest.leaf_risk_, strict=True)
    ):
        contrib[b] = risk[node_to_leaf[tree.apply(Xa)]] * weight[b]
        uses[b, tree.feature[tree.feature >= 0]] = True
    total = contrib.sum(axis=0)
    baseline = score(y_scored, total[scored] / den[scored])

    rng = np.random.default_rng(random_state)
    drops = np.zeros((p, n_repeats))
    work = Xa.copy()
    for j in range(p):
        affected = np.flatnonzero(uses[:, j])
        unchanged = total - contrib[affected].sum(axis=0)
        for r in range(n_repeats):
            # draw for every predictor so that one predictor's shuffles do not depend on the others
            work[:, j] = Xa[rng.permutation(n), j]
            if affected.size == 0:
                continue
            new = unchanged.copy()
            for b in affected:
                tree = forest.trees_[b]
                new += forest.leaf_risk_[b][forest.node_to_leaf_[b][tree.apply(work)]] * weight[b]
            drops[j, r] = baseline - score(y_scored, new[scored] / den[scored])
        work[:, j] = Xa[:, j]

    names = getattr(forest, "feature_names_in_", None)
    names = [str(c) for c in names] if names is not None else [f"x{j}" for j in range(p)]
    mean = drops.mean(axis=1)
    sd = drops.std(axis=1, ddof=1) if n_repeats > 1 else np.zeros(p)
    order = np.argsort(-mean, kind="stable")
    return PermutationImportanceResult(
        features=tuple(names[j] for j in order),
        mean_drop=mean[order],
        sd_drop=sd[order],
        drops=drops[order],
        baseline=float(baseline),
        metric=metric_name,
        rows=rows,
        n_rows=int(scored.sum()),
        n_repeats=int(n_repeats),
    )


def _harrell_c(y: np.ndarray, risk: np.ndarray) -> float:
    return harrell_c(y, RiskScores(risk, model="survival forest")).c_index


def _resolve_metric(metric):
    if callable(metric):
        return (lambda y, risk: float(metric(y, risk))), getattr(metric, "__name__", "custom")
    if metric == "harrell_c":
        return _harrell_c, "harrell_c"
    raise MetricError(f"metric={metric!r} is not available; use 'harrell_c' or a function (y, risk) -> score.")
