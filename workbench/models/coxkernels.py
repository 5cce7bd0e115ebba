"""Compiled (numba) loops of the Cox path solver: the weighted partial likelihood with
Breslow or Efron ties, and cyclic coordinate descent on a penalised quadratic.

Everything here works on rows sorted by time (see :class:`workbench.models.coxlik.RiskSets`)
and is O(n) per call, except the coordinate-descent cycles (O(m^2) per cycle on an m-feature
working set). ``cache=True`` keeps the compiled code on disk beside the module, so only
the first call after an install pays for compilation.

Ties. The event-time blocks carry ``m_b`` terms of weight ``tw_b``; term ``k`` of block
``b`` has the risk set ``R_b - f_k Rd_b`` with ``Rd_b`` the weighted risk of the block's
events and ``f_k = k / m_b`` (Efron [1]_) or ``f_k = 0`` (Breslow [2]_). How ``m_b`` and
``tw_b`` follow from the case weights is set in :func:`workbench.models.coxlik.make_risk_sets`.

References
----------
.. [1] Efron B. The efficiency of Cox's likelihood function for censored data. J Am Stat
       Assoc 1977;72:557-65.
.. [2] Breslow NE. Covariance analysis of censored survival data. Biometrics 1974;30:89-99.
.. [3] Friedman J, Hastie T, Tibshirani R. Regularization paths for generalized linear
       models via coordinate descent. J Stat Softw 2010;33(1):1-22.
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit


@njit(cache=True)
def _block_sums(eta, w, dw, bfirst, blast, efron_f, mterms, tw):
    """Shifted weighted risks, per-block risk-set sums and the log-likelihood."""
    n = eta.shape[0]
    nb = bfirst.shape[0]
    shift = -np.inf
    for i in range(n):
        if eta[i] > shift:
            shift = eta[i]
    if not np.isfinite(shift):
        shift = 0.0
    e = np.empty(n)
    for i in range(n):
        e[i] = w[i] * math.exp(eta[i] - shift)
    rc = np.empty(n)
    s = 0.0
    for i in range(n - 1, -1, -1):
        s += e[i]
        rc[i] = s
    ll = 0.0
    s0 = np.empty(nb)
    s1 = np.empty(nb)
    q0 = np.empty(nb)
    q1 = np.empty(nb)
    q2 = np.empty(nb)
    lsum = np.empty(nb)
    for b in range(nb):
        R = rc[bfirst[b]]
        Rd = 0.0
        for i in range(bfirst[b], blast[b] + 1):
            if dw[i] > 0.0:
                Rd += e[i]
                ll += dw[i] * (eta[i] - shift)
        a0 = 0.0
        a1 = 0.0
        b0 = 0.0
        b1 = 0.0
        b2 = 0.0
        m = mterms[b]
        t = tw[b]
        lb = 0.0
        for k in range(m):
            f = k / m if efron_f else 0.0
            Rk = R - f * Rd
            lb += t * math.log(Rk)
            a0 += t / Rk
            a1 += t * f / Rk
            r2 = t / (Rk * Rk)
            b0 += r2
            b1 += r2 * f
            b2 += r2 * f * f
        ll -= lb
        lsum[b] = lb
        s0[b] = a0
        s1[b] = a1
        q0[b] = b0
        q1[b] = b1
        q2[b] = b2
    return e, ll, s0, s1, q0, q1, q2, lsum, shift


@njit(cache=True)
def cox_pieces(eta, w, dw, bfirst, blast, mterms, tw, row_blk, ev_blk, efron):
    """Log-likelihood, its gradient in ``eta`` and the Hessian's factors, sorted rows.

    Returns ``(loglik, resid, c, e, l11, l21, l22)``: ``resid = dl/deta``;
    ``-d2l/deta2 = diag(c) - sum_b (v1_b v1_b' + v2_b v2_b')`` where, for the columns of a
    design ``X``, ``v1_b = l11_b U_b + l21_b Ud_b`` and ``v2_b = l22_b Ud_b`` with
    ``U_b = sum_{j in R_b} e_j x_j`` and ``Ud_b`` the same sum over the block's events
    (``e`` = weighted risks scaled by a common shift).
    """
    e, ll, s0, s1, q0, q1, q2, _, _ = _block_sums(eta, w, dw, bfirst, blast, efron, mterms, tw)
    n = eta.shape[0]
    nb = bfirst.shape[0]
    cs0 = np.empty(nb)
    acc = 0.0
    for b in range(nb):
        acc += s0[b]
        cs0[b] = acc
    resid = np.empty(n)
    c = np.empty(n)
    for i in range(n):
        a = cs0[row_blk[i]] if row_blk[i] >= 0 else 0.0
        if ev_blk[i] >= 0:
            a -= s1[ev_blk[i]]
        c[i] = e[i] * a
        resid[i] = dw[i] - c[i]
    l11 = np.empty(nb)
    l21 = np.empty(nb)
    l22 = np.empty(nb)
    for b in range(nb):
        # Cholesky factor of [[q0, -q1], [-q1, q2]] (a Gram matrix, so PSD)
        r = math.sqrt(q0[b])
        l11[b] = r
        l21[b] = -q1[b] / r if r > 0.0 else 0.0
        d = q2[b] - l21[b] * l21[b]
        l22[b] = math.sqrt(d) if d > 0.0 else 0.0
    return ll, resid, c, e, l11, l21, l22, q0, q1, q2


@njit(cache=True)
def hessian_apply(X, c, e, q0, q1, q2, bfirst, row_blk, ev_blk):
    """``M = (-d2l/deta2) X`` column by column in O(n) each (sorted rows).

    ``X_k' M`` is then the Hessian block between any columns ``X_k`` and those of ``X``:
    ``c x - e F - [event] e h`` with ``F_j = sum_{b <= row_blk_j} (q0_b U_b - q1_b Ud_b)``
    and ``h_b = q2_b Ud_b - q1_b U_b`` (``U_b``, ``Ud_b``: risk-set and tied-event sums of
    ``e x``).
    """
    n, K = X.shape
    nb = bfirst.shape[0]
    M = np.empty((K, n)).T
    rc = np.empty(n)
    U = np.empty(nb)
    Ud = np.empty(nb)
    F = np.empty(nb)
    for k in range(K):
        s = 0.0
        for i in range(n - 1, -1, -1):
            s += e[i] * X[i, k]
            rc[i] = s
        for b in range(nb):
            U[b] = rc[bfirst[b]]
            Ud[b] = 0.0
        for i in range(n):
            if ev_blk[i] >= 0:
                Ud[ev_blk[i]] += e[i] * X[i, k]
        acc = 0.0
        for b in range(nb):
            acc += q0[b] * U[b] - q1[b] * Ud[b]
            F[b] = acc
        for i in range(n):
            v = c[i] * X[i, k]
            if row_blk[i] >= 0:
                v -= e[i] * F[row_blk[i]]
            if ev_blk[i] >= 0:
                b = ev_blk[i]
                v -= e[i] * (q2[b] * Ud[b] - q1[b] * U[b])
            M[i, k] = v
    return M


@njit(cache=True)
def cox_loglik_columns(E, w, dw, bfirst, blast, mterms, tw, efron):
    """Log partial likelihood of each column of sorted linear predictors ``E``."""
    K = E.shape[1]
    out = np.empty(K)
    for k in range(K):
        out[k] = _block_sums(np.ascontiguousarray(E[:, k]), w, dw, bfirst, blast, efron,
                             mterms, tw)[1]
    return out


@njit(cache=True)
def cox_row_terms(E, w, dw, bfirst, blast, mterms, tw, efron):
    """Per-row terms of the log partial likelihood of each column of sorted ``E``.

    An event row gets ``dw_i (eta_i - L_b / D_b)``, its share of its block's log risk-set
    terms ``L_b`` (``D_b`` the block's event weight); censored rows get 0. Columns sum to
    the log-likelihoods.
    """
    n, K = E.shape
    out = np.zeros((n, K))
    for k in range(K):
        eta = np.ascontiguousarray(E[:, k])
        res = _block_sums(eta, w, dw, bfirst, blast, efron, mterms, tw)
        lsum = res[7]
        shift = res[8]
        for b in range(bfirst.shape[0]):
            D = mterms[b] * tw[b]
            for i in range(bfirst[b], blast[b] + 1):
                if dw[i] > 0.0:
                    out[i, k] = dw[i] * (eta[i] - shift - lsum[b] / D)
    return out


@njit(cache=True)
def cd_cycles(G, q, bn, lam1, denom, diag, eps, max_cycles, sign_check):
    """Cyclic coordinate descent on ``-q'd + d'Gd/2 + penalty``, in place on ``bn`` and ``q``.

    ``q`` is the running gradient ``g - G (bn - b)`` (covariance updates [3]_). Returns
    ``(cycles, status)``: 1 when no update changed the quadratic by ``eps`` or more,
    2 when a cycle left the signs as the previous one did (and ``sign_check`` cycles have
    passed), 0 when ``max_cycles`` ran out.
    """
    m = bn.shape[0]
    prev = np.sign(bn)
    cycles = 0
    while cycles < max_cycles:
        cycles += 1
        max_up = 0.0
        for j in range(m):
            old = bn[j]
            z = q[j] + diag[j] * old
            a = abs(z) - lam1[j]
            new = 0.0
            if a > 0.0:
                new = (a if z > 0.0 else -a) / denom[j]
            d = new - old
            if d != 0.0:
                bn[j] = new
                for i in range(m):
                    q[i] -= d * G[j, i]
                up = diag[j] * d * d
                if up > max_up:
                    max_up = up
        if max_up < eps:
            return cycles, 1
        same = True
        for j in range(m):
            s = np.sign(bn[j])
            if s != prev[j]:
                same = False
            prev[j] = s
        if same and cycles >= sign_check:
            return cycles, 2
    return cycles, 0
