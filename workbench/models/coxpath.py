"""Elastic-net Cox regularisation paths by cyclic coordinate descent (compiled inner loops).

For each penalty ``alpha`` of a decreasing path this minimises

    -l(beta) / W + alpha * sum_j pf_j * (l1_ratio * |beta_j| + (1 - l1_ratio) / 2 * beta_j**2)

where ``l`` is the weighted Breslow log partial likelihood
(:mod:`workbench.models.coxlik`), ``W`` the total case weight (the number of rows
for unit weights) and ``pf`` the penalty factors rescaled to sum to the number of
features (0 leaves a feature unpenalised). This is the objective, the ``alpha``
scale and the penalty-factor convention of Simon et al. [1]_ as implemented in
scikit-survival's ``CoxnetSurvivalAnalysis`` with ``normalize=False``, so the two
give the same path for the same penalties.

The solver: at the current coefficients the partial likelihood is replaced by its
second-order expansion on a working set of features, and the penalised quadratic is
minimised by cyclic coordinate descent [1]_ [3]_ (compiled with numba; covariance updates
on the working set's Hessian, so a pass over a feature costs O(working-set size), not
O(n)); a backtracking step keeps each move a descent step, and the expansion is renewed
until the coefficients stop moving. The Hessian is kept from one Newton step and one
penalty to the next, renewed only when progress slows, and a feature joining the working
set adds only its own rows (taken at the point the rest were, so the matrix stays one
exact Hessian): a stale Hessian changes the speed of approach, never the fixed point. [1]_ expands with only the diagonal of the Hessian in
the linear predictor; near the weakly penalised end of a path that converges slowly
(a contraction factor of 0.93 per step, measured on the breast cancer genes), so the
exact Hessian on the working set is used instead, computed with reverse cumulative
sums (a proximal Newton method [4]_; the solution is the same, only the route differs).
Ties: Breslow or Efron (:mod:`workbench.models.coxlik`). The working set at each
penalty is the ever-active set plus the features passing the sequential strong rule
[2]_; after convergence every other feature's KKT condition is checked, violators join the set and the fit resumes. Warm starts carry
each solution to the next penalty.

Throughput on a large X (measured on 5,000 x 2,000, bench/bench_coxpath.py): X is sorted,
centred and laid out by columns in one tiled copy; the working set's columns sit in an
append-only buffer, so a growing set copies only its new columns (coordinates are still
visited in feature order); the KKT check bounds each feature's gradient through a small basis
of earlier residual moves whose products with X are known, and recomputes only the features
the bound cannot clear (about 20 instead of 34 full passes over X on that path). The decisions and
the fixed point are those of the exact check.

References
----------
.. [1] Simon N, Friedman J, Hastie T, Tibshirani R. Regularization paths for Cox's
       proportional hazards model via coordinate descent. J Stat Softw 2011;39(5):1-13.
.. [2] Tibshirani R, Bien J, Friedman J, Hastie T, Simon N, Taylor J, Tibshirani RJ.
       Strong rules for discarding predictors in lasso-type problems. J R Stat Soc B
       2012;74(2):245-66.
.. [3] Friedman J, Hastie T, Tibshirani R. Regularization paths for generalized linear
       models via coordinate descent. J Stat Softw 2010;33(1):1-22.
.. [4] Lee JD, Sun Y, Saunders MA. Proximal Newton-type methods for minimizing composite
       functions. SIAM J Optim 2014;24(3):1420-43.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass
from functools import lru_cache

import numpy as np
from threadpoolctl import ThreadpoolController

from workbench.errors import ConvergenceWarning, ModelError
from workbench.models.coxkernels import (
    carry_hessian,
    columns_dot,
    gather_columns,
    newton_working_set,
    put_columns,
    sorted_centred_columns,
)
from workbench.models.coxlik import (
    Pieces,
    hessian_columns,
    hessian_factors,
    hessian_from_factors,
    likelihood_pieces,
    make_risk_sets,
    null_deviance,
)

_MIN_ALPHAS = 5  # the flat-deviance stop compares with the penalty this many steps back
_FLAT = 0.999
_BIG = 1e35  # a penalty that keeps every penalised coefficient at zero
_RENEW = 0.3  # a fresh Hessian when a Newton step shrinks the update by less than this (measured)
# the quadratic subproblem is solved ten times tighter than the outer rule: an inexact inner
# solve leaves Newton steps of the size of the tolerance itself, which crawl (measured)
_INNER = 0.1
_SMALL = 2e6  # below this many flops, skip the Python-side Hessian cache and KKT bound
_FULL_SHARE = 0.3  # recompute the whole gradient when more features than this need checking
_BASIS_SIZE = 20  # residual moves kept for the KKT bound (see _Problem._kkt_violations)
_HELD_SHARE = 0.1  # features that left the working set may stay in its buffer up to this share
_HOLD = 1e300  # an L1 penalty that holds a coefficient at zero (finite: 0 * _HOLD = 0)
_MARGIN = 1e-9  # relative margin of the KKT bound for rounding (double precision: ~1e-16)


@lru_cache(maxsize=1)
def _blas_controller() -> ThreadpoolController:
    # scanning the loaded libraries costs ~5 ms; a path on a small problem takes ~10 ms
    return ThreadpoolController()


@dataclass(frozen=True)
class CoxPath:
    """A fitted elastic-net Cox path.

    Attributes
    ----------
    alphas : ndarray of shape (n_alphas,)
    coefs : ndarray of shape (n_features, n_alphas)
        Coefficients on the scale of the ``X`` given (columns follow ``alphas``).
    dev_ratio : ndarray of shape (n_alphas,)
        Fraction of the null deviance explained, on the scale of [1]_'s stopping rule.
    n_cycles : int
        Coordinate-descent cycles used over the whole path.
    converged : bool
    penalty_factor : ndarray of shape (n_features,)
        The rescaled penalty factors actually used.
    """

    alphas: np.ndarray
    coefs: np.ndarray
    dev_ratio: np.ndarray
    n_cycles: int
    converged: bool
    penalty_factor: np.ndarray


def rescale_penalty_factor(penalty_factor, n_features: int) -> np.ndarray:
    """Penalty factors rescaled to sum to ``n_features`` (glmnet's convention)."""
    if penalty_factor is None:
        return np.ones(n_features)
    pf = np.asarray(penalty_factor, dtype=float).ravel()
    if pf.shape[0] != n_features:
        raise ModelError(f"penalty_factor has {pf.shape[0]} entries; X has {n_features} features.")
    if not np.all(np.isfinite(pf)) or np.any(pf < 0) or pf.sum() <= 0:
        raise ModelError("penalty factors must be finite, non-negative and not all zero.")
    return pf * n_features / pf.sum()


class _Problem:
    """Sorted, centred data and the state carried from one penalty to the next."""

    def __init__(self, X, time, event, weights, pf, l1_ratio, tol, ties):
        X = np.asarray(X, dtype=float)
        self.rs = make_risk_sets(time, event, weights, ties)
        self.W = self.rs.total_weight
        if self.W <= 0 or self.rs.dw.sum() <= 0:
            raise ModelError("the weighted data contain no events; the Cox path needs at least one.")
        w = np.empty_like(self.rs.w)
        w[self.rs.order] = self.rs.w  # the case weights in the given row order
        mean = w @ X / self.W
        # centring leaves Cox coefficients unchanged; column-major so that a working set's
        # columns are gathered as contiguous blocks; sorted, centred and laid out in one copy
        self.X, self.xnorm = sorted_centred_columns(X, self.rs.order, mean)
        self.pf = pf
        self.l1 = float(l1_ratio)
        self.null_dev = null_deviance(self.rs)
        self.eps = tol * self.null_dev
        p = X.shape[1]
        self.beta = np.zeros(p)
        self.eta = np.zeros(X.shape[0])
        self.active = pf == 0  # unpenalised features are always in the working set
        self.cycles = 0
        self.n_hessians = 0
        # (working set, its Hessian, the likelihood pieces it was taken at): a Hessian
        # from an earlier point changes the speed of approach, never the fixed point
        self._cache = None
        # two flat buffers the carried Hessian is written to in turn (the cached one lives in
        # one of them): a new m x m array per carry cost more than the copy itself, in fresh
        # pages (107 carries with m up to 1,965: 0.88 vs 0.14 s CPU, bench_coxpath scenario 4)
        self._gbufs = [np.zeros(0), np.zeros(0)]
        self._buf = np.zeros((X.shape[0], 0), order="F")  # see _working_columns
        self._ids = np.zeros(0, dtype=np.int64)
        self._inbuf = np.zeros(p, dtype=bool)
        self._set_pieces(likelihood_pieces(self.rs, self.eta))
        self._r0 = None
        self._D, self._G, self._Gabs = np.zeros((X.shape[0], 0)), np.zeros((p, 0)), np.zeros((p, 0))
        self.full_gradient()

    def full_gradient(self):
        """``X' resid / W`` of every feature (one pass over X), remembered with its residuals.

        The move of the residuals since the last full pass joins a small basis ``D`` whose
        products with X are known exactly as differences of full gradients (``G``), with no
        extra pass over X (see :meth:`_kkt_violations`).
        """
        g = self.X.T @ self.resid
        if self._r0 is not None and self.X.size >= _SMALL:
            d = self.resid - self._r0
            if np.any(d != 0):
                keep = slice(1, None) if self._D.shape[1] >= _BASIS_SIZE else slice(None)  # oldest out
                self._D = np.column_stack([self._D[:, keep], d])
                self._G = np.column_stack([self._G[:, keep], g - self.grad])
                self._Gabs = np.column_stack([self._Gabs[:, keep], np.abs(g) + np.abs(self.grad)])
        self.grad = g
        self._r0 = self.resid.copy()
        self.grad_rule = self.grad  # best known current gradient, for the strong rule

    def _kkt_violations(self, work, lam1_all, S, gS):
        """Features outside the working set that violate their KKT condition, exactly.

        With ``r0`` the residuals of the last full pass and ``D`` earlier residual moves whose
        products ``G = X'D`` are known, ``r - r0 = D c + u`` (``c`` by least squares) and
        ``|x_j' r| <= |x_j' r0 + G_j c| + ||x_j|| ||u||`` (Cauchy-Schwarz on the part the
        moves miss). This clears most features without touching their column; only the
        others are recomputed, and the whole gradient only when they are many (it is one
        pass over X, the path's largest cost on a wide X). The decision is exact either
        way: the bound carries margins far above the rounding of ``G c`` and of ``u``.
        """
        out = ~work
        if self.X.size < _SMALL:  # the bound's bookkeeping costs more than the product
            self.full_gradient()
            return out & (np.abs(self.grad) > lam1_all)
        d = self.resid - self._r0
        D = self._D
        c = np.linalg.lstsq(D, d, rcond=None)[0] if D.shape[1] else np.zeros(0)
        est = self.grad + self._G @ c
        ac = np.abs(c)
        slack = float(np.linalg.norm(d)) + float(np.linalg.norm(D, axis=0) @ ac)
        bound = self.xnorm * (float(np.linalg.norm(d - D @ c)) + _MARGIN * slack)
        bound += _MARGIN * (self._Gabs @ ac + np.abs(self.grad) + np.abs(est) + lam1_all)
        cand = np.flatnonzero(out & (np.abs(est) + bound > lam1_all))
        if cand.size > _FULL_SHARE * out.size:
            self.full_gradient()
            return out & (np.abs(self.grad) > lam1_all)
        g = columns_dot(self.X, cand, self.resid)
        viol = np.zeros_like(work)
        viol[cand] = np.abs(g) > lam1_all[cand]
        self.grad_rule = est
        self.grad_rule[cand] = g
        if S.size:
            self.grad_rule[S] = gS
        return viol

    def _set_pieces(self, pc):
        self.pieces = pc
        self.resid, self.loglik = pc.resid / self.W, pc.loglik

    def dev_ratio(self) -> float:
        # [1]'s scale: (saturated - model log-likelihood) / W is -l / W for the Cox model
        return 1.0 - (-self.loglik / self.W) / self.null_dev

    def fit_alpha(self, alpha, work, max_cycles):
        """Fit one penalty from the current state; ``work`` is a boolean working set."""
        self.alpha = alpha
        lam1_all = alpha * self.l1 * self.pf
        lam2_all = alpha * (1 - self.l1) * self.pf
        while True:
            S = np.flatnonzero(work)
            if S.size:
                conv, S, gS = self._fit_working_set(S, lam1_all, lam2_all, max_cycles)
            else:
                conv, gS = True, np.zeros(0)
            if self.cycles >= max_cycles:
                return False
            viol = self._kkt_violations(work, lam1_all, S, gS)
            if conv and not viol.any():
                return True
            work |= viol

    def _working_columns(self, S):
        """The working set's columns as a column-major view ``(XS, ids, held)``: ``ids`` the
        features in the order of the columns, ``held`` those of them outside ``S``.

        The columns live in a buffer that keeps them in the order they joined: a set that only
        grows (the usual case down a path) copies only its new columns. A feature that left
        the set stays in the buffer while such features are few (the caller holds it at zero);
        otherwise the set is gathered afresh, in feature order.
        """
        ids = self._ids
        inS = np.zeros_like(self._inbuf)
        inS[S] = True
        n_held = ids.size - int(self._inbuf[S].sum())
        if ids.size and n_held <= _HELD_SHARE * ids.size:
            new = S[~self._inbuf[S]]
            if ids.size + new.size > self._buf.shape[1]:  # grow the buffer geometrically
                cap = min(max(2 * self._buf.shape[1], ids.size + new.size), self.X.shape[1])
                buf = np.empty((cap, self.X.shape[0])).T
                put_columns(self._buf, np.arange(ids.size), buf, 0)
                self._buf = buf
            put_columns(self.X, new, self._buf, ids.size)
            ids = np.concatenate([ids, new])
        else:
            self._buf = gather_columns(self.X, S)
            ids = S.copy()
            self._inbuf[:] = False
        self._inbuf[ids] = True
        self._ids = ids
        return self._buf[:, :ids.size], ids, ~inS[ids]

    def _hessian(self, ids, XS):
        """Hessian of ``-l / W`` on the features ``ids`` (the columns of ``XS``): the cached
        one, extended by the rows of features new to the working set (taken at the cached
        point, so the matrix stays one exact, positive semi-definite Hessian), or a fresh one
        at the current point."""
        c = self._cache
        if c is not None:
            old, G_old, pc = c
            if old.size == ids.size and np.array_equal(old, ids):
                return G_old
            posmap = np.full(self.X.shape[1], -1)
            posmap[old] = np.arange(old.size)
            pos = posmap[ids]
            known = pos >= 0
            if known.sum() >= ids.size // 2:
                G = self._carry_target(G_old, ids.size)
                carry_hessian(G_old, pos, G)
                nn = np.flatnonzero(~known)
                if nn.size:
                    Gn = hessian_columns(self.rs, pc, XS, nn) / self.W
                    G[:, nn] = Gn
                    G[nn, :] = Gn.T
                self._cache = (ids.copy(), G, pc)
                return G
        G = hessian_from_factors(*hessian_factors(self.rs, self.pieces, XS)) / self.W
        self.n_hessians += 1
        self._cache = (ids.copy(), G, self.pieces)
        return G

    def _carry_target(self, G_old, m):
        """An m x m C-order view of the buffer that does not hold ``G_old``, grown
        geometrically (up to p x p) when too small."""
        k = 1 if np.may_share_memory(G_old, self._gbufs[0]) else 0
        if self._gbufs[k].size < m * m:
            cap = min(max(m * m, int(1.5 * m) ** 2), self.X.shape[1] ** 2)
            self._gbufs[k] = np.empty(cap)
        return self._gbufs[k][:m * m].reshape(m, m)

    def _fit_working_set(self, S, lam1_all, lam2_all, max_cycles):
        """Proximal Newton on the working set with the exact Hessian of the partial likelihood,
        in compiled code (:func:`workbench.models.coxkernels.newton_working_set`); the Hessian
        is renewed only when progress slows or a step has to be shortened. Coordinates are
        visited in feature order whatever the order of the buffered columns. Returns
        ``(converged, features, their gradient)``."""
        XS, ids, held = self._working_columns(S)
        # a small Hessian is cheaper to recompute in compiled code than to extend in Python
        fresh = XS.size * ids.size < _SMALL
        G = np.zeros((ids.size, ids.size)) if fresh else self._hessian(ids, XS)
        rs = self.rs
        lam1 = lam1_all[ids]
        lam1[held] = _HOLD  # features outside the set stay at zero (their coefficient is 0)
        b, eta, G, renewed, ref, cyc, conv, pc, gS = newton_working_set(
            XS, self.eta, self.beta[ids], lam1, lam2_all[ids],
            np.ascontiguousarray(G), fresh, self.W, self.eps, self.eps * _INNER,
            max(max_cycles - self.cycles, 1), _RENEW, *rs.kernel_args(), rs.row_blk, rs.ev_blk, rs.efron,
            np.argsort(ids))
        self.cycles += cyc
        self.beta = self.beta.copy()
        self.beta[ids] = b
        self.eta = eta
        self._set_pieces(Pieces(*pc))
        if renewed:
            self.n_hessians += 1
            self._cache = (ids.copy(), G, Pieces(*ref))
        return conv and self.cycles < max_cycles, ids, gS


def cox_alpha_max(X, time, event, *, l1_ratio=1.0, penalty_factor=None, weights=None) -> float:
    """Smallest penalty at which every penalised coefficient is zero.

    ``max_j |x_j' r| / (pf_j * l1_ratio)`` over penalised features, with ``r`` the
    score residuals of the model holding only the unpenalised features.
    """
    return fit_cox_path(X, time, event, n_alphas=2, l1_ratio=l1_ratio, penalty_factor=penalty_factor,
                        weights=weights).alphas[0]


def fit_cox_path(X, time, event, *, alphas=None, n_alphas: int = 100, alpha_min_ratio: float = 0.01,
                 l1_ratio: float = 1.0, penalty_factor=None, weights=None, tol: float = 1e-7,
                 max_iter: int = 100000, stop_flat: bool | None = None,
                 ties: str = "breslow") -> CoxPath:
    """Elastic-net Cox path by coordinate descent with strong rules and warm starts.

    Parameters
    ----------
    X : ndarray of shape (n_samples, n_features)
        Predictors, used as given (standardise beforehand if wanted; centring is done
        internally and does not change the coefficients).
    time : ndarray of shape (n_samples,)
    event : ndarray of bool of shape (n_samples,)
    alphas : array-like, decreasing, or None
        Penalties to fit (0 gives the unpenalised fit). ``None`` builds ``n_alphas`` log-spaced penalties from
        ``alpha_max`` (see :func:`cox_alpha_max`) down to ``alpha_min_ratio * alpha_max``.
    l1_ratio : float in (0, 1]
        1 = lasso; smaller values mix in a ridge penalty.
    penalty_factor : array-like of shape (n_features,) or None
        Relative penalty of each feature, rescaled to sum to ``n_features``; 0 leaves a
        feature unpenalised.
    weights : array-like of shape (n_samples,) or None
        Frequency (case) weights; a weight of 0 drops the row, an integer weight ``k``
        counts the row ``k`` times.
    tol : float
        A penalty's fit stops when no coefficient update changes the weighted
        least-squares objective by more than ``tol`` times the null deviance.
    max_iter : int
        Maximum coordinate-descent cycles over the whole path.
    stop_flat : bool or None
        End the path once the explained deviance ratio changes by less than 0.1% over
        five penalties (the rule of [1]_ and of scikit-survival). ``None``: only for a
        generated path.
    ties : {"breslow", "efron"}
        How tied event times enter the partial likelihood (see
        :mod:`workbench.models.coxlik`; Efron with whole-number weights equals Efron on
        the duplicated rows).

    Returns
    -------
    CoxPath

    References
    ----------
    .. [1] Simon N et al. J Stat Softw 2011;39(5):1-13.
    .. [2] Tibshirani R et al. J R Stat Soc B 2012;74(2):245-66.
    """
    # one BLAS thread: the products here are small and many, and threads contend with
    # the resampling engine's own workers
    with _blas_controller().limit(limits=1, user_api="blas"):
        path = _run_path(X, time, event, alphas, n_alphas, alpha_min_ratio, l1_ratio,
                         penalty_factor, weights, tol, max_iter, stop_flat, ties)
    if not path.converged:
        warnings.warn(f"the Cox path solver used all {max_iter} cycles before converging; "
                      "increase max_iter or loosen tol.", ConvergenceWarning, stacklevel=2)
    return path


def _run_path(X, time, event, alphas, n_alphas, alpha_min_ratio, l1_ratio, penalty_factor,
              weights, tol, max_iter, stop_flat, ties) -> CoxPath:
    X = np.asarray(X, dtype=float)
    if X.ndim != 2 or X.shape[0] != np.shape(time)[0]:
        raise ModelError(f"X has shape {X.shape}; expected (n_samples, n_features) matching time.")
    if not 0.0 < l1_ratio <= 1.0:
        raise ModelError(f"l1_ratio must lie in (0, 1], got {l1_ratio}.")
    p = X.shape[1]
    pf = rescale_penalty_factor(penalty_factor, p)
    prob = _Problem(X, time, event, weights, pf, l1_ratio, tol, ties)
    create = alphas is None
    if stop_flat is None:
        stop_flat = create
    if create:
        if int(n_alphas) < 1:
            raise ModelError(f"n_alphas must be at least 1, got {n_alphas}.")
        # the model with only the unpenalised features, then the first penalty that keeps
        # every penalised feature out of it
        ok = prob.fit_alpha(_BIG, prob.active.copy(), max_iter) if prob.active.any() else True
        prob.full_gradient()
        pen = pf > 0
        a_max = float(np.max(np.abs(prob.grad[pen]) / pf[pen]) / l1_ratio)
        grid = a_max * alpha_min_ratio ** (np.arange(int(n_alphas)) / max(int(n_alphas) - 1, 1))
    else:
        grid = np.asarray(alphas, dtype=float).ravel()
        if grid.size == 0 or not np.all(np.isfinite(grid)) or np.any(grid < 0):
            raise ModelError("alphas must be non-negative and finite (0 fits the unpenalised model).")
        if np.any(np.diff(grid) > 0):
            raise ModelError("alphas must be in decreasing order (warm starts run down the path).")
        ok = True
    coefs = np.zeros((p, grid.size))
    dev = np.zeros(grid.size)
    alpha_prev = grid[0] if create else None
    n_done = grid.size
    for k, alpha in enumerate(grid):
        if alpha_prev is None:  # a given path: the first strong rule compares with alpha_max
            pen = pf > 0
            alpha_prev = max(float(np.max(np.abs(prob.grad[pen]) / pf[pen]) / l1_ratio), alpha)
        strong = np.abs(prob.grad_rule) > l1_ratio * (2.0 * alpha - alpha_prev) * pf
        work = (prob.beta != 0) | (pf == 0) | strong
        if not (create and k == 0):  # alpha_max's model is the unpenalised-terms fit itself
            ok = prob.fit_alpha(alpha, work, max_iter) and ok
        coefs[:, k] = prob.beta
        dev[k] = prob.dev_ratio()
        alpha_prev = alpha
        if prob.cycles >= max_iter:
            n_done = k + 1
            break
        if stop_flat and k >= _MIN_ALPHAS and dev[k] > 0 and dev[k - _MIN_ALPHAS + 1] / dev[k] > _FLAT:
            n_done = k + 1
            break
    return CoxPath(alphas=grid[:n_done].copy(), coefs=coefs[:, :n_done], dev_ratio=dev[:n_done],
                   n_cycles=prob.cycles, converged=bool(ok), penalty_factor=pf)
