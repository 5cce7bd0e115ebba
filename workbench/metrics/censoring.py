"""Censoring weights for the evaluation rows, possibly depending on covariates.

The IPCW metrics (Brier score, IPA, Uno's C, cumulative/dynamic AUC) weight
each evaluation patient by the inverse probability of remaining uncensored.
:mod:`workbench.metrics._ipcw` estimates one covariate-free curve G(t). This
module gives each evaluation row its own G(t | x_i):

``"km"``
    one Kaplan-Meier curve of the censoring times of the evaluation rows;
``"km_by_centre"``
    a Kaplan-Meier curve per centre (or any stratum), for hospitals whose
    follow-up ends at different times;
``"cox"``
    a Cox model for the censoring hazard with the model's risk score and the
    centre indicators as covariates (Gerds & Schumacher 2006):
    G(t | x) = G0(t) ** exp(gamma'x).

``"auto"`` chooses ``"km_by_centre"`` when a stratum is given and the
log-rank test on the reversed censoring indicator (censoring as the event)
finds that censoring differs between strata (p < 0.05), and ``"km"``
otherwise. :func:`choose_censoring` returns the choice with the test so it can
be reported.

Weights are always estimated on the rows being evaluated, so an external
cohort (and every bootstrap resample of it) is weighted by its own follow-up.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from workbench.cohort.outcome import split_outcome
from workbench.errors import MetricError
from workbench.metrics._ipcw import fit_censoring

__all__ = ["CENSORING_METHODS", "CensoringChoice", "RowCensoring", "choose_censoring", "row_censoring"]

CENSORING_METHODS = ("auto", "km", "km_by_centre", "cox")
AUTO_ALPHA = 0.05


@dataclass(frozen=True)
class CensoringChoice:
    """Which censoring model was used and why.

    Attributes
    ----------
    method : {"km", "km_by_centre", "cox"}
    requested : str
        What the study asked for (``"auto"`` or a method).
    test : str
        Name of the test behind an ``"auto"`` choice ("" if none).
    statistic, df, p_value : float
        Log-rank test of the censoring distribution between strata (NaN if not run).
    reason : str
        One sentence for the report.
    """

    method: str
    requested: str
    test: str = ""
    statistic: float = float("nan")
    df: int = 0
    p_value: float = float("nan")
    reason: str = ""


def choose_censoring(y, strata=None, requested: str = "auto") -> CensoringChoice:
    """Resolve ``requested`` to a censoring method for outcome ``y``.

    The ``"auto"`` rule: with a stratum (centre) column and at least two
    strata, test whether the censoring distribution differs between strata by
    the log-rank test with censoring as the event (Mantel 1966); stratify the
    Kaplan-Meier weights when p < 0.05.
    """
    if requested not in CENSORING_METHODS:
        raise MetricError(
            f"unknown censoring method {requested!r}; choose one of {', '.join(CENSORING_METHODS)}."
        )
    if requested != "auto":
        if requested in ("km_by_centre",) and strata is None:
            raise MetricError(
                "censoring = 'km_by_centre' needs a centre column; give [data] centre = '...' or "
                "choose censoring = 'km'."
            )
        return CensoringChoice(requested, requested, reason="chosen in the study file")
    if strata is None or np.unique(np.asarray(strata)).size < 2:
        return CensoringChoice("km", "auto", reason="one centre: a single Kaplan-Meier curve of the censoring times")
    from workbench.stats.logrank import logrank_test

    time, event = split_outcome(y)
    res = logrank_test(time, ~event, np.asarray(strata).astype(str))
    stratify = bool(res.p_value < AUTO_ALPHA)
    method = "km_by_centre" if stratify else "km"
    reason = (
        f"censoring differs between centres (log-rank test of censoring times, chi2 = {res.statistic:.2f} "
        f"on {res.df} df, p = {res.p_value:.3g}): Kaplan-Meier weights stratified by centre"
        if stratify else
        f"no evidence that censoring differs between centres (log-rank test of censoring times, "
        f"chi2 = {res.statistic:.2f} on {res.df} df, p = {res.p_value:.3g}): one Kaplan-Meier curve"
    )
    return CensoringChoice(method, "auto", "log-rank test of the censoring times between centres",
                           float(res.statistic), int(res.df), float(res.p_value), reason)


@dataclass(frozen=True)
class RowCensoring:
    """G(t | x_i) for each evaluation row, as weights the IPCW metrics use.

    Attributes
    ----------
    method : str
    own_left : ndarray of shape (n,)
        G(T_i- | x_i), the probability of remaining uncensored just before the
        patient's own follow-up time.
    curve_times : ndarray of shape (m,)
        Times at which ``curve`` is stored.
    curve : ndarray of shape (n, m)
        G(t | x_i) at ``curve_times`` (right-continuous values).
    """

    method: str
    own_left: np.ndarray
    curve_times: np.ndarray
    curve: np.ndarray

    def at(self, times) -> np.ndarray:
        """G(t | x_i) (right-continuous) at ``times``: shape (n, k); raises where it is 0."""
        t = np.atleast_1d(np.asarray(times, dtype=float))
        idx = np.searchsorted(self.curve_times, t, side="right") - 1
        g = np.where(idx[None, :] >= 0, self.curve[:, np.maximum(idx, 0)], 1.0)
        _check_positive(g, t)
        return g

    def own(self, needed: np.ndarray) -> np.ndarray:
        """G(T_i- | x_i), 1 where not ``needed``; raises where a needed value is 0."""
        g = np.where(needed, self.own_left, 1.0)
        if np.any(g <= 0):
            raise MetricError(
                "the probability of remaining uncensored is 0 just before the follow-up time of "
                f"{int(np.sum(g <= 0))} evaluation patient(s) with an event (censoring model "
                f"{self.method!r}): inverse censoring weights are undefined. Choose earlier horizons "
                "or censoring = 'km'."
            )
        return g


def _check_positive(g: np.ndarray, t: np.ndarray) -> None:
    if np.any(g <= 0):
        first = float(t[np.flatnonzero((g <= 0).any(axis=0))[0]])
        raise MetricError(
            f"the probability of remaining uncensored has dropped to 0 at time {first:g} for some "
            "evaluation patients (in at least one centre every patient still followed was censored): "
            f"inverse censoring weights are undefined there. Choose a horizon earlier than {first:g}, "
            "or censoring = 'km' if the centre has too short a follow-up to be weighted alone."
        )


def _km_rows(y, rows: np.ndarray, times_grid: np.ndarray):
    cens = fit_censoring(y[rows])
    time, _ = split_outcome(y[rows])
    own = cens.survival_at(time, left_limit=True, check_positive=False)
    curve = cens.survival_at(times_grid, left_limit=False, check_positive=False)
    return own, curve


def row_censoring(y, method: str, *, strata=None, covariates=None) -> RowCensoring:
    """Censoring weights G(t | x_i) estimated on the evaluation rows ``y`` themselves.

    Parameters
    ----------
    y : structured ndarray
        Outcome of the evaluation rows.
    method : {"km", "km_by_centre", "cox"}
        Already resolved (see :func:`choose_censoring`).
    strata : array-like of shape (n,), optional
        Centre of each row (``km_by_centre``; indicator covariates for ``cox``).
    covariates : ndarray of shape (n, p), optional
        Further covariates of the censoring Cox model (e.g. the risk score).

    References
    ----------
    .. [1] Gerds TA, Schumacher M. Consistent estimation of the expected Brier
           score in general survival models with right-censored event times.
           Biom J 2006;48:1029-40.
    """
    time, event = split_outcome(y)
    n = time.size
    if n == 0:
        raise MetricError("no evaluation rows: censoring weights need patients.")
    grid = np.unique(time)
    if method == "km":
        own, curve = _km_rows(y, np.arange(n), grid)
        return RowCensoring("km", own, grid, np.broadcast_to(curve, (n, grid.size)))
    if method == "km_by_centre":
        if strata is None:
            raise MetricError("censoring 'km_by_centre' needs the centre of every evaluation row.")
        s = np.asarray(strata).astype(str)
        own, curve = np.empty(n), np.empty((n, grid.size))
        for lev in np.unique(s):
            rows = np.flatnonzero(s == lev)
            own[rows], c = _km_rows(y, rows, grid)
            curve[rows] = c[None, :]
        return RowCensoring("km_by_centre", own, grid, curve)
    if method == "cox":
        return _cox_rows(time, event, strata, covariates, grid)
    raise MetricError(f"unknown censoring method {method!r}; choose 'km', 'km_by_centre' or 'cox'.")


def _cox_rows(time, event, strata, covariates, grid) -> RowCensoring:
    from workbench.stats.coxph import baseline_survival_at, fit_coxph, linear_predictor

    cols = []
    if covariates is not None:
        c = np.asarray(covariates, dtype=float)
        cols.append(c.reshape(time.size, -1))
    if strata is not None:
        s = np.asarray(strata).astype(str)
        levels = np.unique(s)
        if levels.size > 1:
            cols.append((s[:, None] == levels[None, 1:]).astype(float))
    X = np.hstack(cols) if cols else np.zeros((time.size, 0))
    keep = np.ptp(X, axis=0) > 0 if X.shape[1] else np.zeros(0, dtype=bool)
    X = X[:, keep]
    fit = fit_coxph(X, time, ~event, ties="breslow", min_events_per_parameter=0.0)
    lp = np.exp(linear_predictor(fit, X)) if X.shape[1] else np.ones(time.size)
    g0 = baseline_survival_at(fit, grid)
    curve = g0[None, :] ** lp[:, None]
    before = np.nextafter(time, -np.inf)
    own = baseline_survival_at(fit, before) ** lp
    return RowCensoring("cox", own, grid, curve)
