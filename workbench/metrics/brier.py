"""Brier score and index of prediction accuracy for survival curves.

The Brier score at time ``t`` is the mean squared difference between the
predicted probability of being event-free at ``t`` and the observed status.
Patients censored before ``t`` have no observed status; inverse probability of
censoring weighting (IPCW) reweights the others so that the estimate stays
unbiased when censoring does not depend on the patient's covariates. The
censoring distribution is learned on the training rows only.

This module also holds the small input checks that every horizon-based metric
in :mod:`workbench.metrics` shares.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass

import numpy as np

from workbench.cohort.outcome import split_outcome
from workbench.errors import FollowUpWarning, MetricError
from workbench.metrics._ipcw import fit_censoring
from workbench.predictions import RiskScores, SurvivalCurves
from workbench.stats.km import kaplan_meier, survival_at

_MIN_BEYOND = 10  # common practice: fewer patients than this still followed makes a horizon fragile


def _require_curves(curves, where: str) -> SurvivalCurves:
    if isinstance(curves, SurvivalCurves):
        return curves
    found = "risk scores" if isinstance(curves, RiskScores) else type(curves).__name__
    raise MetricError(
        f"{where} needs predicted survival probabilities (workbench.predictions.SurvivalCurves), "
        f"but was given {found}. A risk score only ranks patients and carries no probability, "
        "so it cannot be scored for accuracy or calibration; ask the model for survival curves "
        "instead."
    )


def _check_single_horizon(time: np.ndarray, event: np.ndarray, t0, where: str) -> float:
    try:
        t0 = float(t0)
    except (TypeError, ValueError):
        raise MetricError(f"{where}: the horizon must be a single number, got {t0!r}.") from None
    t_max = float(time.max())
    if not np.isfinite(t0) or t0 <= 0 or t0 >= t_max:
        raise MetricError(
            f"{where}: the horizon {t0:g} lies outside the follow-up of these patients "
            f"(longest follow-up {t_max:g}, in the same time unit). Choose a horizon greater "
            "than 0 and shorter than the longest follow-up, ideally well inside it."
        )
    if not np.any(event & (time <= t0)):
        raise MetricError(
            f"{where}: no patient had an event by the horizon {t0:g}, so observed risks are all "
            "zero and the metric is undefined. Choose a later horizon."
        )
    n_beyond = int(np.sum(time > t0))
    if n_beyond < _MIN_BEYOND:
        warnings.warn(
            f"{where}: only {n_beyond} patients are still followed beyond the horizon {t0:g}; "
            "estimates at this horizon are unstable. Consider an earlier horizon.",
            FollowUpWarning,
            stacklevel=3,
        )
    return t0


def _check_horizons(time: np.ndarray, times, where: str) -> np.ndarray:
    t = np.atleast_1d(np.asarray(times, dtype=float))
    if t.ndim != 1 or t.size == 0 or not np.all(np.isfinite(t)):
        raise MetricError(f"{where}: times must be a non-empty list of finite numbers.")
    if t.size > 1 and np.any(np.diff(t) <= 0):
        raise MetricError(f"{where}: times must be strictly increasing, without repeats.")
    lo, hi = float(time.min()), float(time.max())
    if t[0] < lo or t[-1] >= hi:
        raise MetricError(
            f"{where}: every evaluation time must lie inside the follow-up of the evaluation "
            f"patients, from {lo:g} up to (not including) {hi:g}; got {t[0]:g} to {t[-1]:g}. "
            "Drop or move the times outside that range."
        )
    return t


def _curves_at(curves: SurvivalCurves, times: np.ndarray, where: str) -> np.ndarray:
    j = np.searchsorted(curves.times, times, side="right") - 1
    if np.any(j < 0):
        raise MetricError(
            f"{where}: time {times[j < 0][0]:g} comes before the first time of the predicted "
            f"survival curves ({curves.times[0]:g}); predict the curves on a grid that starts "
            "earlier."
        )
    return curves.probs[:, j]


@dataclass(frozen=True)
class BrierResult:
    """Time-dependent Brier score.

    Attributes
    ----------
    times : ndarray of shape (k,)
    brier : ndarray of shape (k,)
        IPCW Brier score of the model (0 is perfect).
    null_brier : ndarray of shape (k,)
        Brier score of the Kaplan-Meier curve of the training rows, the same for everyone.
    ipa : ndarray of shape (k,)
        Index of prediction accuracy ``1 - brier / null_brier`` (1 perfect, 0 no better
        than the null model, negative worse).
    model : str
    """

    times: np.ndarray
    brier: np.ndarray
    null_brier: np.ndarray
    ipa: np.ndarray
    model: str = ""


@dataclass(frozen=True)
class IntegratedBrierResult:
    """Brier score averaged over a time range.

    Attributes
    ----------
    ibs, null_ibs : float
        Integrated Brier score of the model and of the training Kaplan-Meier null model.
    ipa : float
        ``1 - ibs / null_ibs``.
    t_min, t_max : float
        Integration range.
    model : str
    """

    ibs: float
    null_ibs: float
    ipa: float
    t_min: float
    t_max: float
    model: str = ""


def brier_score(
    y_train: np.ndarray, y_test: np.ndarray, curves: SurvivalCurves, times, *, censoring=None
) -> BrierResult:
    """IPCW Brier score of predicted survival curves at given times.

    .. math::

        BS(t) = \\frac{1}{n}\\sum_i \\left[\\frac{\\hat S(t|x_i)^2\\, I(T_i \\le t, \\delta_i = 1)}
        {\\hat G(T_i-)} + \\frac{(1 - \\hat S(t|x_i))^2\\, I(T_i > t)}{\\hat G(t)}\\right]

    where :math:`\\hat G` is the Kaplan-Meier estimate of the censoring
    distribution on the training rows. Events use the left limit
    :math:`\\hat G(T_i-)` (the probability of still being uncensored just
    before the event); this differs from :math:`\\hat G(T_i)` only where a
    training patient was censored at exactly an event time.

    Parameters
    ----------
    y_train : structured array
        Outcome of the training rows (for the censoring distribution and the null model).
    y_test : structured array of shape (n,)
        Outcome of the evaluation rows.
    curves : SurvivalCurves
        Predicted survival of the evaluation rows; looked up at ``times`` as a step function.
    times : array-like of shape (k,)
        Strictly increasing times inside the follow-up range of ``y_test``.
    censoring : RowCensoring, optional
        Per-row censoring weights G(t | x_i) of the evaluation rows
        (:func:`workbench.metrics.censoring.row_censoring`); replaces the
        Kaplan-Meier curve of ``y_train`` (which still gives the null model).

    Returns
    -------
    BrierResult

    References
    ----------
    .. [1] Graf E, Schmoor C, Sauerbrei W, Schumacher M. Assessment and comparison
           of prognostic classification schemes for survival data. Stat Med
           1999;18:2529-45.
    .. [2] Gerds TA, Schumacher M. Consistent estimation of the expected Brier
           score in general survival models with right-censored event times.
           Biom J 2006;48:1029-40.
    .. [3] Kattan MW, Gerds TA. The index of prediction accuracy: an intuitive
           measure useful for evaluating risk prediction models. Diagn Progn Res
           2018;2:7.
    """
    where = "brier_score"
    curves = _require_curves(curves, where)
    time, event = split_outcome(y_test)
    if curves.n_samples != time.size:
        raise MetricError(
            f"{where}: {curves.n_samples} predicted curves but {time.size} evaluation outcomes; "
            "predictions and outcomes must describe the same patients in the same order."
        )
    times = _check_horizons(time, times, where)
    surv = _curves_at(curves, times, where)

    # Only events up to the last horizon carry a weight; asking G elsewhere could
    # wrongly fail where G has dropped to zero after the horizons.
    needed = event & (time <= times[-1])
    if censoring is None:
        cens = fit_censoring(y_train)
        g_t = np.asarray(cens.survival_at(times, left_limit=False), dtype=float)[None, :]
        g_y = np.ones_like(time)
        if np.any(needed):
            g_y[needed] = cens.survival_at(time[needed], left_limit=True)
    else:
        g_t = censoring.at(times)
        g_y = censoring.own(needed)
    case_w = np.where((time[:, None] <= times[None, :]) & needed[:, None], 1.0 / g_y[:, None], 0.0)
    ctrl_w = (time[:, None] > times[None, :]) / g_t

    n = time.size
    brier = np.mean(surv**2 * case_w + (1.0 - surv) ** 2 * ctrl_w, axis=0)
    t_tr, e_tr = split_outcome(y_train)
    s_null = np.asarray(survival_at(kaplan_meier(t_tr, e_tr), times), dtype=float)
    null = (s_null**2 * case_w.sum(axis=0) + (1.0 - s_null) ** 2 * ctrl_w.sum(axis=0)) / n
    with np.errstate(divide="ignore", invalid="ignore"):
        ipa = np.where(null > 0, 1.0 - brier / null, np.nan)
    return BrierResult(times=times, brier=brier, null_brier=null, ipa=ipa, model=curves.model)


def integrated_brier_score(
    y_train: np.ndarray, y_test: np.ndarray, curves: SurvivalCurves, times
) -> IntegratedBrierResult:
    """Integrated Brier score over ``[times[0], times[-1]]``.

    The IPCW Brier score (see :func:`brier_score`) is integrated with the
    trapezoidal rule over the given times and divided by the length of the
    range, as scikit-survival does; the same is done for the Kaplan-Meier null
    model, and the integrated IPA is ``1 - ibs / null_ibs``.

    Parameters
    ----------
    y_train, y_test, curves
        As in :func:`brier_score`.
    times : array-like of shape (k,), k >= 2
        Integration grid; a fine grid (for example every distinct event time in
        the range) approximates the integral better.

    Returns
    -------
    IntegratedBrierResult

    References
    ----------
    .. [1] Graf E, Schmoor C, Sauerbrei W, Schumacher M. Stat Med 1999;18:2529-45.
    .. [2] Kattan MW, Gerds TA. Diagn Progn Res 2018;2:7.
    """
    times = np.atleast_1d(np.asarray(times, dtype=float))
    if times.size < 2:
        raise MetricError(
            "integrated_brier_score: at least two times are needed to integrate over; "
            "give a grid such as every event time between the first and last horizon."
        )
    res = brier_score(y_train, y_test, curves, times)
    span = times[-1] - times[0]
    ibs = float(np.trapezoid(res.brier, times) / span)
    null_ibs = float(np.trapezoid(res.null_brier, times) / span)
    ipa = 1.0 - ibs / null_ibs if null_ibs > 0 else float("nan")
    return IntegratedBrierResult(
        ibs=ibs, null_ibs=null_ibs, ipa=ipa, t_min=float(times[0]), t_max=float(times[-1]),
        model=curves.model,
    )
