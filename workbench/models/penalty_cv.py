"""Choosing the penalty of a Cox path by patient-grouped cross-validation.

Folds formed from patients (never rows, so a bootstrap sample's copies of one patient stay
on one side of every split), the cross-validated deviance of every penalty, and the
minimum or one-standard-error rule. Used by :mod:`workbench.models.penalized`.

References
----------
.. [1] Verweij PJM, van Houwelingen HC. Cross-validation in survival analysis.
       Stat Med 1993;12(24):2305-14.
.. [2] Dai B, Breheny P. Cross validation approaches for penalized Cox regression.
       arXiv:1905.10432, 2019.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from workbench.errors import ModelError
from workbench.models.coxlik import cv_partial_loglik

__all__ = ["FoldFits", "choose_alpha", "cv_deviance", "patient_folds"]

_RULES = ("min", "1se")
_SCORES = ("basic", "linear_predictor")


# ---------------------------------------------------------------------- folds


def patient_folds(groups, event, n_folds: int = 5, random_state=None, weights=None) -> np.ndarray:
    """Assign rows to cross-validation folds so that no patient is split.

    Every row of one patient (the copies a bootstrap sample draws) goes to the same
    fold; folds are balanced for the number of events.

    Parameters
    ----------
    groups : array-like of shape (n_samples,)
        Original patient identifiers.
    event : array-like of shape (n_samples,)
    n_folds : int
    random_state : int, Generator or None
    weights : array-like of shape (n_samples,) or None
        Frequency weights: a row of weight ``k`` counts as ``k`` rows (the same folds as
        for the duplicated rows, patients appearing in the same order).

    Returns
    -------
    fold : ndarray of int of shape (n_samples,), values in ``0 .. n_folds - 1``
    """
    groups = np.asarray(groups)
    event = np.asarray(event, dtype=bool)
    n_groups = np.unique(groups).size
    if n_groups < n_folds:
        raise ModelError(
            f"cross-validation needs at least {n_folds} distinct patients for {n_folds} folds, "
            f"but only {n_groups} were given. Lower n_folds or check the patient ids."
        )
    rng = np.random.default_rng(random_state)
    codes, _ = pd.factorize(groups)
    w = np.ones(codes.size) if weights is None else np.asarray(weights, dtype=float)
    n_ev = np.bincount(codes, weights=event * w, minlength=n_groups)
    n_rows = np.bincount(codes, weights=w, minlength=n_groups)
    # Greedy balancing (a few hundred patients: a plain loop is far cheaper than a generic
    # splitter): patients in random order, those with most events first, each to the fold
    # with the fewest events so far (ties: fewest rows); patients without an event go to
    # the fold with the fewest rows.
    order = rng.permutation(n_groups)
    order = order[np.argsort(-n_ev[order], kind="stable")]
    fold_events = np.zeros(n_folds)
    fold_rows = np.zeros(n_folds)
    group_fold = np.empty(n_groups, dtype=int)
    for g in order:
        keys = (rng.random(n_folds), fold_rows, fold_events) if n_ev[g] > 0 else (rng.random(n_folds), fold_rows)
        k = int(np.lexsort(keys)[0])
        group_fold[g] = k
        fold_events[k] += n_ev[g]
        fold_rows[k] += n_rows[g]
    fold = group_fold[codes]
    return fold


# --------------------------------------------------------------------- result


@dataclass(frozen=True)
class FoldFits:
    """The inner cross-validation's fold fits at the chosen penalty (not kept on fitted models).

    Attributes
    ----------
    fold : ndarray of int of shape (n_samples,)
        Fold of every input row (all copies of a patient share one).
    coefs : ndarray of shape (n_folds, n_features)
        Coefficients of the path fitted without fold ``k``, at the chosen penalty ``alpha``
        of the all-rows path (the same penalty for every fold).
    """

    fold: np.ndarray
    coefs: np.ndarray


# ---------------------------------------------------------------- CV scoring


def cv_deviance(X, time, event, fold, fold_coefs, score: str = "basic", weights=None):
    """Cross-validated deviance of every penalty, one compiled pass per fold.

    Parameters
    ----------
    X : ndarray of shape (n_samples, n_features)
    time, event : ndarray of shape (n_samples,)
    fold : ndarray of int of shape (n_samples,)
    fold_coefs : sequence of ndarray of shape (n_features, n_alphas)
        Coefficient path fitted without fold ``k``, for each ``k``.
    score : {"basic", "linear_predictor"}
        ``"basic"``: Verweij & van Houwelingen's cross-validated partial likelihood,
        ``l(beta_-k) - l_-k(beta_-k)`` on all rows minus the training rows [2]_.
        ``"linear_predictor"``: the partial likelihood of all rows evaluated at the
        out-of-fold linear predictors, split into the event terms of each fold [3]_.
        Both computed by :func:`workbench.models.coxlik.cv_partial_loglik` (Breslow ties).
    weights : ndarray of shape (n_samples,) or None
        Frequency weights (a bootstrap sample's counts); events are counted with them.

    Returns
    -------
    per_fold : ndarray of shape (n_folds, n_alphas)
        ``-2 * contribution / events`` of each fold.
    events : ndarray of shape (n_folds,)
    mean, se : ndarray of shape (n_alphas,)
        Event-weighted mean over folds and ``sqrt(weighted variance / (K - 1))``.
    """
    if score not in _SCORES:
        raise ModelError(f"cv score {score!r} is unknown; choose one of {_SCORES}.")
    n_folds = len(fold_coefs)
    w = np.ones(np.shape(time)[0]) if weights is None else np.asarray(weights, dtype=float)
    ev_w = np.asarray(event, dtype=bool) * w
    events = np.array([ev_w[fold == k].sum() for k in range(n_folds)], dtype=float)
    contrib = cv_partial_loglik(X, time, event, fold, fold_coefs, weights, score=score)
    with np.errstate(invalid="ignore", divide="ignore"):
        per_fold = -2.0 * contrib / events[:, None]
    per_fold = np.where(np.isfinite(per_fold), per_fold, np.inf)  # a diverged fit never wins
    wk = events / events.sum()
    use = events > 0
    mean = (wk[use, None] * per_fold[use]).sum(axis=0)
    with np.errstate(invalid="ignore"):
        var = (wk[use, None] * (per_fold[use] - mean) ** 2).sum(axis=0) / max(use.sum() - 1, 1)
    se = np.sqrt(np.where(np.isfinite(var), var, np.inf))
    return per_fold, events, mean, se


def choose_alpha(cv_mean: np.ndarray, cv_se: np.ndarray, rule: str = "min") -> tuple[int, int]:
    """Return ``(chosen index, index of the minimum)`` on a decreasing penalty path.

    ``"1se"`` takes the largest penalty whose deviance lies within one standard
    error of the minimum (Breiman et al. 1984, the usual one-standard-error rule).
    """
    if rule not in _RULES:
        raise ModelError(f"penalty rule {rule!r} is unknown; choose one of {_RULES}.")
    i_min = int(np.argmin(cv_mean))
    if rule == "min":
        return i_min, i_min
    limit = cv_mean[i_min] + (cv_se[i_min] if np.isfinite(cv_se[i_min]) else 0.0)
    return int(np.flatnonzero(cv_mean <= limit)[0]), i_min
