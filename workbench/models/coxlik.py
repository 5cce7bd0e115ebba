"""Weighted Cox partial likelihood (Breslow ties) on time-sorted data, vectorised.

The pieces the penalised path solver (:mod:`workbench.models.coxpath`) needs: one
sort of the rows by time per fit (:class:`RiskSets`), then, for any linear
predictor, the log partial likelihood, its gradient with respect to the linear
predictor and the diagonal of its Hessian, all through reverse and forward
cumulative sums (O(n) after the sort). Case weights are frequency weights: a row
with weight 2 counts exactly as two copies of that row, so a bootstrap sample is a
weight vector, never a matrix of duplicated rows.

With weights ``w_i``, events ``d_i`` and ``R(t) = sum_{j: t_j >= t} w_j exp(eta_j)``
the Breslow log partial likelihood is

    l(eta) = sum_i w_i d_i (eta_i - log R(t_i)).

References
----------
.. [1] Breslow NE. Covariance analysis of censored survival data. Biometrics
       1974;30:89-99.
.. [2] Simon N, Friedman J, Hastie T, Tibshirani R. Regularization paths for Cox's
       proportional hazards model via coordinate descent. J Stat Softw 2011;39(5):1-13.
.. [3] Verweij PJM, van Houwelingen HC. Cross-validation in survival analysis.
       Stat Med 1993;12(24):2305-14.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.linalg.blas import dsyrk

from workbench.errors import ModelError


@dataclass(frozen=True)
class RiskSets:
    """Rows sorted by time once, with the tie blocks the risk-set sums need.

    Attributes
    ----------
    order : ndarray of int, shape (n,)
        Sorting permutation (ascending time, stable).
    first, last : ndarray of int, shape (n,)
        For each sorted row, the first and last sorted position sharing its time.
    dw : ndarray, shape (n,)
        ``w_i d_i`` in sorted order (event weight, 0 for censored rows).
    w : ndarray, shape (n,)
        Case weights in sorted order.
    """

    order: np.ndarray
    first: np.ndarray
    last: np.ndarray
    dw: np.ndarray
    w: np.ndarray

    @property
    def total_weight(self) -> float:
        return float(self.w.sum())


def make_risk_sets(time, event, weights=None) -> RiskSets:
    """Sort once by time and record tie blocks; validates weights."""
    t = np.asarray(time, dtype=float)
    ev = np.asarray(event, dtype=bool)
    n = t.shape[0]
    if weights is None:
        w = np.ones(n)
    else:
        w = np.asarray(weights, dtype=float)
        if w.shape != (n,):
            raise ModelError(f"weights has shape {w.shape}; expected ({n},), one per row.")
        if not np.all(np.isfinite(w)) or np.any(w < 0):
            raise ModelError("case weights must be finite and non-negative.")
    order = np.argsort(t, kind="mergesort")
    ts = t[order]
    first = np.searchsorted(ts, ts, side="left")
    last = np.searchsorted(ts, ts, side="right") - 1
    ws = w[order]
    return RiskSets(order=order, first=first, last=last, dw=ws * ev[order], w=ws)


def _log_risk(rs: RiskSets, eta_s: np.ndarray):
    """``exp(eta - shift) * w`` and ``log R - shift`` per sorted row (columns allowed)."""
    shift = eta_s.max(axis=0)
    shift = np.where(np.isfinite(shift), shift, 0.0)
    wt = rs.w if eta_s.ndim == 1 else rs.w[:, None]
    e = wt * np.exp(eta_s - shift)
    risk = np.cumsum(e[::-1], axis=0)[::-1][rs.first]
    return e, risk, shift


def loglik_sorted(rs: RiskSets, eta_s: np.ndarray) -> np.ndarray:
    """Weighted Breslow log partial likelihood of each column of sorted ``eta_s``."""
    e, risk, shift = _log_risk(rs, eta_s)
    dw = rs.dw if eta_s.ndim == 1 else rs.dw[:, None]
    use = rs.dw > 0
    with np.errstate(divide="ignore"):
        terms = dw[use] * (eta_s[use] - np.log(risk[use]) - shift)
    return terms.sum(axis=0)


def gradient_and_weights(rs: RiskSets, eta_s: np.ndarray):
    """Gradient of ``l`` and the diagonal of ``-d2 l / d eta2`` at sorted ``eta_s``.

    Returns ``(resid, hess, loglik)``: ``resid_k = w_k d_k - e_k A_k`` and
    ``hess_k = e_k A_k - e_k**2 B_k`` with ``e_k = w_k exp(eta_k)``,
    ``A_k = sum_{i: t_i <= t_k} w_i d_i / R(t_i)`` and ``B_k`` the same with ``R**2``
    (forward cumulative sums up to the end of ``k``'s tie block).
    """
    e, risk, shift = _log_risk(rs, eta_s)
    use = rs.dw > 0
    c1 = np.zeros_like(e)
    c1[use] = rs.dw[use] / risk[use]
    c2 = np.zeros_like(e)
    c2[use] = c1[use] / risk[use]
    a = np.cumsum(c1)[rs.last]
    b = np.cumsum(c2)[rs.last]
    ea = e * a
    resid = rs.dw - ea
    hess = ea - e * e * b
    loglik = float(np.sum(rs.dw[use] * (eta_s[use] - np.log(risk[use]) - shift)))
    return resid, hess, loglik


def hessian_block(rs: RiskSets, eta_s: np.ndarray, XS: np.ndarray) -> np.ndarray:
    """Exact ``-d2 l / d beta_S d beta_S'`` for the sorted columns ``XS`` (PSD).

    ``X_S' diag(e A) X_S - sum_i (w_i d_i / R_i**2) u_i u_i'`` with
    ``u_i = sum_{j: t_j >= t_i} e_j x_j``, the risk-set sums of ``e * X_S`` taken by
    one reverse cumulative sum. Cost O(n |S|^2).
    """
    e, risk, _ = _log_risk(rs, eta_s)
    use = rs.dw > 0
    a = np.cumsum(np.where(use, rs.dw / np.where(use, risk, 1.0), 0.0))[rs.last]
    EX = e[:, None] * XS
    U = np.cumsum(EX[::-1], axis=0)[::-1][rs.first[use]]
    U *= (np.sqrt(rs.dw[use]) / risk[use])[:, None]
    A = XS * np.sqrt(e * a)[:, None]
    # symmetric rank-k updates: half the flops of the two products
    H = dsyrk(1.0, A, trans=1)
    H = dsyrk(-1.0, U, beta=1.0, c=H, trans=1, overwrite_c=1)
    # only the upper triangle is written; mirror it
    return np.triu(H) + np.triu(H, 1).T


def null_deviance(rs: RiskSets) -> float:
    """Scale of the null model's deviance, per unit weight, used for the stopping rules.

    ``(1/W) sum_i w_i d_i log(C_i)`` with ``C_i`` the cumulative weight of the rows
    at or after row ``i`` in descending time order (for unit weights: the rank of the
    row counted from the latest time, as in glmnet's and scikit-survival's rule).
    """
    # position in a stable descending sort: heavier weight of later times, then the
    # tie block in its original order
    cs = np.cumsum(rs.w)
    k = np.arange(rs.w.shape[0])
    cum = rs.total_weight - cs[rs.last] + cs[k] - cs[rs.first] + rs.w[rs.first]
    use = rs.dw > 0
    dw = rs.dw
    return float(np.sum(dw[use] * np.log(cum[use])) / rs.total_weight)


def weighted_loglik(eta, time, event, weights=None) -> np.ndarray:
    """Weighted Breslow log partial likelihood of each column of ``eta`` (one sort).

    Parameters
    ----------
    eta : ndarray of shape (n_samples,) or (n_samples, n_models)
    time, event : ndarray of shape (n_samples,)
    weights : ndarray of shape (n_samples,) or None
        Frequency weights (None: all 1).
    """
    rs = make_risk_sets(time, event, weights)
    eta = np.asarray(eta, dtype=float)
    return loglik_sorted(rs, eta[rs.order])


def cv_partial_loglik(X, time, event, fold, fold_coefs, weights=None) -> np.ndarray:
    """Cross-validated partial log-likelihood of every penalty of every fold.

    Verweij and van Houwelingen's contribution of fold ``k`` at penalty ``a``:
    ``l(beta_-k(a)) - l_-k(beta_-k(a))``, the log partial likelihood of all rows
    minus that of the training rows, both at the coefficients fitted without fold
    ``k`` [3]_. All penalties of a fold are scored in one pass over the matrix of
    linear predictors; the two sorts are shared by every penalty.

    Parameters
    ----------
    X : ndarray of shape (n_samples, n_features)
    time, event : ndarray of shape (n_samples,)
    fold : ndarray of int of shape (n_samples,)
    fold_coefs : sequence of ndarray of shape (n_features, n_alphas)
    weights : ndarray of shape (n_samples,) or None

    Returns
    -------
    contrib : ndarray of shape (n_folds, n_alphas)
    """
    w = np.ones(X.shape[0]) if weights is None else np.asarray(weights, dtype=float)
    rs_all = make_risk_sets(time, event, w)
    out = np.empty((len(fold_coefs), np.asarray(fold_coefs[0]).shape[1]))
    for k, B in enumerate(fold_coefs):
        eta = X @ B
        rs_train = make_risk_sets(time, event, np.where(fold != k, w, 0.0))
        out[k] = loglik_sorted(rs_all, eta[rs_all.order]) - loglik_sorted(rs_train, eta[rs_train.order])
    return out
