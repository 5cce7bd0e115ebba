"""The pieces of a residual permutation test (used by the added-value test of imaging).

:func:`nuisance_design` (intercept, clinical terms learned on the rows, batch
indicators), :func:`residualise` (the least-squares split of the imaging table into a
part explained by that design and residuals), :func:`within_permutation` (rows moved
only within their stratum, e.g. scanner batch) and :func:`permutation_p_value`
(``(1 + b) / (1 + K)`` with its Monte Carlo SE; Phipson & Smyth 2010). Why the
residuals, not the imaging rows, are permuted is explained in
:mod:`workbench.validation.added_value`.
"""

from __future__ import annotations

import numpy as np

from workbench.cohort.core import Cohort
from workbench.errors import ModelError
from workbench.preprocess.clinical import ClinicalTransformer


def permutation_p_value(observed: float, null) -> tuple[float, float]:
    """``(1 + #{null >= observed}) / (1 + K)`` and its Monte Carlo SE ``sqrt(p (1 - p) / K)``.

    Counting the observed arrangement among the permutations makes the p-value
    never zero and the test exact at level alpha when ``(K + 1) alpha`` is an
    integer (Phipson & Smyth 2010). Ties count against the model.
    """
    null = np.asarray(null, dtype=float).ravel()
    k = null.size
    if k == 0:
        return float("nan"), float("nan")
    b = int(np.sum(null >= observed - 1e-10 * max(1.0, abs(observed))))
    p = (1.0 + b) / (1.0 + k)
    return float(p), float(np.sqrt(p * (1.0 - p) / k))


def nuisance_design(cohort: Cohort, predictors) -> tuple[np.ndarray, tuple[str, ...]]:
    """Intercept, clinical terms (learned on these rows) and batch indicators."""
    tr = ClinicalTransformer(tuple(predictors)).fit(cohort)
    design = tr.transform(cohort)
    if design.n_dropped:
        raise ModelError(
            f"added-value test: {design.n_dropped} patient(s) lack a clinical predictor handled by "
            "complete-case analysis; prepare the analysis cohort (complete cases) first.")
    cols = [np.ones(cohort.n), *design.X.T]
    names = ["intercept", *tr.columns_]
    if cohort.batch is not None:
        levels = np.unique(cohort.batch)
        for lv in levels[1:]:
            cols.append((cohort.batch == lv).astype(float))
            names.append(f"batch={lv}")
    return np.column_stack(cols), tuple(names)


def residualise(X: np.ndarray, Z: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Least-squares split ``X = Z B + R``; returns ``(Z B, R)`` (rank-deficient Z allowed)."""
    B, *_ = np.linalg.lstsq(Z, X, rcond=None)
    fitted = Z @ B
    return fitted, X - fitted


def within_permutation(strata: np.ndarray, rng: np.random.Generator) -> np.ndarray:
    """A permutation of row positions that moves rows only within their stratum."""
    perm = np.arange(strata.size)
    for s in np.unique(strata):
        idx = np.flatnonzero(strata == s)
        perm[idx] = idx[rng.permutation(idx.size)]
    return perm
