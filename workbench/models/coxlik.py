"""Weighted Cox partial likelihood (Breslow or Efron ties) on time-sorted data.

The pieces the penalised path solver (:mod:`workbench.models.coxpath`) needs: one
sort of the rows by time per fit (:class:`RiskSets`), then, for any linear
predictor, the log partial likelihood, its gradient with respect to the linear
predictor and the exact Hessian on a set of columns, through compiled O(n) loops
(:mod:`workbench.models.coxkernels`) and BLAS products. Case weights are frequency
weights: a row with weight 2 counts exactly as two copies of that row, so a bootstrap
sample is a weight vector, never a matrix of duplicated rows.

With weights ``w_i``, events ``d_i`` and ``R(t) = sum_{j: t_j >= t} w_j exp(eta_j)``
the Breslow log partial likelihood is

    l(eta) = sum_i w_i d_i (eta_i - log R(t_i)).

Efron's form replaces, in a block of tied events with total event weight ``D`` and
weighted risk ``Rd``, the ``D`` Breslow terms ``log R`` by
``sum_{k=0}^{D-1} log(R - k/D Rd)``. When ``D`` is a whole number (unit or bootstrap
weights) this is exactly Efron's likelihood of the duplicated rows. For fractional
weights ``D`` is not a count; the block then gets one term per event row, each of
weight ``D / (event rows)`` and with fractions ``k / (event rows)`` (a convention; it
equals the above for unit weights).

References
----------
.. [1] Breslow NE. Covariance analysis of censored survival data. Biometrics
       1974;30:89-99.
.. [2] Efron B. The efficiency of Cox's likelihood function for censored data. J Am Stat
       Assoc 1977;72:557-65.
.. [3] Simon N, Friedman J, Hastie T, Tibshirani R. Regularization paths for Cox's
       proportional hazards model via coordinate descent. J Stat Softw 2011;39(5):1-13.
.. [4] Verweij PJM, van Houwelingen HC. Cross-validation in survival analysis.
       Stat Med 1993;12(24):2305-14.
.. [5] Dai B, Breheny P. Cross validation approaches for penalized Cox regression.
       arXiv:1905.10432, 2019.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.linalg.blas import dgemm, dsyrk

from workbench.errors import ModelError
from workbench.models.coxkernels import (
    cox_loglik_columns,
    cox_pieces,
    cox_row_terms,
    hessian_apply,
)

TIES = ("breslow", "efron")
CV_SCORES = ("basic", "linear_predictor")


@dataclass(frozen=True)
class RiskSets:
    """Rows sorted by time once, with the event-time blocks the risk-set sums need.

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
    bfirst, blast : ndarray of int, shape (n_blocks,)
        Sorted positions spanned by each distinct event time.
    mterms, tw : ndarray, shape (n_blocks,)
        Number of risk-set terms of each block and the weight of each term.
    row_blk : ndarray of int, shape (n,)
        Last block whose time is at or before the row's (-1: none).
    ev_blk : ndarray of int, shape (n,)
        The block of an event row, -1 for other rows.
    ties : {"breslow", "efron"}
    """

    order: np.ndarray
    first: np.ndarray
    last: np.ndarray
    dw: np.ndarray
    w: np.ndarray
    bfirst: np.ndarray
    blast: np.ndarray
    mterms: np.ndarray
    tw: np.ndarray
    row_blk: np.ndarray
    ev_blk: np.ndarray
    ties: str

    @property
    def total_weight(self) -> float:
        return float(self.w.sum())

    @property
    def efron(self) -> bool:
        return self.ties == "efron"

    def kernel_args(self):
        return (self.w, self.dw, self.bfirst, self.blast, self.mterms, self.tw)


def make_risk_sets(time, event, weights=None, ties: str = "breslow") -> RiskSets:
    """Sort once by time and record tie blocks; validates weights and ties."""
    if ties not in TIES:
        raise ModelError(f"ties {ties!r} is unknown; choose one of {TIES}.")
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
    dw = ws * ev[order]
    is_ev = dw > 0
    btime = np.unique(ts[is_ev])
    bfirst = np.searchsorted(ts, btime, side="left")
    blast = np.searchsorted(ts, btime, side="right") - 1
    ev_blk = np.where(is_ev, np.searchsorted(btime, ts), -1)
    D = np.bincount(ev_blk[is_ev], weights=dw[is_ev], minlength=btime.size)
    if ties == "efron":
        rows = np.bincount(ev_blk[is_ev], minlength=btime.size)
        whole = np.abs(D - np.round(D)) < 1e-9
        mterms = np.where(whole, np.round(D), rows).astype(np.int64)
        tw = np.where(whole, 1.0, D / np.maximum(rows, 1))
    else:
        mterms = np.ones(btime.size, dtype=np.int64)
        tw = D
    row_blk = np.searchsorted(btime, ts, side="right") - 1
    return RiskSets(order=order, first=first, last=last, dw=dw, w=ws, bfirst=bfirst.astype(np.int64),
                    blast=blast.astype(np.int64), mterms=mterms, tw=tw.astype(float),
                    row_blk=row_blk.astype(np.int64), ev_blk=ev_blk.astype(np.int64), ties=ties)


@dataclass(frozen=True)
class Pieces:
    """Likelihood, gradient and Hessian factors at one sorted linear predictor."""

    loglik: float
    resid: np.ndarray  # dl/deta
    c: np.ndarray  # row weights of the Hessian's diagonal part
    e: np.ndarray  # w exp(eta - shift)
    l11: np.ndarray
    l21: np.ndarray
    l22: np.ndarray
    q0: np.ndarray  # per block: sums of tw / R_k**2, times f_k and f_k**2
    q1: np.ndarray
    q2: np.ndarray


def likelihood_pieces(rs: RiskSets, eta_s: np.ndarray) -> Pieces:
    """:class:`Pieces` at the sorted linear predictor ``eta_s`` (one compiled O(n) pass)."""
    out = cox_pieces(np.ascontiguousarray(eta_s, dtype=float), *rs.kernel_args(), rs.row_blk,
                     rs.ev_blk, rs.efron)
    return Pieces(*out)


def gradient_and_weights(rs: RiskSets, eta_s: np.ndarray):
    """``(resid, c, loglik)``: the gradient of ``l`` in sorted ``eta_s``, the row weights of
    the Hessian's diagonal part, and the log partial likelihood."""
    p = likelihood_pieces(rs, eta_s)
    return p.resid, p.c, p.loglik


def hessian_factors(rs: RiskSets, pc: Pieces, XS: np.ndarray):
    """``(A, V)`` with ``-d2 l / d beta_S d beta_S' = A'A - V'V`` for sorted columns ``XS``.

    ``A = diag(sqrt(c)) X_S``; the rows of ``V`` are ``l11 U_b + l21 Ud_b`` and (Efron
    only) ``l22 Ud_b``, with ``U_b`` the risk-set sums of ``e * X_S`` (one reverse
    cumulative sum) and ``Ud_b`` the sums over block ``b``'s events. Cost O(n |S|).
    """
    A = XS * np.sqrt(pc.c)[:, None]
    EX = pc.e[:, None] * XS
    U = np.cumsum(EX[::-1], axis=0)[::-1][rs.bfirst]
    if not rs.efron:
        return A, U * pc.l11[:, None]
    Cd = np.cumsum(EX * (rs.dw > 0)[:, None], axis=0)
    Ud = Cd[rs.blast] - np.where((rs.bfirst > 0)[:, None], Cd[np.maximum(rs.bfirst - 1, 0)], 0.0)
    V1 = U * pc.l11[:, None] + Ud * pc.l21[:, None]
    keep = pc.l22 > 0
    return A, np.vstack([V1, Ud[keep] * pc.l22[keep, None]])


def hessian_from_factors(A, V) -> np.ndarray:
    """``A'A - V'V`` by symmetric rank-k updates (half the flops of two products)."""
    H = dsyrk(1.0, A, trans=1)
    H = dsyrk(-1.0, V, beta=1.0, c=H, trans=1, overwrite_c=1)
    return np.triu(H) + np.triu(H, 1).T  # only the upper triangle is written


def hessian_columns(rs: RiskSets, pc: Pieces, XS: np.ndarray, cols: np.ndarray) -> np.ndarray:
    """Columns ``cols`` of the Hessian ``-d2 l / d beta_S d beta_S'`` (shape (|S|, |cols|)).

    ``X_S' M`` with ``M = (-d2l/deta2) X_cols`` from one compiled O(n) pass per column,
    then one product: O(n |S| |cols|), without touching the other columns' risk sets.
    """
    M = hessian_apply(np.asfortranarray(XS[:, cols]), pc.c, pc.e, pc.q0, pc.q1, pc.q2, rs.bfirst,
                      rs.row_blk, rs.ev_blk)
    return dgemm(1.0, XS, M, trans_a=1)


def hessian_block(rs: RiskSets, eta_s: np.ndarray, XS: np.ndarray) -> np.ndarray:
    """Exact ``-d2 l / d beta_S d beta_S'`` for the sorted columns ``XS`` (PSD); O(n |S|^2)."""
    pc = likelihood_pieces(rs, eta_s)
    return hessian_from_factors(*hessian_factors(rs, pc, np.asarray(XS, dtype=float)))


def loglik_sorted(rs: RiskSets, eta_s: np.ndarray) -> np.ndarray:
    """Weighted log partial likelihood of each column of sorted ``eta_s``."""
    eta_s = np.asarray(eta_s, dtype=float)
    E = eta_s[:, None] if eta_s.ndim == 1 else eta_s
    out = cox_loglik_columns(np.asfortranarray(E), *rs.kernel_args(), rs.efron)
    return out[0] if eta_s.ndim == 1 else out


def null_deviance(rs: RiskSets) -> float:
    """Scale of the null model's deviance, per unit weight, used for the stopping rules.

    ``(1/W) sum_i w_i d_i log(C_i)`` with ``C_i`` the cumulative weight of the rows
    at or after row ``i`` in descending time order (for unit weights: the rank of the
    row counted from the latest time, as in glmnet's and scikit-survival's rule). The
    same scale is used with Efron ties.
    """
    # position in a stable descending sort: heavier weight of later times, then the
    # tie block in its original order
    cs = np.cumsum(rs.w)
    k = np.arange(rs.w.shape[0])
    cum = rs.total_weight - cs[rs.last] + cs[k] - cs[rs.first] + rs.w[rs.first]
    use = rs.dw > 0
    dw = rs.dw
    return float(np.sum(dw[use] * np.log(cum[use])) / rs.total_weight)


def weighted_loglik(eta, time, event, weights=None, ties: str = "breslow") -> np.ndarray:
    """Weighted log partial likelihood of each column of ``eta`` (one sort).

    Parameters
    ----------
    eta : ndarray of shape (n_samples,) or (n_samples, n_models)
    time, event : ndarray of shape (n_samples,)
    weights : ndarray of shape (n_samples,) or None
        Frequency weights (None: all 1).
    ties : {"breslow", "efron"}
    """
    rs = make_risk_sets(time, event, weights, ties)
    eta = np.asarray(eta, dtype=float)
    return loglik_sorted(rs, eta[rs.order])


def loglik_row_terms(eta, time, event, weights=None, ties: str = "breslow") -> np.ndarray:
    """Per-row terms of the log partial likelihood (columns of ``eta`` = models).

    An event row carries ``w_i (eta_i - L / D)``: its share of the log risk-set terms
    ``L`` of its tie block (event weight ``D``); censored rows carry 0. Columns sum to
    :func:`weighted_loglik`.
    """
    rs = make_risk_sets(time, event, weights, ties)
    eta = np.asarray(eta, dtype=float)
    E = eta[:, None] if eta.ndim == 1 else eta
    terms_s = cox_row_terms(np.asfortranarray(E[rs.order]), *rs.kernel_args(), rs.efron)
    out = np.empty_like(terms_s)
    out[rs.order] = terms_s
    return out[:, 0] if eta.ndim == 1 else out


def cv_partial_loglik(X, time, event, fold, fold_coefs, weights=None, *, ties: str = "breslow",
                      score: str = "basic") -> np.ndarray:
    """Cross-validated partial log-likelihood of every penalty of every fold, one pass each.

    ``score="basic"``: Verweij and van Houwelingen's contribution of fold ``k`` at penalty
    ``a``, ``l(beta_-k(a)) - l_-k(beta_-k(a))``, the log partial likelihood of all rows
    minus that of the training rows, both at the coefficients fitted without fold ``k``
    [4]_. ``score="linear_predictor"``: the log partial likelihood of all rows at the
    out-of-fold linear predictors, split into the row terms of each fold [5]_. All
    penalties of a fold are scored in one compiled pass over the matrix of linear
    predictors; the sorts are shared by every penalty.

    Parameters
    ----------
    X : ndarray of shape (n_samples, n_features)
    time, event : ndarray of shape (n_samples,)
    fold : ndarray of int of shape (n_samples,), values ``0 .. n_folds - 1``
    fold_coefs : sequence of ndarray of shape (n_features, n_alphas)
        Coefficient path fitted without fold ``k``, for each ``k``.
    weights : ndarray of shape (n_samples,) or None
        Frequency weights (a bootstrap sample's counts).
    ties : {"breslow", "efron"}
    score : {"basic", "linear_predictor"}

    Returns
    -------
    contrib : ndarray of shape (n_folds, n_alphas)
    """
    if score not in CV_SCORES:
        raise ModelError(f"cv score {score!r} is unknown; choose one of {CV_SCORES}.")
    X = np.asarray(X, dtype=float)
    fold = np.asarray(fold)
    w = np.ones(X.shape[0]) if weights is None else np.asarray(weights, dtype=float)
    n_folds = len(fold_coefs)
    out = np.empty((n_folds, np.asarray(fold_coefs[0]).shape[1]))
    if score == "linear_predictor":
        eta = np.empty((X.shape[0], out.shape[1]))
        for k, B in enumerate(fold_coefs):
            rows = fold == k
            B = np.asarray(B, dtype=float)
            nz = np.flatnonzero(np.any(B != 0, axis=1))
            eta[rows] = X[np.ix_(rows, nz)] @ B[nz]
        terms = loglik_row_terms(eta, time, event, w, ties)
        for k in range(n_folds):
            out[k] = terms[fold == k].sum(axis=0)
        return out
    rs_all = make_risk_sets(time, event, w, ties)
    for k, B in enumerate(fold_coefs):
        B = np.asarray(B, dtype=float)
        nz = np.flatnonzero(np.any(B != 0, axis=1))  # a sparse path: only its non-zero rows
        eta = X[:, nz] @ B[nz]
        rs_train = make_risk_sets(time, event, np.where(fold != k, w, 0.0), ties)
        out[k] = loglik_sorted(rs_all, eta[rs_all.order]) - loglik_sorted(rs_train, eta[rs_train.order])
    return out


# ------------------------------------------- plain numpy forms (unweighted, many models at once)


def breslow_loglik_terms(eta: np.ndarray, time: np.ndarray, event: np.ndarray) -> np.ndarray:
    """Per-row terms of the Cox partial log-likelihood (Breslow ties), many models at once.

    Parameters
    ----------
    eta : ndarray of shape (n_samples,) or (n_samples, n_models)
        Linear predictors; each column is one model (for example one penalty).
    time, event : ndarray of shape (n_samples,)

    Returns
    -------
    terms : ndarray of the same shape as ``eta``
        ``eta_i - log(sum_{j: t_j >= t_i} exp(eta_j))`` for rows with an event, 0 for
        censored rows; the column sums are the partial log-likelihoods.

    Notes
    -----
    The risk-set sums are reverse cumulative sums over rows sorted by time, taken
    after subtracting each column's maximum, so large linear predictors do not
    overflow. Cost is O(n log n + n * n_models).
    """
    eta = np.asarray(eta, dtype=float)
    one_d = eta.ndim == 1
    E = eta[:, None] if one_d else eta
    order = np.argsort(time, kind="mergesort")
    t = np.asarray(time, dtype=float)[order]
    Es = E[order]
    shift = Es.max(axis=0)
    shift = np.where(np.isfinite(shift), shift, 0.0)
    w = np.exp(Es - shift)
    risk = np.cumsum(w[::-1], axis=0)[::-1]
    first = np.searchsorted(t, t, side="left")  # tied times share the whole risk set
    with np.errstate(divide="ignore"):
        log_risk = np.log(risk[first]) + shift
    ev = np.asarray(event, dtype=bool)[order]
    terms_sorted = np.where(ev[:, None], Es - log_risk, 0.0)
    terms = np.empty_like(terms_sorted)
    terms[order] = terms_sorted
    return terms[:, 0] if one_d else terms


def breslow_loglik(eta: np.ndarray, time: np.ndarray, event: np.ndarray) -> np.ndarray:
    """Cox partial log-likelihood (Breslow ties) of each column of ``eta``."""
    return breslow_loglik_terms(eta, time, event).sum(axis=0)


def breslow_log_cumhaz(eta: np.ndarray, time: np.ndarray, event: np.ndarray):
    """Breslow baseline cumulative hazard, returned on the log scale.

    Returns
    -------
    event_times : ndarray of shape (n_event_times,)
    log_cumhaz : ndarray of shape (n_event_times,)
        ``log H0(t)`` at each distinct event time, for a linear predictor of 0.

    References
    ----------
    .. [1] Breslow NE. Discussion of Professor Cox's paper. J R Stat Soc B 1972;34:216-7.
    """
    eta = np.asarray(eta, dtype=float)
    t = np.asarray(time, dtype=float)
    ev = np.asarray(event, dtype=bool)
    order = np.argsort(t, kind="mergesort")
    ts, es, Es = t[order], ev[order], eta[order]
    shift = Es.max()
    risk = np.cumsum(np.exp(Es - shift)[::-1])[::-1]
    uniq, d = np.unique(ts[es], return_counts=True)
    first = np.searchsorted(ts, uniq, side="left")
    log_incr = np.log(d) - (np.log(risk[first]) + shift)
    return uniq, np.logaddexp.accumulate(log_incr)
