"""The frozen results of the calibration measures at a horizon ``t0``.

:class:`GroupedCalibrationResult`, :class:`SmoothedCalibrationResult`,
:class:`CalibrationSlopeResult`, :class:`ObservedExpectedResult` and
:class:`CalibrationResult`, which holds all four views of one model at one horizon.
The functions that compute them are in :mod:`workbench.metrics.calibration`.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np


@dataclass(frozen=True)
class GroupedCalibrationResult:
    """Observed against predicted risk by group of predicted risk.

    Attributes
    ----------
    t0 : float
    edges : ndarray of shape (g + 1,)
        Predicted-risk boundaries of the groups (a patient on a boundary joins the upper group).
    n, events : ndarray of shape (g,)
        Patients per group and events observed by ``t0``.
    mean_predicted : ndarray of shape (g,)
    observed, observed_lower, observed_upper : ndarray of shape (g,)
        Kaplan-Meier risk ``1 - S(t0)`` per group with its pointwise confidence interval
        (log(-log) interval for survival, turned into risk).
    conf_level : float
    """

    t0: float
    edges: np.ndarray
    n: np.ndarray
    events: np.ndarray
    mean_predicted: np.ndarray
    observed: np.ndarray
    observed_lower: np.ndarray
    observed_upper: np.ndarray
    conf_level: float = 0.95


@dataclass(frozen=True)
class SmoothedCalibrationResult:
    """Smoothed calibration at ``t0`` (Austin, Harrell & van Klaveren).

    Attributes
    ----------
    t0 : float
    ici : float
        Integrated calibration index: mean over patients of |observed - predicted| risk.
    e50, e90, emax : float
        Median, 90th percentile and maximum of the same absolute differences.
    knots : ndarray
        Spline knots on the complementary log-log scale of predicted risk.
    grid_predicted, grid_observed, grid_lower, grid_upper : ndarray of shape (m,)
        Calibration curve: observed risk with a pointwise confidence band at a
        grid of predicted risks spanning the observed range.
    conf_level : float
    """

    t0: float
    ici: float
    e50: float
    e90: float
    emax: float
    knots: np.ndarray
    grid_predicted: np.ndarray
    grid_observed: np.ndarray
    grid_lower: np.ndarray
    grid_upper: np.ndarray
    conf_level: float = 0.95


@dataclass(frozen=True)
class CalibrationSlopeResult:
    """Calibration slope at ``t0`` (1 is ideal; below 1 means predictions too extreme)."""

    t0: float
    slope: float
    std_err: float
    ci_lower: float
    ci_upper: float
    conf_level: float = 0.95


@dataclass(frozen=True)
class ObservedExpectedResult:
    """Kaplan-Meier observed risk at ``t0`` over mean predicted risk (1 is ideal)."""

    t0: float
    observed: float
    expected: float
    ratio: float
    ci_lower: float
    ci_upper: float
    conf_level: float = 0.95


@dataclass(frozen=True)
class CalibrationResult:
    """All calibration views of one model at one horizon."""

    t0: float
    grouped: GroupedCalibrationResult
    smoothed: SmoothedCalibrationResult
    slope: CalibrationSlopeResult
    observed_expected: ObservedExpectedResult
    model: str = ""
