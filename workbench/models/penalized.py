"""Penalised (LASSO / elastic-net) Cox paths with patient-grouped cross-validation.

The path itself is fitted by the workbench's own solver
(:func:`workbench.models.coxpath.fit_cox_path`: coordinate descent, Simon et al. 2011, with
compiled inner loops; it gives scikit-survival's ``CoxnetSurvivalAnalysis`` path to 1e-6,
see tests/reference/test_coxpath_reference.py). What this module adds:

* folds are formed from *patients*, not rows, so that the copies of one patient
  that a bootstrap sample contains never sit on both sides of a split (with
  row-wise folds the penalty choice collapses to the least-penalised end);
* the cross-validated partial log-likelihood of every penalty of a fold is
  computed in one compiled pass over the matrix of linear predictors
  (:func:`workbench.models.coxlik.cv_partial_loglik`);
* a bootstrap sample (rows of one patient that are exact copies) is fitted as one row
  per patient with its count as a frequency weight: the same likelihood, folds and
  penalties, on fewer rows;
* the path is first fitted only down to ``path_stop_ratio * alpha_max`` (most of
  the solver's time is spent below that) and is extended only when the
  cross-validated optimum lands on its last penalty;
* survival curves use a Breslow baseline computed in log space, so the overflow in
  ``exp`` at weakly penalised ends gives probabilities of 0 rather than NaN.

References
----------
.. [1] Simon N, Friedman J, Hastie T, Tibshirani R. Regularization paths for Cox's
       proportional hazards model via coordinate descent. J Stat Softw 2011;39(5):1-13.
.. [2] Verweij PJM, van Houwelingen HC. Cross-validation in survival analysis.
       Stat Med 1993;12(24):2305-14.
.. [3] Dai B, Breheny P. Cross validation approaches for penalized Cox regression.
       arXiv:1905.10432, 2019.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass

import numpy as np
import pandas as pd
from sklearn.base import BaseEstimator

from workbench.cohort.outcome import check_outcome, split_outcome
from workbench.errors import (
    DataQualityWarning,
    ModelError,
    NotFittedError,
)
from workbench.models.coxlik import breslow_log_cumhaz
from workbench.models.coxpath import fit_cox_path
from workbench.models.penalty_cv import (
    _RULES,
    _SCORES,
    FoldFits,
    choose_alpha,
    cv_deviance,
    patient_folds,
)
from workbench.predictions import RiskScores, SurvivalCurves

_EXTENSION_FACTOR = 0.25  # each extension lowers the end of the path four-fold


@dataclass(frozen=True)
class PenalizedPathResult:
    """A cross-validated penalised Cox path.

    Attributes
    ----------
    feature_names : tuple of str
    alphas : ndarray of shape (n_alphas,)
        Penalties, decreasing, as used by the solver (after its rescaling of
        ``penalty_factor`` to sum to the number of features).
    coefs : ndarray of shape (n_features, n_alphas)
        Coefficients of the model fitted on all training rows at each penalty.
    n_nonzero : ndarray of shape (n_alphas,)
    cv_mean, cv_se : ndarray of shape (n_alphas,)
        Cross-validated deviance per event (lower is better) and its standard error.
    cv_folds : ndarray of shape (n_folds, n_alphas)
        Deviance per event of each fold.
    fold_events : ndarray of shape (n_folds,)
        Events in each held-out fold (the weights of the mean).
    alpha_max : float
    index : int
        Position of the chosen penalty on the path.
    alpha : float
    rule : {"min", "1se"}
    score : {"basic", "linear_predictor"}
    index_min : int
        Position of the smallest cross-validated deviance.
    n_extensions : int
        How often the path had to be extended because the optimum sat on its end.
    on_boundary : bool
        True when the optimum still sits on the end of the longest allowed path.
    grouped : bool
        Whether folds were formed from patient ids (False: every row its own patient).
    """

    feature_names: tuple
    alphas: np.ndarray
    coefs: np.ndarray
    n_nonzero: np.ndarray
    cv_mean: np.ndarray
    cv_se: np.ndarray
    cv_folds: np.ndarray
    fold_events: np.ndarray
    alpha_max: float
    index: int
    alpha: float
    rule: str
    score: str
    index_min: int
    n_extensions: int
    on_boundary: bool
    grouped: bool

    @property
    def coef(self) -> np.ndarray:
        """Coefficients at the chosen penalty."""
        return self.coefs[:, self.index]

    @property
    def selected(self) -> tuple:
        """Names of features with a non-zero coefficient at the chosen penalty."""
        return tuple(n for n, b in zip(self.feature_names, self.coef, strict=True) if b != 0.0)



# -------------------------------------------------------------------- fitting


def _path(X, time, event, weights, alphas, l1_ratio, penalty_factor, tol, max_iter):
    """Coefficients at every one of ``alphas`` (columns), by the workbench's solver.

    A training fold's own alpha_max may lie below the common grid's first penalties:
    those give all-zero models, and the whole grid is still fitted so every fold scores
    the same penalties.
    """
    return fit_cox_path(X, time, event, alphas=alphas, l1_ratio=l1_ratio, penalty_factor=penalty_factor,
                        weights=weights, tol=tol, max_iter=max_iter, stop_flat=False).coefs


def _collapse_copies(X, time, event, groups):
    """One row per patient with its count as a weight, when all of a patient's rows are exact
    copies (a bootstrap sample); ``None`` otherwise. Patients keep their order of first
    appearance, so :func:`patient_folds` forms the same folds."""
    codes, _ = pd.factorize(groups)
    first = np.unique(codes, return_index=True)[1]
    if first.size == codes.size:
        return None
    f = first[codes]
    same = (time == time[f]) & (event == event[f]) & np.all(X == X[f], axis=1)
    if not same.all():
        return None
    return X[first], time[first], event[first], np.asarray(groups)[first], np.bincount(codes).astype(float)


def fit_penalized_path(
    X: np.ndarray,
    y: np.ndarray,
    *,
    groups=None,
    feature_names=None,
    l1_ratio: float = 0.9,
    penalty_factor=None,
    n_alphas: int = 100,
    alpha_min_ratio: float = 0.01,
    path_stop_ratio: float = 0.05,
    n_folds: int = 5,
    rule: str = "min",
    score: str = "basic",
    tol: float = 1e-7,
    max_iter: int = 100000,
    random_state=None,
    collapse_copies: bool = True,
    folds=None,
) -> PenalizedPathResult:
    """Fit a penalised Cox path and choose its penalty by patient-grouped cross-validation.

    Parameters
    ----------
    X : ndarray of shape (n_samples, n_features)
        Already standardised predictors (the solver is called with ``normalize=False``).
    y : outcome array (see :func:`workbench.cohort.make_outcome`)
    groups : array-like of shape (n_samples,) or None
        Original patient ids; rows sharing an id never straddle a fold boundary.
        ``None`` treats every row as its own patient (only correct without resampling).
    l1_ratio : float in (0, 1]
        1 = LASSO; smaller values mix in a ridge penalty.
    penalty_factor : array-like of shape (n_features,) or None
        0 leaves a term unpenalised (for example clinical factors).
    n_alphas, alpha_min_ratio : int, float
        The longest path allowed: ``n_alphas`` penalties log-spaced from ``alpha_max``
        to ``alpha_min_ratio * alpha_max``.
    path_stop_ratio : float
        The path is first fitted down to ``path_stop_ratio * alpha_max`` only (or to
        ``alpha_min_ratio * alpha_max`` if that is higher), and extended (four-fold
        lower each time, at most to ``alpha_min_ratio``) while the cross-validated
        minimum falls on its last penalty.
    n_folds : int
    rule : {"min", "1se"}
    score : {"basic", "linear_predictor"}
        See :func:`cv_deviance`.
    random_state : int, Generator or None
        Fold assignment.
    collapse_copies : bool
        With ``groups``, fit a patient whose rows are all exact copies (a bootstrap
        sample) as one row with its count as a frequency weight: the same likelihood,
        folds and penalties on fewer rows (results equal to solver tolerance).
    folds : array-like of int of shape (n_samples,) or None
        Fold of every row, given instead of forming ``n_folds`` patient-grouped folds
        (every row of a patient must share one; ``n_folds`` is then their number).

    Returns
    -------
    PenalizedPathResult
        :func:`fit_penalized_path_folds` also returns the fold fits at the chosen penalty.

    References
    ----------
    .. [1] Simon N, Friedman J, Hastie T, Tibshirani R. J Stat Softw 2011;39(5):1-13.
    .. [2] Verweij PJM, van Houwelingen HC. Stat Med 1993;12(24):2305-14.
    .. [3] Dai B, Breheny P. arXiv:1905.10432, 2019.
    """
    return fit_penalized_path_folds(
        X, y, groups=groups, feature_names=feature_names, l1_ratio=l1_ratio, penalty_factor=penalty_factor,
        n_alphas=n_alphas, alpha_min_ratio=alpha_min_ratio, path_stop_ratio=path_stop_ratio, n_folds=n_folds,
        rule=rule, score=score, tol=tol, max_iter=max_iter, random_state=random_state,
        collapse_copies=collapse_copies, folds=folds)[0]


def fit_penalized_path_folds(X, y, *, groups=None, feature_names=None, l1_ratio=0.9, penalty_factor=None,
                             n_alphas=100, alpha_min_ratio=0.01, path_stop_ratio=0.05, n_folds=5, rule="min",
                             score="basic", tol=1e-7, max_iter=100000, random_state=None,
                             collapse_copies=True, folds=None) -> tuple[PenalizedPathResult, FoldFits]:
    """:func:`fit_penalized_path` (same arguments), plus its inner folds' fits at the chosen penalty.

    The fold fits are those the penalty choice already made (no extra path): fold ``k``'s
    coefficients at the chosen penalty come from the path fitted without fold ``k`` on the
    all-rows grid, so ``X[fold == k] @ coefs[k]`` is an out-of-fold linear predictor whose
    only contact with fold ``k``'s outcomes is the choice of the one penalty.
    """
    y = check_outcome(y)
    X = np.ascontiguousarray(X, dtype=float)
    n, p = X.shape
    time, event = split_outcome(y)
    if rule not in _RULES:
        raise ModelError(f"penalty rule {rule!r} is unknown; choose one of {_RULES}.")
    if score not in _SCORES:
        raise ModelError(f"cv score {score!r} is unknown; choose one of {_SCORES}.")
    if int(n_alphas) < 2:
        raise ModelError(f"n_alphas must be at least 2 to form a path, got {n_alphas}.")
    if p == 0:
        raise ModelError("the penalised Cox model received no features; at least one is needed.")
    if not (0.0 < path_stop_ratio <= 1.0 and 0.0 < alpha_min_ratio < 1.0):
        raise ModelError(
            "expected 0 < alpha_min_ratio < 1 and 0 < path_stop_ratio <= 1, got "
            f"alpha_min_ratio={alpha_min_ratio}, path_stop_ratio={path_stop_ratio}.")
    path_stop_ratio = max(path_stop_ratio, alpha_min_ratio)  # a short allowed path ends earlier
    if event.sum() < 2:
        raise ModelError(f"the training rows contain {int(event.sum())} events; at least 2 are needed.")
    names = tuple(feature_names) if feature_names is not None else tuple(f"x{j}" for j in range(p))
    grouped = groups is not None
    if not grouped:
        groups = np.arange(n)
        if n > 1 and pd.DataFrame(X).duplicated().any():
            warnings.warn(
                "some rows are exact copies of each other (a bootstrap sample?) but no patient "
                "ids were given: cross-validation will put copies of one patient on both sides "
                "of a split and choose too small a penalty. Pass groups=<patient ids>.",
                DataQualityWarning, stacklevel=2)
    groups = np.asarray(groups)
    if groups.shape[0] != n:
        raise ModelError(f"groups has {groups.shape[0]} entries but X has {n} rows; they must match.")
    codes = pd.factorize(groups)[0]
    given = None
    if folds is not None:
        given = np.asarray(folds, dtype=int)
        if given.shape != (n,) or given.min() < 0:
            raise ModelError(f"folds must give a non-negative fold to each of the {n} rows.")
        first_row = np.unique(codes, return_index=True)[1]
        if np.any(given != given[first_row][codes]):
            raise ModelError("folds split the rows of one patient; every row of a patient needs one fold.")
        given = np.unique(given, return_inverse=True)[1].reshape(n)
        n_folds = int(given.max()) + 1
        if n_folds < 2:
            raise ModelError("folds must name at least 2 folds.")
    weights = None
    collapsed = _collapse_copies(X, time, event, groups) if grouped and collapse_copies else None
    kept = np.arange(n)
    if collapsed is not None:
        X, time, event, groups, weights = collapsed
        kept = np.unique(codes, return_index=True)[1]
    fold = patient_folds(groups, event, n_folds, random_state, weights=weights) if given is None else given[kept]
    row_fold = fold if collapsed is None else fold[codes]

    # One log-spaced grid from alpha_max to alpha_min_ratio * alpha_max; the solver's
    # own path creation gives alpha_max and the first segment with the same spacing.
    log_step = np.log(alpha_min_ratio) / (n_alphas - 1)
    n_seg = int(np.floor(np.log(path_stop_ratio) / log_step + 1e-9)) + 1
    n_seg = max(min(n_seg, n_alphas), 2)
    first = fit_cox_path(X, time, event, n_alphas=n_seg, alpha_min_ratio=float(np.exp(log_step * (n_seg - 1))),
                         l1_ratio=l1_ratio, penalty_factor=penalty_factor, weights=weights, tol=tol,
                         max_iter=max_iter, stop_flat=False)
    alpha_max = float(first.alphas[0])
    grid = alpha_max * np.exp(log_step * np.arange(n_alphas))
    n_cur, n_ext = n_seg, 0
    coefs = first.coefs
    while True:
        alphas = grid[:n_cur]
        fold_coefs = []
        for k in range(n_folds):
            tr = fold != k
            fold_coefs.append(_path(X[tr], time[tr], event[tr], None if weights is None else weights[tr],
                                    alphas, l1_ratio, penalty_factor, tol, max_iter))
        per_fold, ev_k, mean, se = cv_deviance(X, time, event, fold, fold_coefs, score, weights)
        i_min = int(np.argmin(mean))
        if i_min < n_cur - 1 or n_cur >= n_alphas:
            break
        n_more = int(np.ceil(np.log(_EXTENSION_FACTOR) / log_step))
        n_cur = min(n_alphas, n_cur + n_more)
        n_ext += 1
        coefs = _path(X, time, event, weights, grid[:n_cur], l1_ratio, penalty_factor, tol, max_iter)
    index, i_min = choose_alpha(mean, se, rule)
    fits = FoldFits(fold=row_fold, coefs=np.array([fc[:, index] for fc in fold_coefs]))
    return PenalizedPathResult(
        feature_names=names, alphas=alphas.copy(), coefs=np.asarray(coefs, dtype=float),
        n_nonzero=np.count_nonzero(coefs, axis=0), cv_mean=mean, cv_se=se, cv_folds=per_fold,
        fold_events=ev_k, alpha_max=alpha_max, index=index, alpha=float(alphas[index]),
        rule=rule, score=score, index_min=i_min, n_extensions=n_ext,
        on_boundary=bool(i_min == n_cur - 1 and n_cur > 1), grouped=grouped), fits


class PenalizedCox(BaseEstimator):
    """Penalised Cox model whose penalty is chosen by patient-grouped cross-validation.

    Parameters
    ----------
    l1_ratio, penalty_factor, n_alphas, alpha_min_ratio, path_stop_ratio, n_folds,
    rule, score, tol, max_iter, random_state
        See :func:`fit_penalized_path`.
    fit_baseline : bool
        Also estimate a Breslow baseline at the chosen penalty, which
        :meth:`predict_survival` needs.

    Attributes
    ----------
    result_ : PenalizedPathResult
    coef_ : ndarray of shape (n_features,)
        Coefficients at the chosen penalty, on the scale of the ``X`` given to ``fit``.
    alpha_ : float
    feature_names_in_ : ndarray of str
    n_features_in_ : int
    baseline_times_, baseline_log_cumhaz_ : ndarray (only with ``fit_baseline=True``)

    References
    ----------
    .. [1] Simon N, Friedman J, Hastie T, Tibshirani R. J Stat Softw 2011;39(5):1-13.
    .. [2] Verweij PJM, van Houwelingen HC. Stat Med 1993;12(24):2305-14.
    """

    def __init__(self, *, l1_ratio=0.9, penalty_factor=None, n_alphas=100, alpha_min_ratio=0.01,
                 path_stop_ratio=0.05, n_folds=5, rule="min", score="basic", fit_baseline=False,
                 tol=1e-7, max_iter=100000, random_state=None):
        self.l1_ratio = l1_ratio
        self.penalty_factor = penalty_factor
        self.n_alphas = n_alphas
        self.alpha_min_ratio = alpha_min_ratio
        self.path_stop_ratio = path_stop_ratio
        self.n_folds = n_folds
        self.rule = rule
        self.score = score
        self.fit_baseline = fit_baseline
        self.tol = tol
        self.max_iter = max_iter
        self.random_state = random_state

    def fit(self, X, y, groups=None) -> PenalizedCox:
        """Fit the path on all rows, choose the penalty by grouped CV; returns self."""
        names = list(X.columns.astype(str)) if isinstance(X, pd.DataFrame) else None
        Xa = np.asarray(X, dtype=float)
        self.result_ = fit_penalized_path(
            Xa, y, groups=groups, feature_names=names, l1_ratio=self.l1_ratio,
            penalty_factor=self.penalty_factor, n_alphas=self.n_alphas,
            alpha_min_ratio=self.alpha_min_ratio, path_stop_ratio=self.path_stop_ratio,
            n_folds=self.n_folds, rule=self.rule, score=self.score, tol=self.tol,
            max_iter=self.max_iter, random_state=self.random_state)
        self.coef_ = self.result_.coef.copy()
        self.alpha_ = self.result_.alpha
        self.feature_names_in_ = np.asarray(self.result_.feature_names, dtype=object)
        self.n_features_in_ = Xa.shape[1]
        if self.fit_baseline:
            time, event = split_outcome(y)
            self.baseline_times_, self.baseline_log_cumhaz_ = breslow_log_cumhaz(
                Xa @ self.coef_, time, event)
        return self

    def _check(self, X) -> np.ndarray:
        if not hasattr(self, "coef_"):
            raise NotFittedError("this penalised Cox model is not fitted yet; call fit first.")
        Xa = np.asarray(X, dtype=float)
        if Xa.ndim != 2 or Xa.shape[1] != self.n_features_in_:
            raise ModelError(
                f"X has shape {Xa.shape}; the model was fitted on {self.n_features_in_} features.")
        return Xa

    def predict(self, X) -> np.ndarray:
        """Linear predictor ``X @ coef_`` (higher = worse prognosis)."""
        return self._check(X) @ self.coef_

    def predict_risk(self, X, model: str = "penalised Cox") -> RiskScores:
        return RiskScores(self.predict(X), model)

    def predict_survival(self, X, times=None, model: str = "penalised Cox") -> SurvivalCurves:
        """Survival curves from the Breslow baseline at the chosen penalty.

        Computed as ``exp(-exp(eta + log H0(t)))`` so an extreme linear predictor
        yields 0 or 1, never NaN.
        """
        if not hasattr(self, "baseline_log_cumhaz_"):
            raise NotFittedError("survival curves need fit_baseline=True when the model is fitted.")
        eta = self.predict(X)
        grid = self.baseline_times_ if times is None else np.asarray(times, dtype=float)
        idx = np.searchsorted(self.baseline_times_, grid, side="right") - 1
        log_h = np.where(idx >= 0, self.baseline_log_cumhaz_[np.maximum(idx, 0)], -np.inf)
        with np.errstate(over="ignore"):
            probs = np.exp(-np.exp(eta[:, None] + log_h[None, :]))
        return SurvivalCurves(grid, probs, model)
