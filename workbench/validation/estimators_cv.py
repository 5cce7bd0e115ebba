"""Cross-validation, leave-one-centre-out and external estimates (see :mod:`.resample`)."""

from __future__ import annotations

import numpy as np

from workbench.validation.intervals import resample_interval


def cv_estimate(v: np.ndarray, rep: np.ndarray, ok: np.ndarray):
    """Mean of the repeat means of held-out values; SD of the repeat means; rows used."""
    keep = ok & np.isfinite(v)
    means = np.array([v[keep & (rep == r)].mean() for r in np.unique(rep[keep])])
    if not means.size:
        return np.nan, np.nan, 0
    sd = float(np.std(means, ddof=1)) if means.size > 1 else np.nan
    return float(means.mean()), sd, int(keep.sum())


def by_centre_estimate(v: np.ndarray, events: np.ndarray, ok: np.ndarray):
    """Event-weighted mean over held-out centres and the event-weighted SD across centres."""
    w = events.astype(float)
    keep = ok & np.isfinite(v) & (w > 0)
    used = int(keep.sum())
    if not used:
        return np.nan, np.nan, 0
    est = float(np.average(v[keep], weights=w[keep]))
    sd = float(np.sqrt(np.average((v[keep] - est) ** 2, weights=w[keep]))) if used > 1 else np.nan
    return est, sd, used


def external_estimate(a: float, b: np.ndarray, conf_level: float):
    """Value on the external cohort; SD and interval (:func:`~.intervals.resample_interval`) over resampled rows."""
    b = b[np.isfinite(b)]
    sd = float(np.std(b, ddof=1)) if b.size > 1 else np.nan
    return a, sd, resample_interval(b, a, conf_level), int(b.size)
