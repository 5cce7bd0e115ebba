"""Collinearity of a score with the columns of a design matrix: correlations and variance inflation.

The variance inflation factor of design column j is ``1 / (1 - R_j^2)``, where
``R_j^2`` is the coefficient of determination of the least-squares regression
(with intercept) of column j on every other column. It is the factor by which
the variance of column j's coefficient grows because the other columns carry
part of its information (Marquardt 1970; Belsley, Kuh & Welsch 1980). Computed
here as the diagonal of the inverse correlation matrix, which is the same
number; a column that is an exact combination of the others gets ``inf`` and a
constant column ``nan``.

For a Cox model the VIF of the design is a description of the covariates, not
of the partial likelihood's information matrix; it is the usual collinearity
diagnostic reported beside survival models all the same (common practice).

References
----------
.. [1] Marquardt DW. Generalized inverses, ridge regression, biased linear
   estimation, and nonlinear estimation. Technometrics 1970;12:591-612.
.. [2] Belsley DA, Kuh E, Welsch RE. Regression Diagnostics. Wiley, 1980.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np


def variance_inflation(X) -> np.ndarray:
    """Variance inflation factor of every column of ``X`` (n_samples x n_columns), with an intercept.

    Returns ``nan`` for a constant column and ``inf`` for a column that is an
    exact linear combination of the others. One column alone has VIF 1.
    """
    A = np.asarray(X, dtype=float)
    if A.ndim != 2:
        raise ValueError(f"variance_inflation needs a 2-D design matrix; got shape {A.shape}.")
    n, p = A.shape
    out = np.full(p, np.nan)
    sd = A.std(axis=0) if n else np.zeros(p)
    ok = np.flatnonzero(np.isfinite(sd) & (sd > 0))
    if ok.size == 0:
        return out
    Z = (A[:, ok] - A[:, ok].mean(axis=0)) / sd[ok]
    R = (Z.T @ Z) / n
    # an exactly collinear set makes R singular: those columns have unbounded inflation
    w, V = np.linalg.eigh(R)
    tol = max(ok.size, n) * np.finfo(float).eps * max(float(w.max()), 1.0)
    small = w <= tol * 1e4
    inv_diag = np.sum(V[:, ~small] ** 2 / w[~small], axis=1)
    degenerate = np.any(np.abs(V[:, small]) > 1e-8, axis=1) if small.any() else np.zeros(ok.size, bool)
    out[ok] = np.where(degenerate, np.inf, inv_diag)
    return out


@dataclass(frozen=True)
class CollinearityRow:
    """One design column's relation to a score.

    Attributes
    ----------
    column : str
        Design column name.
    term : str
        The predictor (term) the column belongs to.
    correlation : float
        Pearson correlation of the column with the score.
    vif_without : float
        VIF of the column in the design without the score.
    vif_with : float
        VIF of the column in the design with the score added.
    """

    column: str
    term: str
    correlation: float
    vif_without: float
    vif_with: float


@dataclass(frozen=True)
class CollinearityTable:
    """Correlations and variance inflation of a score with each design column (one cohort).

    ``score_vif`` is the score's own VIF given every design column (``1 / (1 - R^2)``
    of the score on the design); ``score_r2`` is that R^2. ``term_r2`` gives, per
    term, the R^2 of the score regressed on that term's columns alone (with
    intercept): for a categorical term with several indicator columns, the one
    number that says how much of the score the term explains.
    """

    score: str
    n: int
    rows: tuple[CollinearityRow, ...]
    score_vif: float
    score_r2: float
    term_r2: tuple[tuple[str, float], ...] = ()


def _r2(X: np.ndarray, y: np.ndarray) -> float:
    """R^2 of the least-squares regression of ``y`` on ``X`` with intercept (nan for a constant ``y``)."""
    yc = y - y.mean()
    tss = float(yc @ yc)
    if tss <= 0:
        return float("nan")
    Xc = X - X.mean(axis=0)
    beta, *_ = np.linalg.lstsq(Xc, yc, rcond=None)
    res = yc - Xc @ beta
    return float(1.0 - (res @ res) / tss)


def score_collinearity(X, columns, score, *, terms=None, score_name: str = "score") -> CollinearityTable:
    """Correlation and VIF of ``score`` with each column of the design ``X`` (pure function).

    Parameters
    ----------
    X : array (n_samples, n_columns)
        Design matrix (e.g. the clinical model's design columns).
    columns : sequence of str
        Its column names.
    score : array (n_samples,)
        The score added to the design (e.g. an imaging signature).
    terms : sequence of str, optional
        The predictor each column belongs to (defaults to the column names).
    score_name : str
    """
    A = np.asarray(X, dtype=float)
    s = np.asarray(score, dtype=float).ravel()
    if A.shape[0] != s.size or A.shape[1] != len(columns):
        raise ValueError(f"design {A.shape} does not match {len(columns)} column names and {s.size} scores.")
    terms = tuple(columns) if terms is None else tuple(terms)
    ok = np.isfinite(s) & np.all(np.isfinite(A), axis=1)
    A, s = A[ok], s[ok]
    without = variance_inflation(A)
    with_score = variance_inflation(np.column_stack([A, s]))
    rows = []
    for j, name in enumerate(columns):
        x = A[:, j]
        r = float(np.corrcoef(x, s)[0, 1]) if np.ptp(x) > 0 and np.ptp(s) > 0 else float("nan")
        rows.append(CollinearityRow(str(name), str(terms[j]), r, float(without[j]), float(with_score[j])))
    names = list(dict.fromkeys(terms))
    term_r2 = tuple((t, _r2(A[:, [j for j, u in enumerate(terms) if u == t]], s)) for t in names)
    vif_s = float(with_score[-1])
    r2 = float(1.0 - 1.0 / vif_s) if np.isfinite(vif_s) and vif_s > 0 else (1.0 if vif_s == np.inf else float("nan"))
    return CollinearityTable(score_name, int(ok.sum()), tuple(rows), vif_s, r2, term_r2)
