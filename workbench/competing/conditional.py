"""Conditional survival: the chance of surviving to t for a patient already alive at s.

S(t | s) = S(t) / S(s) for t >= s. Three routes:

* :func:`conditional_survival_cox`: a patient's Cox prediction with a
  delta-method interval on the log cumulative hazard of the interval (s, t];
* :func:`conditional_survival_km`: the Kaplan-Meier estimate in each risk group
  (or the whole cohort) with Greenwood's variance over (s, t];
* :func:`conditional_from_curves`: the ratio for any model's survival curves
  (no interval: the curves carry none).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from workbench.errors import MetricError
from workbench.predictions import SurvivalCurves
from workbench.stats.coxph import CoxPHFit, _cumhaz_at, _design_for, log_cumhaz_se
from workbench.stats.km import kaplan_meier, loglog_limits

__all__ = [
    "ConditionalSurvival",
    "conditional_from_curves",
    "conditional_survival_cox",
    "conditional_survival_km",
    "refit_ratio_limits",
]


@dataclass(frozen=True)
class ConditionalSurvival:
    """S(t | alive at s) with pointwise limits.

    Attributes
    ----------
    since : float
        The landmark s.
    times : ndarray of shape (n_times,)
        Times t >= s.
    survival, lower, upper : ndarray of shape (n_rows, n_times)
        One row per patient (Cox, curves) or per group (Kaplan-Meier); limits
        are NaN where no interval is available.
    labels : tuple
        Group labels (Kaplan-Meier route), else empty.
    conf_level : float
    """

    since: float
    times: np.ndarray
    survival: np.ndarray
    lower: np.ndarray
    upper: np.ndarray
    labels: tuple = ()
    conf_level: float = 0.95


def _check(times, since: float) -> np.ndarray:
    t = np.atleast_1d(np.asarray(times, dtype=float))
    s = float(since)
    if not np.isfinite(s) or s < 0 or t.ndim != 1 or not np.all(np.isfinite(t)):
        raise MetricError("the landmark and the times must be finite, non-negative numbers.")
    if np.any(t < s):
        raise MetricError(
            f"conditional survival looks forward from the landmark {s:g}; every time must be at or "
            f"after it, got {t.min():g}."
        )
    return t


def refit_ratio_limits(draws, conf_level: float) -> tuple[np.ndarray, np.ndarray]:
    r"""Percentile limits of conditional survival over refitted models.

    ``draws`` holds, for each of B models refitted on bootstrap samples, the survival at
    the landmark s (first column) and at the later times: the limits are the
    percentiles of :math:`S_b(t) / S_b(s)` (Efron & Tibshirani 1993, chapter 13), which
    carry every fitted step's uncertainty. Measured in bench/bench_competing.py (study 3).
    """
    draws = np.asarray(draws, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        ratios = draws[:, 1:] / draws[:, :1]
    a = 100 * (1 - conf_level) / 2
    lo, hi = np.nanpercentile(ratios, [a, 100 - a], axis=0)
    return lo, hi


def conditional_survival_cox(fit: CoxPHFit, X, times, since: float, *, conf_level: float = 0.95) -> ConditionalSurvival:
    r"""A patient's conditional survival from a Cox model, with a delta-method interval.

    :math:`S(t \mid s, x) = \exp\{-e^{\eta(x)} [H_0(t) - H_0(s)]\}`. The variance of
    :math:`\log \Delta H(x) = \eta(x) + \log \Delta H_0` is approximated as in
    :func:`workbench.stats.coxph.predict_survival_with_ci`, with every
    cumulative quantity taken over (s, t]:
    :math:`\Delta V_0 / \Delta H_0^2 + (x - \bar q)^\top \Sigma (x - \bar q)`,
    :math:`\bar q = \Delta Q / \Delta H_0`. Limits
    :math:`S^{\exp(\pm z\,se)}` (symmetric for log(-log S)) stay in [0, 1];
    at t = s the estimate and both limits are 1.

    References
    ----------
    Tsiatis AA. Ann Stat 1981;9:93-108. Link CL. Biometrics 1984;40:601-9.
    Zabor EC, Gonen M, Chapman PB, Panageas KS. Dynamic prognostication using
    conditional survival estimates. Cancer 2013;119:3589-92.
    """
    t = _check(times, since)
    xc = _design_for(fit, X) - fit.x_mean
    lp = xc @ fit.coef
    at_s = [float(since)]
    dH = _cumhaz_at(fit, t, fit.baseline_cumhaz) - _cumhaz_at(fit, at_s, fit.baseline_cumhaz)
    dV = _cumhaz_at(fit, t, fit.baseline_var) - _cumhaz_at(fit, at_s, fit.baseline_var)
    dQ = _cumhaz_at(fit, t, fit.baseline_xbar) - _cumhaz_at(fit, at_s, fit.baseline_xbar)
    se = log_cumhaz_se(fit, xc, dH, dV, dQ)
    surv = np.exp(-np.exp(lp)[:, None] * dH[None, :])
    lo, hi = loglog_limits(surv, se, conf_level)
    return ConditionalSurvival(float(since), t, surv, lo, hi, (), float(conf_level))


def conditional_survival_km(time, event, times, since: float, *, groups=None, conf_level: float = 0.95) -> ConditionalSurvival:
    r"""Kaplan-Meier conditional survival per risk group with Greenwood log(-log) limits.

    :math:`\hat S(t \mid s) = \prod_{s < t_j \le t} (1 - d_j / n_j)`, with
    :math:`\widehat{Var} \log \hat S(t \mid s) = \sum_{s < t_j \le t} d_j / (n_j (n_j - d_j))`
    (Greenwood over the interval) and the log(-log) interval of
    :func:`workbench.stats.km.kaplan_meier`. Equals KM(t) / KM(s).

    Parameters
    ----------
    time, event : array-like of shape (n_samples,)
    times : array-like
        Times t >= ``since``.
    since : float
    groups : array-like of shape (n_samples,), optional
        Risk-group label of each patient (e.g. from
        :mod:`workbench.stats.riskgroups`); one row per group in sorted order.
    conf_level : float
    """
    t = _check(times, since)
    time = np.asarray(time, dtype=float).ravel()
    event = np.asarray(event).astype(bool).ravel()
    g = np.zeros(time.size, dtype=int) if groups is None else np.asarray(groups).ravel()
    if g.size != time.size:
        raise MetricError(f"got {g.size} group labels for {time.size} patients; give one per patient.")
    labels = tuple(np.unique(g).tolist())
    rows_s, rows_se = [], []
    for lab in labels:
        m = g == lab
        km = kaplan_meier(time[m], event[m], conf_level=conf_level)
        # A risk set that empties with events (d = n) sends S to 0: log S = -inf and
        # Greenwood's term is infinite from there on; S(t | s) is then 0 (or undefined,
        # NaN, for a landmark s at which no one in the group is left).
        with np.errstate(divide="ignore", invalid="ignore"):
            n, d = km.at_risk, km.events
            term = np.where(d > 0, d / (n * (n - d)), 0.0)
            cum = np.r_[0.0, np.cumsum(term)]
            logs = np.r_[0.0, np.cumsum(np.log1p(-np.where(n > 0, d / n, 0.0)))]
            j_t = np.searchsorted(km.times, t, side="right")
            j_s = int(np.searchsorted(km.times, float(since), side="right"))
            rows_s.append(np.exp(logs[j_t] - logs[j_s]))
            # 0/0 where S(t | s) = 1: no interval is needed there (the limits are 1).
            rows_se.append(np.sqrt(cum[j_t] - cum[j_s]) / np.abs(logs[j_t] - logs[j_s]))
    surv = np.vstack(rows_s)
    se = np.vstack(rows_se)
    lo, hi = loglog_limits(surv, se, conf_level)
    return ConditionalSurvival(float(since), t, surv, lo, hi, () if groups is None else labels, float(conf_level))


def conditional_from_curves(curves: SurvivalCurves, since: float, times=None, *, groups=None) -> ConditionalSurvival:
    """S(t) / S(s) of any model's survival curves (step lookup); no interval.

    With ``groups`` (one label per patient) each row is a risk group's
    model-based conditional survival, mean_i S_i(t) / mean_i S_i(s): the
    survival to t of the group's patients still alive at s, as the model sees
    them. Raises where S(s) = 0 (no one is alive at s to condition on).
    """
    t = _check(curves.times[curves.times >= since] if times is None else times, since)
    s_since = curves.at(float(since))
    labels: tuple = ()
    s_t = np.column_stack([curves.at(x) for x in t]) if t.size else np.zeros((curves.n_samples, 0))
    if groups is not None:
        g = np.asarray(groups).ravel()
        if g.size != curves.n_samples:
            raise MetricError(f"got {g.size} group labels for {curves.n_samples} patients; give one per patient.")
        labels = tuple(np.unique(g).tolist())
        s_since = np.array([s_since[g == lab].mean() for lab in labels])
        s_t = np.vstack([s_t[g == lab].mean(axis=0) for lab in labels])
    if np.any(s_since <= 0):
        raise MetricError(f"predicted survival at the landmark {since:g} is 0 for some patients; nothing to condition on.")
    surv = s_t / s_since[:, None]
    surv[:, t == float(since)] = 1.0  # exactly, whatever the order of summation of the means
    nan = np.full_like(surv, np.nan)
    return ConditionalSurvival(float(since), t, surv, nan, nan.copy(), labels)
