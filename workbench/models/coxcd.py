"""The penalised quadratic subproblem of the Cox path solver, by coordinate descent.

Minimises ``-g'd + d'Gd/2 + sum_j (lam1_j |b_j + d_j| + lam2_j / 2 (b_j + d_j)**2)`` over
``d``, the second-order model of the penalised partial likelihood at ``b`` that
:mod:`workbench.models.coxpath` builds on a working set of features.

References
----------
.. [3] Friedman J, Hastie T, Tibshirani R. Regularization paths for generalized linear
       models via coordinate descent. J Stat Softw 2010;33(1):1-22.
.. [5] Lee H, Battle A, Raina R, Ng AY. Efficient sparse coding algorithms. Advances in
       Neural Information Processing Systems 19, 2007:801-8.
"""

from __future__ import annotations

import numpy as np

from workbench.models.coxkernels import cd_cycles

_MAX_SUPPORT_STEPS = 50


def solve_penalised_quadratic(G, g, b, lam1, lam2, eps, max_cycles):
    """Minimise ``-g.d + d'Gd/2 + penalty(b + d)`` over ``d``; returns (b + d, cycles).

    ``g`` is the gradient of the scaled log-likelihood at ``b``. Compiled coordinate
    descent (:func:`workbench.models.coxkernels.cd_cycles`) keeps the running gradient
    ``q = g - G d`` (covariance updates, [3]_). Whenever a cycle leaves the signs
    unchanged, the stationarity equations on the current support are solved directly
    (:func:`_support_step`): a consistent solution ends the subproblem exactly; otherwise
    the best point on the way to it (where coefficients cross zero, as in feature-sign
    search [5]_) is taken and the cycles go on. This spares the many slow cycles of
    correlated features. After a support step that found nothing, the next sign check
    waits twice as many cycles (each step costs a solve).
    """
    G = np.ascontiguousarray(G)
    q = np.array(g, dtype=float)
    bn = np.array(b, dtype=float)
    diag = np.ascontiguousarray(np.diag(G))
    denom = diag + lam2
    lam1 = np.ascontiguousarray(lam1, dtype=float)
    cycles = 0
    if np.any(b):  # warm start: the support often carries over from the previous penalty
        step, exact = _support_step(G, g, b, lam1, lam2, b)
        if exact:
            return step, 1
    wait = 1
    while cycles < max_cycles:
        c, status = cd_cycles(G, q, bn, lam1, denom, diag, eps, max_cycles - cycles, wait)
        cycles += c
        if status == 0:
            break
        moved = False
        for _ in range(_MAX_SUPPORT_STEPS):  # feature-sign steps: each drops a crossing feature
            step, exact = _support_step(G, g, b, lam1, lam2, bn)
            if exact:
                return step, cycles
            if step is bn:
                break
            bn, moved = step, True
        if moved:
            q = g - G @ (bn - b)
            wait = 1
        elif status == 1:
            break
        else:
            wait *= 2
    return bn, cycles


def _quad(G, g, b, lam1, lam2, x):
    d = x - b
    return -g @ d + 0.5 * d @ (G @ d) + lam1 @ np.abs(x) + 0.5 * lam2 @ (x * x)


def _support_step(G, g, b, lam1, lam2, bn):
    """Solve on the support of ``bn`` with its signs: ``(point, True)`` when the solution is
    consistent (signs kept, KKT met off the support); else ``(best point on the segment
    from bn to it, False)``, ``bn`` itself when none is lower."""
    signs = np.sign(bn)
    A = np.flatnonzero(signs)
    if A.size == 0:
        return bn, False
    rhs = g[A] + G[A] @ b - lam1[A] * signs[A]
    H = G[np.ix_(A, A)] + np.diag(lam2[A])
    try:
        xA = np.linalg.solve(H, rhs)
    except np.linalg.LinAlgError:
        return bn, False
    out = np.zeros_like(b)
    out[A] = xA
    if np.all(xA * signs[A] > 0):
        q = g - G @ (out - b)
        off = signs == 0
        if not np.any(np.abs(q[off]) > lam1[off]):
            return out, True
    # zero crossings on the segment bn -> out (coefficients that change sign)
    dA = xA - bn[A]
    with np.errstate(divide="ignore", invalid="ignore"):
        tz = -bn[A] / dA
    cross = np.flatnonzero((tz > 0) & (tz < 1))
    cands = [out]
    for c in cross[np.argsort(tz[cross])][:10]:
        x = bn + tz[c] * (out - bn)
        x[A[c]] = 0.0
        cands.append(x)
    vals = [_quad(G, g, b, lam1, lam2, x) for x in cands]
    best = int(np.argmin(vals))
    if vals[best] < _quad(G, g, b, lam1, lam2, bn) - 1e-15:
        return cands[best], False
    return bn, False
