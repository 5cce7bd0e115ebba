"""The one outcome format used inside the package.

A survival outcome is a numpy structured array with fields ``event`` (bool) and
``time`` (float64), the layout scikit-survival uses. It is built here and only
here; code that calls lifelines converts at the call site.

A competing-risks outcome is the same idea with an int64 field ``cause``
(0 = censored, 1 = the cause of interest, 2, ... = competing causes) in place of
``event``; :func:`make_competing_outcome` builds it, here as well.
"""

from __future__ import annotations

import numpy as np

from workbench.errors import CohortError, MetricError

OUTCOME_DTYPE = np.dtype([("event", "?"), ("time", "<f8")])
COMPETING_DTYPE = np.dtype([("cause", "<i8"), ("time", "<f8")])


def make_outcome(time, event) -> np.ndarray:
    """Build a structured outcome array from follow-up times and event flags.

    Parameters
    ----------
    time : array-like of shape (n_samples,)
        Follow-up time, non-negative and finite.
    event : array-like of shape (n_samples,)
        True (or 1) where the event was observed, False (or 0) if censored.

    Returns
    -------
    y : ndarray of shape (n_samples,) with dtype ``OUTCOME_DTYPE``
    """
    t = np.asarray(time, dtype=float).ravel()
    e = np.asarray(event).ravel()
    if t.shape != e.shape:
        raise CohortError(f"time has {t.size} values but event has {e.size}; they must match.")
    if not np.all(np.isfinite(t)):
        raise CohortError("time contains missing or infinite values.")
    if np.any(t < 0):
        raise CohortError("time contains negative values.")
    if e.dtype != bool:
        vals = set(np.unique(e).tolist())
        if not vals <= {0, 1}:
            raise CohortError(f"event must be 0/1 or True/False, found {sorted(vals)[:5]}.")
        e = e.astype(bool)
    y = np.empty(t.size, dtype=OUTCOME_DTYPE)
    y["event"] = e
    y["time"] = t
    return y


def check_outcome(y, name: str = "y") -> np.ndarray:
    """Return ``y`` if it is an outcome array, else raise a clear error."""
    if not isinstance(y, np.ndarray) or y.dtype.names is None or set(y.dtype.names) != {"event", "time"}:
        raise CohortError(
            f"{name} must be a survival outcome array with fields 'event' and 'time' "
            "(build it with workbench.cohort.make_outcome)."
        )
    return y


def split_outcome(y) -> tuple[np.ndarray, np.ndarray]:
    """Return ``(time, event)`` as float and bool arrays."""
    y = check_outcome(y)
    return y["time"].astype(float), y["event"].astype(bool)


def make_competing_outcome(time, cause) -> np.ndarray:
    """Build a competing-risks outcome from follow-up times and cause codes.

    Parameters
    ----------
    time : array-like of shape (n_samples,)
        Follow-up time, finite and non-negative.
    cause : array-like of shape (n_samples,)
        Whole numbers: 0 for censored, 1, 2, ... for the cause of the first event.

    Returns
    -------
    ndarray of shape (n_samples,) with dtype ``COMPETING_DTYPE``
    """
    t = np.asarray(time, dtype=float).ravel()
    c = np.asarray(cause).ravel()
    if t.shape != c.shape:
        raise MetricError(f"time has {t.size} values but cause has {c.size}; give one cause code per patient.")
    if t.size == 0:
        raise MetricError("the competing-risks outcome is empty; it needs at least one patient.")
    if not np.all(np.isfinite(t)) or np.any(t < 0):
        raise MetricError("follow-up times must be finite and non-negative; correct missing or negative times.")
    cf = np.asarray(c, dtype=float)
    if not np.all(np.isfinite(cf)) or np.any(cf < 0) or np.any(cf != np.round(cf)):
        bad = sorted({str(v) for v in c[~(np.isfinite(cf) & (cf >= 0) & (cf == np.round(cf)))]})[:5]
        raise MetricError(
            f"cause codes must be whole numbers: 0 for censored, 1, 2, ... for the cause of the "
            f"first event; found {', '.join(bad)}."
        )
    y = np.empty(t.size, dtype=COMPETING_DTYPE)
    y["cause"] = cf.astype(np.int64)
    y["time"] = t
    return y
