"""What a validation measures, and on which horizons.

The named scalar metrics of one model (:class:`ModelPerformance`) and of a model against
its baseline (:class:`PairPerformance`), their names in order, and the horizon checks and
time grids every evaluation uses. The measuring itself is in
:mod:`workbench.validation.evaluate`.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from workbench.cohort.outcome import split_outcome
from workbench.errors import MetricError
from workbench.units import time_phrase

__all__ = [
    "DEFAULT_THRESHOLDS",
    "ModelPerformance",
    "PairPerformance",
    "check_horizons",
    "ibs_grid",
    "metric_names",
    "pair_metric_names",
    "prediction_times",
]

DEFAULT_THRESHOLDS = np.round(np.arange(1, 100) / 100.0, 2)
"""Threshold probabilities of the decision curves: 0.01 to 0.99."""

_HORIZON_METRICS = ("auc", "brier", "ipa", "ici", "e50", "e90", "cal_slope", "oe_ratio")
_GLOBAL_METRICS = ("harrell_c", "uno_c", "mean_auc", "ibs", "null_ibs", "ipa_integrated")
_PAIR_METRICS = ("nri", "nri_events", "nri_nonevents", "idi", "idi_events", "idi_nonevents")
_ON_ERROR = ("raise", "nan")


def _h(h: float) -> str:
    return f"{float(h):g}"


def metric_names(horizons) -> tuple[str, ...]:
    """Names of the scalar metrics of :meth:`ModelPerformance.scalars`, in order.

    Global metrics first (``harrell_c``, ``uno_c``, ``mean_auc``, ``ibs``,
    ``null_ibs``, ``ipa_integrated``), then per horizon ``auc@h``, ``brier@h``,
    ``ipa@h``, ``ici@h``, ``e50@h``, ``e90@h``, ``cal_slope@h``, ``oe_ratio@h``
    with the horizon written as in ``f"{h:g}"``.
    """
    hs = [_h(h) for h in np.atleast_1d(horizons)]
    return _GLOBAL_METRICS + tuple(f"{m}@{h}" for m in _HORIZON_METRICS for h in hs)


def pair_metric_names(horizons) -> tuple[str, ...]:
    """Names of the scalar metrics of :meth:`PairPerformance.scalars`, in order."""
    hs = [_h(h) for h in np.atleast_1d(horizons)]
    return tuple(f"{m}@{h}" for m in _PAIR_METRICS for h in hs)


@dataclass(frozen=True)
class ModelPerformance:
    """Performance of one fitted model on one set of evaluation rows.

    Attributes
    ----------
    model : str
    n, n_events : int
        Evaluation rows and their events.
    horizons : ndarray of shape (k,)
    harrell_c, harrell_c_se : float
        Harrell's C and its asymptotic standard error.
    uno_c, tau : float
        Uno's C truncated at ``tau`` (the last horizon unless given).
    auc : ndarray of shape (k,)
        Cumulative/dynamic AUC at each horizon.
    mean_auc : float
        Kaplan-Meier-weighted mean of ``auc`` (see
        :func:`workbench.metrics.td_auc.time_dependent_auc`); NaN if a horizon is dropped.
    brier, null_brier, ipa : ndarray of shape (k,)
        IPCW Brier score of the model and of the training Kaplan-Meier curve, and
        ``1 - brier / null_brier``.
    ibs, null_ibs, ipa_integrated : float
        Brier scores integrated (trapezoidal rule, divided by the range) over
        ``ibs_times``, and ``1 - ibs / null_ibs``.
    ibs_range : tuple of float
        First and last time of the integration grid actually used.
    ici, e50, e90, cal_slope, oe_ratio : ndarray of shape (k,)
        Smoothed calibration (mean, median and 90th percentile of
        |observed - predicted| risk), calibration slope and Kaplan-Meier
        observed over mean predicted risk, at each horizon.
    thresholds : ndarray of shape (m,)
    net_benefit, treat_all : ndarray of shape (k, m)
        Decision-curve net benefit of the model and of treating everyone at each
        horizon (treating no one is 0).
    dropped : tuple of str
        Why any metric is NaN (horizon outside follow-up, undefined calibration).
    """

    model: str
    n: int
    n_events: int
    horizons: np.ndarray
    harrell_c: float
    harrell_c_se: float
    uno_c: float
    tau: float
    auc: np.ndarray
    mean_auc: float
    brier: np.ndarray
    null_brier: np.ndarray
    ipa: np.ndarray
    ibs: float
    null_ibs: float
    ipa_integrated: float
    ibs_range: tuple[float, float]
    ici: np.ndarray
    e50: np.ndarray
    e90: np.ndarray
    cal_slope: np.ndarray
    oe_ratio: np.ndarray
    thresholds: np.ndarray
    net_benefit: np.ndarray
    treat_all: np.ndarray
    dropped: tuple[str, ...] = ()

    def scalars(self) -> dict[str, float]:
        """All scalar metrics by name, in the order of :func:`metric_names`."""
        out = {m: float(getattr(self, m)) for m in _GLOBAL_METRICS}
        for m in _HORIZON_METRICS:
            vals = getattr(self, m)
            for h, v in zip(self.horizons, vals, strict=True):
                out[f"{m}@{_h(h)}"] = float(v)
        return out

    def vector(self) -> np.ndarray:
        """The values of :meth:`scalars` as one float array."""
        return np.fromiter(self.scalars().values(), dtype=float)


@dataclass(frozen=True)
class PairPerformance:
    """Category-free NRI and IDI of ``model`` against ``baseline``, by component.

    Attributes
    ----------
    model, baseline : str
    horizons : ndarray of shape (k,)
    nri, nri_events, nri_nonevents : ndarray of shape (k,)
    idi, idi_events, idi_nonevents : ndarray of shape (k,)
    dropped : tuple of str
    """

    model: str
    baseline: str
    horizons: np.ndarray
    nri: np.ndarray
    nri_events: np.ndarray
    nri_nonevents: np.ndarray
    idi: np.ndarray
    idi_events: np.ndarray
    idi_nonevents: np.ndarray
    dropped: tuple[str, ...] = ()

    def scalars(self) -> dict[str, float]:
        out = {}
        for m in _PAIR_METRICS:
            for h, v in zip(self.horizons, getattr(self, m), strict=True):
                out[f"{m}@{_h(h)}"] = float(v)
        return out

    def vector(self) -> np.ndarray:
        return np.fromiter(self.scalars().values(), dtype=float)


# ------------------------------------------------------------------ horizons


def _as_horizons(horizons) -> np.ndarray:
    h = np.atleast_1d(np.asarray(horizons, dtype=float))
    if h.ndim != 1 or h.size == 0 or not np.all(np.isfinite(h)) or np.any(h <= 0):
        raise MetricError(
            f"horizons must be a non-empty list of positive follow-up times, got {list(h.ravel())}."
        )
    if h.size > 1 and np.any(np.diff(h) <= 0):
        raise MetricError(f"horizons must be strictly increasing, got {list(h)}.")
    return h


def check_horizons(y_eval, horizons, *, time_unit: str = "") -> dict[float, str]:
    """Horizons that cannot be evaluated on these rows, with the reason.

    Parameters
    ----------
    y_eval : structured ndarray
        Outcome of the evaluation rows.
    horizons : array-like
    time_unit : str, optional
        Used in the messages only.

    Returns
    -------
    dict
        ``{horizon: message}`` for every unusable horizon (empty if all are usable).
    """
    time, event = split_outcome(y_eval)
    unit = f" {time_unit}" if time_unit else ""
    lo, hi = float(time.min()), float(time.max())
    bad = {}
    for h in _as_horizons(horizons):
        if h >= hi:
            bad[float(h)] = (
                f"horizon {time_phrase(h, time_unit)} lies outside the follow-up of the {time.size} evaluation "
                f"patients (follow-up from {lo:g} to {hi:g}{unit}); a horizon must be shorter than "
                "the longest follow-up, ideally well inside it. Choose an earlier horizon."
            )
        elif not np.any(event & (time <= h)):
            bad[float(h)] = (
                f"horizon {time_phrase(h, time_unit)}: none of the {time.size} evaluation patients (follow-up "
                f"{lo:g} to {hi:g}{unit}) had an event by then, so risks at this horizon cannot "
                "be assessed. Choose a later horizon."
            )
    return bad


def ibs_grid(y, horizons) -> np.ndarray:
    """Default integration grid of the integrated Brier score.

    The distinct event times of ``y`` from the first event time up to the last
    horizon, with the last horizon itself as the end point.
    """
    time, event = split_outcome(y)
    h = _as_horizons(horizons)
    et = np.unique(time[event])
    if et.size == 0:
        raise MetricError("the integrated Brier score needs at least one event in the outcome given.")
    grid = np.unique(np.r_[et[et <= h[-1]], h[-1]])
    if grid.size < 2:
        grid = np.r_[min(et[0], h[-1] / 2.0), h[-1]]
    return grid


def prediction_times(horizons, ibs_times) -> np.ndarray:
    """Sorted union of the horizons and the integration grid (the times to predict at)."""
    return np.unique(np.r_[_as_horizons(horizons), np.asarray(ibs_times, dtype=float)])
