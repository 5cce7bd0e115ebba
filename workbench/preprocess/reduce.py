"""Feature reduction for imaging signatures, each step a small fitted object.

Every step is learned on training rows only and reapplied unchanged. Each one
records which features it kept and why it dropped the others
(:class:`StepRecord`), so that a report can show the funnel from hundreds of
radiomic features down to the handful in the signature.

Steps: :class:`Standardizer`, :class:`NearZeroVarianceFilter`,
:class:`RedundancyFilter` (correlated pairs, keeping the more representative
member: unsupervised) and :class:`CoxScreen` (univariate Cox tests with
Benjamini-Hochberg false discovery rate control, each original patient once). :func:`univariate_cox` fits all
univariate Cox models at once with vectorised Newton steps.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd
from scipy import stats

from workbench.cohort.outcome import split_outcome
from workbench.errors import CohortError, ModelError, NotFittedError

# ------------------------------------------------------------------- records


@dataclass(frozen=True)
class StepRecord:
    """What one reduction step did.

    Attributes
    ----------
    step : str
    n_in, n_out : int
    kept : tuple of str
    dropped : tuple of (name, reason) pairs
    """

    step: str
    n_in: int
    n_out: int
    kept: tuple
    dropped: tuple

    @property
    def reasons(self) -> dict:
        return dict(self.dropped)


def _as_matrix(X, where: str):
    if isinstance(X, pd.DataFrame):
        names = [str(c) for c in X.columns]
        A = X.to_numpy(dtype=float)
    else:
        A = np.asarray(X, dtype=float)
        if A.ndim != 2:
            raise CohortError(f"{where}: expected a 2-D table of features, got shape {A.shape}.")
        names = [f"x{j}" for j in range(A.shape[1])]
    bad = ~np.isfinite(A)
    if bad.any():
        cols = [names[j] for j in np.flatnonzero(bad.any(axis=0))[:5]]
        rows = np.flatnonzero(bad.any(axis=1))[:5].tolist()
        raise CohortError(
            f"{where}: missing or infinite feature values in columns {cols} (row positions "
            f"{rows}, first five shown). Impute or drop them before fitting the signature.")
    return A, names


class _Step:
    """Shared selection logic: fitted steps expose ``support_`` and ``record_``."""

    _name = "step"

    def _check_fitted(self):
        if not hasattr(self, "support_"):
            raise NotFittedError(f"{type(self).__name__} is not fitted yet; call fit first.")

    def _check_columns(self, X, A):
        if A.shape[1] != len(self.feature_names_in_):
            raise ModelError(
                f"{type(self).__name__}: X has {A.shape[1]} features but {len(self.feature_names_in_)} "
                "were seen in fit.")
        if isinstance(X, pd.DataFrame) and list(map(str, X.columns)) != list(self.feature_names_in_):
            raise ModelError(
                f"{type(self).__name__}: the feature columns differ from those seen in fit; "
                "pass the same columns in the same order.")

    def _finish(self, names, keep, reasons):
        self.feature_names_in_ = np.asarray(names, dtype=object)
        self.support_ = np.asarray(keep, dtype=bool)
        kept = tuple(n for n, k in zip(names, keep, strict=True) if k)
        dropped = tuple((n, reasons[j]) for j, n in enumerate(names) if not keep[j])
        self.record_ = StepRecord(self._name, len(names), len(kept), kept, dropped)
        return self

    def get_feature_names_out(self):
        self._check_fitted()
        return self.feature_names_in_[self.support_]

    def transform(self, X):
        """Keep the selected columns (a DataFrame stays a DataFrame)."""
        self._check_fitted()
        A, _ = _as_matrix(X, type(self).__name__)
        self._check_columns(X, A)
        if isinstance(X, pd.DataFrame):
            return X.loc[:, self.support_]
        return A[:, self.support_]

    def fit_transform(self, X, y=None, **kw):
        return self.fit(X, y, **kw).transform(X)


# ---------------------------------------------------------- standardisation


class Standardizer(_Step):
    """Centre and scale each feature by its training mean and SD (ddof = 0).

    A constant feature keeps a scale of 1 so that it maps to 0 instead of NaN;
    :class:`NearZeroVarianceFilter` removes it afterwards.
    """

    _name = "standardise"

    def fit(self, X, y=None) -> Standardizer:
        A, names = _as_matrix(X, "Standardizer.fit")
        self.mean_ = A.mean(axis=0)
        sd = A.std(axis=0)
        self.scale_ = np.where(sd > 0, sd, 1.0)
        return self._finish(names, np.ones(A.shape[1], bool), {})

    def transform(self, X):
        self._check_fitted()
        A, _ = _as_matrix(X, "Standardizer.transform")
        self._check_columns(X, A)
        Z = (A - self.mean_) / self.scale_
        if isinstance(X, pd.DataFrame):
            return pd.DataFrame(Z, index=X.index, columns=X.columns)
        return Z


class NearZeroVarianceFilter(_Step):
    """Drop features that are (nearly) constant in the training rows.

    A feature is dropped if its SD is at most ``min_sd`` or if both its ratio of
    the most to the second most frequent value exceeds ``freq_ratio`` and its
    distinct values make up less than ``unique_percent`` % of the rows (common
    practice; Kuhn M, Johnson K. Applied Predictive Modeling. Springer 2013, sec. 3.5).
    """

    _name = "near-zero variance"

    def __init__(self, freq_ratio: float = 95 / 5, unique_percent: float = 10.0, min_sd: float = 1e-10):
        self.freq_ratio = freq_ratio
        self.unique_percent = unique_percent
        self.min_sd = min_sd

    def fit(self, X, y=None) -> NearZeroVarianceFilter:
        A, names = _as_matrix(X, "NearZeroVarianceFilter.fit")
        n, p = A.shape
        sd = A.std(axis=0)
        S = np.sort(A, axis=0)
        new_run = np.vstack([np.ones((1, p), bool), S[1:] != S[:-1]])
        n_unique = new_run.sum(axis=0)
        # Run lengths of equal values, all columns at once: every column starts with a
        # new run, so a run ends where the next one (in any column) starts.
        pos = np.flatnonzero(new_run.T.ravel())
        col = pos // n
        lengths = np.append(pos[1:], n * p) - pos
        order = np.lexsort((-lengths, col))
        first_idx = np.searchsorted(col[order], np.arange(p))
        top = lengths[order][first_idx].astype(float)
        second = np.zeros(p)
        has2 = n_unique > 1
        second[has2] = lengths[order][first_idx[has2] + 1]
        with np.errstate(divide="ignore"):
            ratio = np.where(second > 0, top / np.maximum(second, 1), np.inf)
        pct_unique = 100.0 * n_unique / n
        const = sd <= self.min_sd
        nzv = (ratio > self.freq_ratio) & (pct_unique < self.unique_percent)
        keep = ~(const | nzv)
        self.freq_ratio_, self.percent_unique_ = ratio, pct_unique
        reasons = {
            j: ("constant in the training rows" if const[j] else
                f"near-zero variance (most/second most frequent value {ratio[j]:.0f}:1, "
                f"{pct_unique[j]:.1f}% distinct values)")
            for j in np.flatnonzero(~keep)}
        return self._finish(names, keep, reasons)


# ------------------------------------------------------- univariate Cox fits


@dataclass(frozen=True)
class UnivariateCoxResult:
    """One univariate Cox model per feature (Breslow ties).

    ``z`` is the score statistic ``U(0) / sqrt(I(0))`` for ``test="score"`` and the
    Wald statistic ``beta / se`` for ``test="wald"``; ``coef`` and ``se`` are NaN
    for the score test. ``converged`` flags Newton iterations that settled.
    """

    coef: np.ndarray
    se: np.ndarray
    z: np.ndarray
    p_value: np.ndarray
    test: str
    converged: np.ndarray


def _risk_moments(Xs, beta, first):
    """Score and information of every univariate model at ``beta`` (rows time-sorted)."""
    lin = Xs * beta
    lin -= lin.max(axis=0)
    w = np.exp(lin)
    s0 = np.cumsum(w[::-1], axis=0)[::-1][first]
    s1 = np.cumsum((w * Xs)[::-1], axis=0)[::-1][first]
    s2 = np.cumsum((w * Xs * Xs)[::-1], axis=0)[::-1][first]
    m1 = s1 / s0
    return m1, s2 / s0 - m1 * m1


def univariate_cox(X, y, *, test: str = "score", max_iter: int = 30, tol: float = 1e-9) -> UnivariateCoxResult:
    """Fit a univariate Cox model for every column of ``X`` at once.

    Parameters
    ----------
    X : array-like of shape (n_samples, n_features)
    y : outcome array
    test : {"score", "wald"}
        ``"score"`` needs no iteration (statistics at beta = 0); ``"wald"`` runs
        Newton-Raphson on all features simultaneously (O(n p) per step).

    Returns
    -------
    UnivariateCoxResult

    References
    ----------
    .. [1] Cox DR. Regression models and life-tables. J R Stat Soc B 1972;34:187-220.
    .. [2] Breslow NE. Covariance analysis of censored survival data. Biometrics 1974;30:89-99.
    """
    if test not in ("score", "wald"):
        raise ModelError(f"univariate Cox test {test!r} is unknown; choose 'score' or 'wald'.")
    A, _ = _as_matrix(X, "univariate_cox")
    time, event = split_outcome(y)
    order = np.argsort(time, kind="mergesort")
    ts, ev = time[order], event[order]
    Xs = A[order] - A.mean(axis=0)  # the partial likelihood ignores shifts; centring helps precision
    first = np.searchsorted(ts, ts, side="left")[ev]
    Xe = Xs[ev]
    beta = np.zeros(A.shape[1])
    converged = np.ones(A.shape[1], bool)
    m1, var = _risk_moments(Xs, beta, first)
    U, info = (Xe - m1).sum(axis=0), var.sum(axis=0)
    if test == "score":
        with np.errstate(invalid="ignore", divide="ignore"):
            z = np.where(info > 0, U / np.sqrt(info), 0.0)
        nan = np.full(A.shape[1], np.nan)
        return UnivariateCoxResult(nan, nan, z, 2 * stats.norm.sf(np.abs(z)), test, converged)
    active = info > 0
    converged[:] = False
    for _ in range(max_iter):
        with np.errstate(invalid="ignore", divide="ignore"):
            step = np.where(active, U / np.where(info > 0, info, 1.0), 0.0)
        step = np.clip(step, -5.0, 5.0)  # keeps a monotone-likelihood feature from overflowing
        beta = beta + step
        m1, var = _risk_moments(Xs, beta, first)
        U, info = (Xe - m1).sum(axis=0), var.sum(axis=0)
        done = np.abs(step) < tol * (1 + np.abs(beta))
        converged |= done
        active &= ~done
        if not active.any():
            break
    with np.errstate(invalid="ignore", divide="ignore"):
        se = np.where(info > 0, 1.0 / np.sqrt(info), np.inf)
        z = np.where(np.isfinite(se), beta / se, 0.0)
    return UnivariateCoxResult(beta, se, z, 2 * stats.norm.sf(np.abs(z)), test, converged)


def benjamini_hochberg(p_values) -> np.ndarray:
    """Benjamini-Hochberg adjusted p-values (q-values).

    References
    ----------
    .. [1] Benjamini Y, Hochberg Y. Controlling the false discovery rate: a practical and
           powerful approach to multiple testing. J R Stat Soc B 1995;57:289-300.
    """
    p = np.asarray(p_values, dtype=float)
    m = p.size
    if m == 0:
        return p.copy()
    order = np.argsort(p)
    scaled = p[order] * m / np.arange(1, m + 1)
    q = np.minimum.accumulate(scaled[::-1])[::-1]
    out = np.empty(m)
    out[order] = np.minimum(q, 1.0)
    return out


# ------------------------------------------------------------ supervised steps


class RedundancyFilter(_Step):
    """Among features correlated above ``threshold``, keep the most representative one.

    The choice is unsupervised, so the filter can run outside the inner
    cross-validation that chooses the penalty without leaking outcome
    information into it. Features are visited in decreasing order of
    *representativeness*: the sum of their squared Pearson correlations with all
    other features in the training rows (the feature that stands in best for the
    others; ties keep the table's column order). A visited feature that is still
    available is kept, and every available feature whose ``|r|`` with it exceeds
    ``threshold`` is dropped. The outcome is not used (``y`` is accepted and
    ignored): shuffling the outcomes leaves the kept features unchanged.

    Keeping the member most associated with the outcome, as is sometimes done,
    makes the filter a supervised step fitted on all training rows before the
    penalty is chosen by cross-validation, which pushes the chosen penalty down.

    Parameters
    ----------
    threshold : float, default 0.90
        |r| above which two features count as redundant (common practice).

    Attributes
    ----------
    representativeness_ : ndarray of shape (n_features,)
        Sum of squared correlations with the other features.
    """

    _name = "redundancy"

    def __init__(self, threshold: float = 0.90):
        self.threshold = threshold

    def fit(self, X, y=None) -> RedundancyFilter:
        A, names = _as_matrix(X, "RedundancyFilter.fit")
        Z = A - A.mean(axis=0)
        sd = np.sqrt((Z * Z).sum(axis=0))
        Z = Z / np.where(sd > 0, sd, 1.0)
        R = np.abs(Z.T @ Z)
        np.fill_diagonal(R, 0.0)
        rep = (R * R).sum(axis=0)
        # rounding keeps the order stable against last-digit BLAS differences between machines
        order = np.argsort(-np.round(rep, 10), kind="stable")
        available = np.ones(A.shape[1], bool)
        keep = np.zeros(A.shape[1], bool)
        reasons = {}
        for j in order:
            if not available[j]:
                continue
            keep[j] = True
            available[j] = False
            hit = np.flatnonzero(available & (R[j] > self.threshold))
            available[hit] = False
            for h in hit:
                reasons[h] = (f"|r| = {R[j, h]:.2f} with {names[j]}, which represents the other features "
                              f"better (sum of r^2 {rep[j]:.1f} vs {rep[h]:.1f})")
        self.representativeness_ = rep
        return self._finish(names, keep, reasons)


class CoxScreen(_Step):
    """Keep features whose univariate Cox test passes a false discovery rate.

    Parameters
    ----------
    fdr : float, default 0.10
        Benjamini-Hochberg level; features with q-value above it are dropped.
    test : {"score", "wald"}
    min_keep : int, default 0
        Keep at least this many features (smallest p-values) even if none pass;
        0 lets a noise-only cohort end with an empty signature.
    """

    _name = "univariate Cox screen"

    def __init__(self, fdr: float = 0.10, test: str = "score", min_keep: int = 0):
        self.fdr = fdr
        self.test = test
        self.min_keep = min_keep

    def fit(self, X, y, groups=None) -> CoxScreen:
        """Screen on the training rows, each original patient counted once.

        ``groups`` are the original patient ids. In a bootstrap sample a patient's
        copies are identical rows; treating them as independent patients inflates
        every test statistic (many more features pass the FDR). With ``groups``
        the tests use one row per patient (the copies carry no new information).
        """
        A, names = _as_matrix(X, "CoxScreen.fit")
        y_ = y
        if groups is not None:
            g = np.asarray(groups)
            if g.shape[0] != A.shape[0]:
                raise CohortError(f"CoxScreen.fit: {g.shape[0]} patient ids for {A.shape[0]} rows.")
            _, first = np.unique(g, return_index=True)
            first = np.sort(first)
            A, y_ = A[first], y[first]
        res = univariate_cox(A, y_, test=self.test)
        q = benjamini_hochberg(res.p_value)
        keep = q <= self.fdr
        if keep.sum() < self.min_keep:
            keep[np.argsort(res.p_value, kind="stable")[: self.min_keep]] = True
        self.z_, self.p_value_, self.q_value_ = res.z, res.p_value, q
        reasons = {j: f"univariate Cox q = {q[j]:.3f} > FDR {self.fdr}" for j in np.flatnonzero(~keep)}
        return self._finish(names, keep, reasons)
