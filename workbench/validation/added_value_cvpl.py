"""The added-value test's statistic: cross-validated partial log-likelihood (Verweij & van Houwelingen 1993).

:func:`cv_partial_loglik` refits a model-building process on each patient-grouped
training fold and scores all rows minus the training rows alone. For a combined Cox
model the clinical terms of each fold do not change between permutations, so they
are learned once (:class:`_FoldDesign`, :func:`_fold_designs`) and reused by
:func:`_cvpl_cached` (the whole signature refitted per fold) and
:func:`_cvpl_inner_folds` (one signature fit per cohort; kept for study, its level
failed in ``bench/bench_added_value.py``). :func:`_lean` drops the nested
cross-fitting the per-fold fits do not need. The test itself is in
:mod:`workbench.validation.added_value`.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from sklearn.base import clone

from workbench.cohort.core import Cohort
from workbench.models.base import get_params
from workbench.models.cox import SIGNATURE_TERM, CombinedCox
from workbench.models.coxlik import breslow_loglik
from workbench.preprocess.clinical import ClinicalTransformer
from workbench.stats.coxph import fit_coxph, linear_predictor


def cv_partial_loglik(model, cohort: Cohort, fold: np.ndarray) -> float:
    """Cross-validated partial log-likelihood of a model-building process (Breslow ties).

    ``sum_k [ l(beta_-k) - l_-k(beta_-k) ]`` (Verweij & van Houwelingen 1993):
    the model is fitted on the rows outside fold ``k`` and its linear predictor
    is scored on all rows minus the training rows alone, so every held-out
    patient contributes through its own risk sets.
    """
    total = 0.0
    time_, event = cohort.time, cohort.event
    for k in np.unique(fold):
        train = np.flatnonzero(fold != k)
        fitted = type(model)(**get_params(model)).fit(cohort.take(train))
        lp = np.asarray(fitted.linear_predictor(cohort), dtype=float)
        total += float(breslow_loglik(lp, time_, event) - breslow_loglik(lp[train], time_[train], event[train]))
    return total


def _lean(model):
    """The model-building process as the statistic refits it: no nested cross-fitting.

    The test is valid for any statistic; the pre-validated coefficient and the
    optional shrinkage only rescale the signature term of the final model, so
    they are left out of the per-fold fits to keep every permutation affordable.
    """
    params = get_params(model)
    for key, lean in (("coefficient", "in_sample"), ("shrinkage", "none")):
        if key in params:
            params[key] = lean
    return type(model)(**params)


@dataclass(frozen=True)
class _FoldDesign:
    """What a combined model's fit on one training fold learns from clinical data alone.

    It does not change between permutations (only imaging does), so it is learned
    once per fold: the clinical terms fitted on the fold's training rows, applied
    to all rows, and the columns the harmonisation protects.
    """

    train: np.ndarray
    X_clin: np.ndarray
    protected: np.ndarray | None
    names: tuple


def _fold_designs(model, cohort: Cohort, fold: np.ndarray) -> list[_FoldDesign] | None:
    """Per-fold clinical designs for a :class:`CombinedCox`; None for other models (refitted whole)."""
    if not isinstance(model, CombinedCox):
        return None
    out = []
    for k in np.unique(fold):
        train = np.flatnonzero(fold != k)
        tr = ClinicalTransformer(tuple(model.predictors)).fit(cohort.take(train))
        design = tr.transform(cohort)
        if design.n_dropped:
            return None
        cols = [j for t in tr.terms_ if t.column in model.protect for j in range(t.start, t.stop)]
        out.append(_FoldDesign(train, design.X, design.X[:, cols] if model.protect else None, tuple(tr.columns_)))
    return out


def _held_out_gain(model: CombinedCox, X: np.ndarray, names, tr: np.ndarray, time_, event) -> float:
    """Held-out partial log-likelihood of one fold: the Cox fit on the training rows ``tr``,
    the all-rows likelihood minus the training rows' one (Verweij & van Houwelingen)."""
    fit = fit_coxph(X[tr], time_[tr], event[tr], ties=model.ties, names=names)
    lp = linear_predictor(fit, X)
    return float(breslow_loglik(lp, time_, event) - breslow_loglik(lp[tr], time_[tr], event[tr]))


def _cvpl_cached(model: CombinedCox, cohort: Cohort, designs: list[_FoldDesign]) -> float:
    """:func:`cv_partial_loglik` of a CombinedCox (in-sample coefficient) with cached clinical designs.

    The same steps as ``CombinedCox.fit`` on each training fold (signature on the
    imaging features, then a Cox fit of clinical terms plus score), without
    relearning the clinical terms for every permutation. The imaging table has
    no missing values here (filled before the permutation split).
    """
    time_, event = cohort.time, cohort.event
    F = cohort.features
    total = 0.0
    for d in designs:
        tr = d.train
        sub_batch = None if cohort.batch is None else cohort.batch[tr]
        sig = clone(model.signature).fit(
            F.iloc[tr].reset_index(drop=True), cohort.y[tr], groups=cohort.ids[tr], batch=sub_batch,
            covariates=None if d.protected is None else d.protected[tr])
        if sig.selected_features_:
            score = sig.score(F, batch=cohort.batch, covariates=d.protected)
            X = np.column_stack([d.X_clin, score])
            names = (*d.names, SIGNATURE_TERM)
        else:
            X, names = d.X_clin, d.names
        total += _held_out_gain(model, X, names, tr, time_, event)
    return total


def _protected_all(model: CombinedCox, cohort: Cohort) -> np.ndarray | None:
    """The protected clinical columns with clinical terms learned on all rows (no outcome used)."""
    if not model.protect:
        return None
    tr = ClinicalTransformer(tuple(model.predictors)).fit(cohort)
    cols = [j for t in tr.terms_ if t.column in model.protect for j in range(t.start, t.stop)]
    return tr.transform(cohort).X[:, cols]


def _cvpl_inner_folds(model: CombinedCox, cohort: Cohort, designs: list[_FoldDesign], fold: np.ndarray,
                      protected: np.ndarray | None) -> float:
    """The statistic's cross-validated partial log-likelihood, signatures from one fit per cohort.

    The signature is fitted once on all rows with the test's folds as the folds of its
    penalty choice; fold ``k``'s signature is the path fitted without fold ``k`` at the
    chosen (shared) penalty, with the all-rows harmonisation, scaling and unsupervised
    filters. The Cox fit of clinical terms plus that score on fold ``k``'s training rows,
    and the scoring, are those of :func:`_cvpl_cached`. Every permutation is treated the
    same way as the data, which is all the permutation test's level needs; fold ``k``'s
    outcomes reach its signature only through the one shared penalty (and it costs one
    signature fit per cohort instead of one per fold). Falls back to
    :func:`_cvpl_cached` when the signature has no fold fits to reuse.
    """
    sig, fs = clone(model.signature).fit_fold_scores(
        cohort.features, cohort.y, groups=cohort.ids, batch=cohort.batch, covariates=protected, folds=fold)
    if fs is None:
        return _cvpl_cached(model, cohort, designs)
    time_, event = cohort.time, cohort.event
    total = 0.0
    for k, d in enumerate(designs):
        tr = d.train
        score = fs.scores[:, k]
        if np.any(score != 0.0):  # fold k's signature kept a feature
            X, names = np.column_stack([d.X_clin, score]), (*d.names, SIGNATURE_TERM)
        else:
            X, names = d.X_clin, d.names
        total += _held_out_gain(model, X, names, tr, time_, event)
    return total
