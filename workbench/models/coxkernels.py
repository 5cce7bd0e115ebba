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
def cd_cycles(G, q, bn, lam1, denom, diag, eps, max_cycles, sign_check, visit):
    """Cyclic coordinate descent on ``-q'd + d'Gd/2 + penalty``, in place on ``bn`` and ``q``;
    each cycle visits the coordinates in the order ``visit``.

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
        for jj in range(m):
            j = visit[jj]
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


@njit(cache=True)
def _hessian_nb(XS, c, e, q0, q1, q2, bfirst, row_blk, ev_blk, W):
    M = hessian_apply(XS, c, e, q0, q1, q2, bfirst, row_blk, ev_blk)
    G = np.dot(XS.T, M) / W
    return 0.5 * (G + G.T)


@njit(cache=True)
def _penalty(b, lam1, lam2):
    s = 0.0
    for j in range(b.shape[0]):
        s += lam1[j] * abs(b[j]) + 0.5 * lam2[j] * b[j] * b[j]
    return s


@njit(cache=True)
def newton_working_set(XS, eta, b, lam1, lam2, G, fresh, W, eps, inner_eps, max_cycles, renew,
                       w, dw, bfirst, blast, mterms, tw, row_blk, ev_blk, efron, visit):
    """Proximal Newton on one working set, all in compiled code (see coxpath._Problem).

    ``XS`` (column-major, sorted rows) holds the working set's columns, ``b`` their
    coefficients, ``eta`` the full linear predictor, ``G`` a Hessian of ``-l / W`` on the
    set (computed here when ``fresh``). Each step solves the penalised quadratic by
    coordinate descent to ``inner_eps``, backtracks until the penalised objective does not
    rise, and stops when no single coordinate step from the new point would change the
    quadratic model by ``eps`` or more. The Hessian is renewed when a step had to be
    shortened or shrank the update by less than the factor ``renew``.

    Coordinates are visited in the order ``visit`` (the columns of ``XS`` may be in any
    order). Returns ``(b, eta, G, ref, cycles, converged, pieces, gS)`` with ``ref`` the likelihood
    pieces ``G`` was taken at (``None`` when ``G`` is the one given) and ``pieces`` those at
    the final point.
    """
    pc = cox_pieces(eta, w, dw, bfirst, blast, mterms, tw, row_blk, ev_blk, efron)
    renewed = False
    ref = pc
    if fresh:
        G = _hessian_nb(XS, pc[2], pc[3], pc[7], pc[8], pc[9], bfirst, row_blk, ev_blk, W)
        renewed = True
    gS = np.dot(XS.T, pc[1]) / W
    m = b.shape[0]
    cycles = 0
    last_up = np.inf
    while True:
        diag = np.empty(m)
        for j in range(m):
            diag[j] = G[j, j]
        denom = diag + lam2
        q = gS.copy()
        bn = b.copy()
        cyc, _ = cd_cycles(G, q, bn, lam1, denom, diag, inner_eps, max(max_cycles - cycles, 1),
                           max_cycles + 1, visit)
        cycles += cyc
        d = bn - b
        moved = False
        for j in range(m):
            if d[j] != 0.0:
                moved = True
                break
        if not moved:
            return b, eta, G, renewed, ref, cycles, True, pc, gS
        obj_old = -pc[0] / W + _penalty(b, lam1, lam2)
        dS = np.dot(XS, d)
        step = 1.0
        while True:  # backtracking keeps every step a descent step
            eta_try = eta + step * dS
            b_try = b + step * d
            pc_try = cox_pieces(eta_try, w, dw, bfirst, blast, mterms, tw, row_blk, ev_blk, efron)
            if (-pc_try[0] / W + _penalty(b_try, lam1, lam2) <= obj_old + 1e-12 * abs(obj_old)
                    or step < 1e-6):
                break
            step *= 0.5
        eta = eta_try
        b = b_try
        pc = pc_try
        gS = np.dot(XS.T, pc[1]) / W
        up = 0.0
        worst = 0.0
        for j in range(m):
            sd = step * d[j]
            u = diag[j] * sd * sd
            if u > up:
                up = u
            # the single coordinate step from the new point ([1]'s criterion, taken at the
            # current point so that a subproblem stopped early cannot pass for convergence)
            z = gS[j] + diag[j] * b[j]
            a = abs(z) - lam1[j]
            target = 0.0
            if a > 0.0:
                target = (a if z > 0.0 else -a) / (diag[j] + lam2[j])
            mv = target - b[j]
            v = diag[j] * mv * mv
            if v > worst:
                worst = v
        if worst < eps or cycles >= max_cycles:
            return b, eta, G, renewed, ref, cycles, cycles < max_cycles, pc, gS
        if step < 1.0 or up > renew * last_up:
            G = _hessian_nb(XS, pc[2], pc[3], pc[7], pc[8], pc[9], bfirst, row_blk, ev_blk, W)
            renewed = True
            ref = pc
        last_up = up


@njit(cache=True)
def sorted_centred_columns(X, order, mean):
    """``X[order] - mean`` in column-major layout with the column norms, in one pass.

    The copy runs over square tiles so that the rows read and the columns written both stay
    in cache and in the address-translation buffer (one copy instead of four).
    """
    n, p = X.shape
    out = np.empty((p, n)).T
    norm2 = np.zeros(p)
    blk = 32
    for j0 in range(0, p, blk):
        j1 = min(j0 + blk, p)
        for i0 in range(0, n, blk):
            i1 = min(i0 + blk, n)
            for j in range(j0, j1):
                m = mean[j]
                s = 0.0
                for i in range(i0, i1):
                    v = X[order[i], j] - m
                    out[i, j] = v
                    s += v * v
                norm2[j] += s
    return out, np.sqrt(norm2)


@njit(cache=True)
def carry_hessian(G_old, pos, G):
    """Fill ``G`` (m x m, C order, not sharing memory with ``G_old``) for a new working set
    with the entries of ``G_old`` between features it already covered (``pos[k]``: position
    of feature ``k`` in ``G_old``, -1 for a new one); the rows and columns of new features
    are left for the caller to fill."""
    m = pos.shape[0]
    for a in range(m):
        pa = pos[a]
        if pa < 0:
            continue
        for b in range(m):
            pb = pos[b]
            if pb >= 0:
                G[a, b] = G_old[pa, pb]


@njit(cache=True)
def put_columns(X, cols, out, start):
    """``out[:, start + k] = X[:, cols[k]]`` for column-major arrays."""
    n = X.shape[0]
    for k in range(cols.shape[0]):
        j = cols[k]
        for i in range(n):
            out[i, start + k] = X[i, j]


@njit(cache=True)
def gather_columns(X, cols):
    """``X[:, cols]`` of a column-major ``X`` as a column-major copy (one contiguous copy per
    column)."""
    n = X.shape[0]
    m = cols.shape[0]
    out = np.empty((m, n)).T
    for k in range(m):
        j = cols[k]
        for i in range(n):
            out[i, k] = X[i, j]
    return out


@njit(cache=True)
def columns_dot(X, cols, r):
    """``X[:, cols]' r`` for a column-major ``X`` without copying the columns."""
    m = cols.shape[0]
    out = np.empty(m)
    for k in range(m):
        out[k] = np.dot(X[:, cols[k]], r)
    return out
