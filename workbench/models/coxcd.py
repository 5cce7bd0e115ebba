"""The penalised quadratic subproblem of the Cox path solver, by coordinate descent.

Minimises ``-g'd + d'Gd/2 + sum_j (lam1_j |b_j + d_j| + lam2_j / 2 (b_j + d_j)**2)`` over
``d``, the second-order model of the penalised partial likelihood at ``b`` that
:mod:`workbench.models.coxpath` builds on a working set of features.

References
----------
.. [3] Friedman J, Hastie T, Tibshirani R. Regularization paths for generalized linear
       models via coordinate descent. J Stat Softw 2010;33(1):1-22.
"""

from __future__ import annotations

import numpy as np

from workbench.models.coxkernels import cd_cycles


def solve_penalised_quadratic(G, g, b, lam1, lam2, eps, max_cycles):
    """Minimise ``-g.d + d'Gd/2 + penalty(b + d)`` over ``d``; returns (b + d, cycles).

    ``g`` is the gradient of the scaled log-likelihood at ``b``. Compiled coordinate
    descent (:func:`workbench.models.coxkernels.cd_cycles`) keeps the running gradient
    ``q = g - G d`` (covariance updates, [3]_) and stops when no update changes the
    quadratic by ``eps`` or more. (A numpy version of this solver also solved the
    stationarity equations on the current support, as in feature-sign search, to save
    Python-level cycles; compiled cycles cost ~|S|^2 flops each and made those dense
    solves the larger cost, so they were dropped.)
    """
    G = np.ascontiguousarray(G, dtype=float)
    q = np.array(g, dtype=float)
    bn = np.array(b, dtype=float)
    diag = np.ascontiguousarray(np.diag(G))
    denom = diag + lam2
    lam1 = np.ascontiguousarray(lam1, dtype=float)
    cycles, _ = cd_cycles(G, q, bn, lam1, denom, diag, eps, max_cycles, max_cycles + 1)
    return bn, cycles
