"""Calibration of predicted survival at a horizon ``t0``.

Predicted risk is ``1 - S(t0 | x)`` read from :class:`SurvivalCurves`. Four views:

* grouped: patients in groups of predicted risk, Kaplan-Meier observed risk per group;
* smoothed: a Cox model of the outcome on a restricted cubic spline of the
  complementary log-log of predicted risk gives an observed risk for every
  patient (ICI, E50, E90, Emax and a calibration curve with a 95% band);
* calibration slope: a Cox model on the complementary log-log of predicted risk;
* observed / expected: Kaplan-Meier risk at ``t0`` over mean predicted risk.

Every estimate here depends on follow-up times only through their ordering and
through which times fall at or before ``t0``. Rescaling time (days to years)
together with the horizon therefore leaves every number unchanged: the baseline
hazard is the Breslow step function summed over event times up to ``t0``, never
evaluated on a grid or smoothed in time units, and the spline is placed on
predicted risks, not on times.

The result dataclasses are in ``calibration_results.py`` and the Cox model on the
spline of predicted risk in ``calibration_cox.py``.
"""

from __future__ import annotations

import numpy as np
from scipy.stats import norm

from workbench.cohort.outcome import split_outcome
from workbench.errors import MetricError
from workbench.metrics.brier import _check_single_horizon, _require_curves
from workbench.metrics.calibration_cox import (
    _cloglog,
    _fit_cox,
    _fit_cox_at_horizon,
    _rcs_basis,
    _rcs_knots,
)
from workbench.metrics.calibration_results import (
    CalibrationResult,
    CalibrationSlopeResult,
    GroupedCalibrationResult,
    ObservedExpectedResult,
    SmoothedCalibrationResult,
)
from workbench.predictions import SurvivalCurves
from workbench.stats.km import kaplan_meier, km_ci_at, survival_at


def _prepare(y, curves, t0, where, censor_at_horizon=False, spread_needed=False):
    curves = _require_curves(curves, where)
    time, event = split_outcome(y)
    if curves.n_samples != time.size:
        raise MetricError(
            f"{where}: {curves.n_samples} predicted curves but {time.size} outcomes; "
            "predictions and outcomes must describe the same patients in the same order."
        )
    t0 = _check_single_horizon(time, event, t0, where)
    if spread_needed and np.ptp(curves.risk_at(t0)) <= 0:
        raise MetricError(
            f"{where}: every patient has the same predicted risk at {t0:g}, so there is no "
            "spread of predictions to relate to outcomes. Use observed_expected for a "
            "single-value model, or check that the model's predictions depend on its predictors."
        )
    if censor_at_horizon:
        event = event & (time <= t0)
        time = np.minimum(time, t0)
    return curves, time, event, t0, curves.risk_at(t0)


# ---------------------------------------------------------------- functions


def grouped_calibration(
    y: np.ndarray,
    curves: SurvivalCurves,
    t0: float,
    *,
    n_groups: int = 5,
    cutpoints=None,
    conf_level: float = 0.95,
) -> GroupedCalibrationResult:
    """Observed (Kaplan-Meier) against mean predicted risk in groups of predicted risk.

    Parameters
    ----------
    y : structured array of shape (n,)
    curves : SurvivalCurves
    t0 : float
        Horizon in the time unit of ``y``.
    n_groups : int, default 5
        Number of groups cut at quantiles of predicted risk (ignored if
        ``cutpoints`` is given). Tied predictions stay together, so fewer groups
        can result.
    cutpoints : array-like, optional
        Increasing risk values in (0, 1) that separate the groups, e.g. ``[0.1, 0.2]``.
    conf_level : float, default 0.95

    Returns
    -------
    GroupedCalibrationResult

    References
    ----------
    .. [1] Kaplan EL, Meier P. J Am Stat Assoc 1958;53:457-81.
    .. [2] Royston P, Altman DG. External validation of a Cox prognostic model:
           principles and methods. BMC Med Res Methodol 2013;13:33.
    """
    _, time, event, t0, risk = _prepare(y, curves, t0, "grouped_calibration")
    if cutpoints is None:
        if int(n_groups) != n_groups or n_groups < 1:
            raise MetricError(f"grouped_calibration: n_groups must be a whole number of at least 1, got {n_groups!r}.")
        inner = np.unique(np.quantile(risk, np.linspace(0, 1, int(n_groups) + 1)[1:-1]))
    else:
        inner = np.atleast_1d(np.asarray(cutpoints, dtype=float))
        if np.any(np.diff(inner) <= 0) or np.any((inner <= 0) | (inner >= 1)):
            raise MetricError(
                "grouped_calibration: cutpoints must be increasing risks strictly between 0 and 1, "
                "for example [0.1, 0.2, 0.4]."
            )
    group = np.searchsorted(inner, risk, side="right")
    edges = np.r_[risk.min(), inner, risk.max()]
    n_all = np.bincount(group, minlength=inner.size + 1)
    used = np.flatnonzero(n_all > 0)
    obs = np.empty(used.size)
    lo = np.empty(used.size)
    hi = np.empty(used.size)
    for k, g in enumerate(used):  # a handful of groups, each vectorised
        m = group == g
        km = kaplan_meier(time[m], event[m], conf_level=conf_level)
        s = survival_at(km, t0)
        s_lo, s_hi = km_ci_at(km, t0)
        obs[k], lo[k], hi[k] = 1.0 - s, 1.0 - s_hi, 1.0 - s_lo
    events = np.bincount(group, weights=(event & (time <= t0)), minlength=inner.size + 1)
    mean_pred = np.bincount(group, weights=risk, minlength=inner.size + 1)[used] / n_all[used]
    return GroupedCalibrationResult(
        t0=t0,
        edges=edges,
        n=n_all[used],
        events=events[used].astype(int),
        mean_predicted=mean_pred,
        observed=obs,
        observed_lower=lo,
        observed_upper=hi,
        conf_level=conf_level,
    )


def smoothed_calibration(
    y: np.ndarray,
    curves: SurvivalCurves,
    t0: float,
    *,
    knots: int = 3,
    grid_size: int = 100,
    conf_level: float = 0.95,
    censor_at_horizon: bool = False,
) -> SmoothedCalibrationResult:
    """Smoothed calibration curve and the ICI, E50, E90 and Emax at ``t0``.

    A Cox model (Efron ties) of the outcome is fitted on a restricted cubic
    spline of ``x = log(-log(1 - risk))`` with ``knots`` knots at Harrell's
    default quantiles of ``x``. Each patient's observed risk is
    ``1 - exp(-H0(t0) exp(f(x)))`` with the Breslow baseline cumulative hazard
    ``H0``. The band on the curve is a pointwise delta-method interval on the
    log cumulative hazard, using the coefficient covariance and the variance
    of the Breslow estimator (Tsiatis 1981), back-transformed to risk.

    Parameters
    ----------
    y : structured array of shape (n,)
    curves : SurvivalCurves
    t0 : float
    knots : int, default 3
        Number of spline knots (3 to 7).
    grid_size : int, default 100
        Points of the calibration curve, evenly spaced between the smallest
        and largest predicted risk.
    conf_level : float, default 0.95
    censor_at_horizon : bool, default False
        If True, follow-up is cut at ``t0`` before fitting, so events after the
        horizon do not influence the spline. The published method (False)
        uses all follow-up.

    Returns
    -------
    SmoothedCalibrationResult

    References
    ----------
    .. [1] Austin PC, Harrell FE Jr, van Klaveren D. Graphical calibration curves
           and the integrated calibration index (ICI) for survival models.
           Stat Med 2020;39:2714-42.
    .. [2] Tsiatis AA. A large sample study of Cox's regression model. Ann Stat
           1981;9:93-108.
    """
    _, time, event, t0, risk = _prepare(
        y, curves, t0, "smoothed_calibration", censor_at_horizon, spread_needed=True
    )
    x = _cloglog(risk)
    knot_pos = _rcs_knots(x, knots)
    if knot_pos.size < 3:
        knot_pos = knot_pos[:0]  # too few distinct predictions for a spline: linear term only
    cox = _fit_cox_at_horizon(_rcs_basis(x, knot_pos), time, event, t0)
    observed = cox.risk(_rcs_basis(x, knot_pos))
    diff = np.abs(observed - risk)
    grid = np.linspace(risk.min(), risk.max(), int(grid_size))
    g_obs, g_lo, g_hi = cox.risk(_rcs_basis(_cloglog(grid), knot_pos), conf_level)
    return SmoothedCalibrationResult(
        t0=t0,
        ici=float(diff.mean()),
        e50=float(np.median(diff)),
        e90=float(np.quantile(diff, 0.9)),
        emax=float(diff.max()),
        knots=knot_pos,
        grid_predicted=grid,
        grid_observed=g_obs,
        grid_lower=g_lo,
        grid_upper=g_hi,
        conf_level=conf_level,
    )


def calibration_slope(
    y: np.ndarray,
    curves: SurvivalCurves,
    t0: float,
    *,
    conf_level: float = 0.95,
    censor_at_horizon: bool = True,
) -> CalibrationSlopeResult:
    """Horizon-specific calibration slope: Cox regression of the outcome up to ``t0``
    on ``log(-log S(t0|x))``.

    The covariate is the complementary log-log of predicted risk at ``t0``,
    i.e. the predicted log cumulative hazard at ``t0``; for a proportional
    hazards model this is the linear predictor plus a constant, so the slope
    equals the usual slope on the linear predictor, and it is also defined for
    models without one (e.g. forests). A slope of 1 is ideal; below 1 the
    predictions are too extreme (overfitting), above 1 too modest. The
    interval is a Wald interval from the Cox standard error.

    By default follow-up is censored at ``t0`` (the horizon-truncated fit), so the
    slope describes the predictions at that horizon: for a Cox model the covariate
    is the same at every horizon up to a constant, and a slope fitted on all
    follow-up would be one number for all horizons. For a correctly specified
    model the truncated slope is 1 in expectation at every horizon; when the
    effects change over time (non-proportional hazards) it differs between horizons.

    Parameters
    ----------
    y, curves, t0, conf_level
        As in :func:`smoothed_calibration`.
    censor_at_horizon : bool, default True
        Censor follow-up at ``t0`` (horizon-specific slope); False fits on all
        follow-up (for a Cox model's own training rows this is exactly 1).

    Returns
    -------
    CalibrationSlopeResult

    References
    ----------
    .. [1] Van Houwelingen HC. Validation, calibration, revision and combination
           of prognostic survival models. Stat Med 2000;19:3401-15.
    .. [2] Royston P, Altman DG. BMC Med Res Methodol 2013;13:33.
    """
    _, time, event, t0, risk = _prepare(
        y, curves, t0, "calibration_slope", censor_at_horizon, spread_needed=True
    )
    beta, cov = _fit_cox(_cloglog(risk)[:, None], time, event)
    slope, se = float(beta[0]), float(np.sqrt(cov[0, 0]))
    z = norm.ppf(0.5 + conf_level / 2.0)
    return CalibrationSlopeResult(
        t0=t0, slope=slope, std_err=se, ci_lower=slope - z * se, ci_upper=slope + z * se,
        conf_level=conf_level,
    )


def observed_expected(
    y: np.ndarray, curves: SurvivalCurves, t0: float, *, conf_level: float = 0.95
) -> ObservedExpectedResult:
    """Ratio of Kaplan-Meier observed risk at ``t0`` to mean predicted risk.

    The interval is ``exp(log(O/E) +- z se)`` with
    ``se = SE_Greenwood(S(t0)) / (1 - S(t0))`` by the delta method, treating the
    mean predicted risk as fixed.

    Parameters
    ----------
    y, curves, t0, conf_level
        As in :func:`smoothed_calibration`.

    Returns
    -------
    ObservedExpectedResult

    References
    ----------
    .. [1] Greenwood M. Reports on Public Health and Medical Subjects 1926;33:1-26.
    .. [2] Debray TPA, Damen JAAG, Snell KIE, et al. A guide to systematic
           review and meta-analysis of prediction model performance. BMJ
           2017;356:i6460.
    """
    _, time, event, t0, risk = _prepare(y, curves, t0, "observed_expected")
    km = kaplan_meier(time, event)
    j = np.searchsorted(km.times, t0, side="right") - 1
    s, se_s = float(km.survival[j]), float(km.std_err[j])
    observed, expected = 1.0 - s, float(risk.mean())
    if expected <= 0:
        raise MetricError("observed_expected: every predicted risk at the horizon is 0; the ratio is undefined.")
    ratio = observed / expected
    half = norm.ppf(0.5 + conf_level / 2.0) * se_s / observed
    return ObservedExpectedResult(
        t0=t0, observed=observed, expected=expected, ratio=ratio,
        ci_lower=ratio * np.exp(-half), ci_upper=ratio * np.exp(half), conf_level=conf_level,
    )


def calibration_at(
    y: np.ndarray,
    curves: SurvivalCurves,
    t0: float,
    *,
    n_groups: int = 5,
    cutpoints=None,
    knots: int = 3,
    conf_level: float = 0.95,
    censor_at_horizon: bool = False,
) -> CalibrationResult:
    """Grouped and smoothed calibration, calibration slope and O/E at ``t0``.

    See :func:`grouped_calibration`, :func:`smoothed_calibration`,
    :func:`calibration_slope` and :func:`observed_expected` for the methods
    and their references.
    """
    return CalibrationResult(
        t0=float(t0),
        grouped=grouped_calibration(y, curves, t0, n_groups=n_groups, cutpoints=cutpoints, conf_level=conf_level),
        smoothed=smoothed_calibration(
            y, curves, t0, knots=knots, conf_level=conf_level, censor_at_horizon=censor_at_horizon
        ),
        slope=calibration_slope(y, curves, t0, conf_level=conf_level),
        observed_expected=observed_expected(y, curves, t0, conf_level=conf_level),
        model=getattr(curves, "model", ""),
    )
