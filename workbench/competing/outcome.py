"""The competing-risks outcome and the predicted cumulative incidence.

A competing-risks outcome is a numpy structured array with fields ``cause``
(int64: 0 = censored, 1, 2, ... = the cause of the first event) and ``time``
(float64). It is built in :mod:`workbench.cohort.outcome` only, by :func:`make_competing_outcome`
(re-exported here).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from workbench.cohort.outcome import COMPETING_DTYPE, make_competing_outcome, make_outcome
from workbench.errors import MetricError

__all__ = [
    "COMPETING_DTYPE",
    "IncidenceCurves",
    "any_event_outcome",
    "cause_outcome",
    "make_competing_outcome",
    "split_competing",
]



def split_competing(y) -> tuple[np.ndarray, np.ndarray]:
    """Return ``(time, cause)`` of a competing-risks outcome."""
    if not isinstance(y, np.ndarray) or y.dtype.names is None or set(y.dtype.names) != {"cause", "time"}:
        raise MetricError(
            "expected a competing-risks outcome with fields 'cause' and 'time' "
            "(build it with workbench.competing.outcome.make_competing_outcome)."
        )
    return y["time"].astype(float), y["cause"].astype(np.int64)


def any_event_outcome(y) -> np.ndarray:
    """The ordinary survival outcome of the first event of any cause."""
    time, cause = split_competing(y)
    return make_outcome(time, cause > 0)


def cause_outcome(y, cause: int) -> np.ndarray:
    """The ordinary survival outcome with the other causes treated as censored."""
    time, c = split_competing(y)
    return make_outcome(time, c == int(cause))


@dataclass(frozen=True)
class IncidenceCurves:
    """Predicted cumulative incidence F(t | x) of one cause on a common time grid.

    Attributes
    ----------
    times : ndarray of shape (n_times,)
        Strictly increasing times, in the cohort's time unit.
    risks : ndarray of shape (n_samples, n_times)
        Probabilities of an event of ``cause`` by each time, in [0, 1] and
        non-decreasing along each row.
    cause : int
    model : str
    """

    times: np.ndarray
    risks: np.ndarray
    cause: int = 1
    model: str = ""

    def __post_init__(self):
        t = np.asarray(self.times, dtype=float).ravel()
        p = np.asarray(self.risks, dtype=float)
        if p.ndim == 1:
            p = p[:, None]
        if p.ndim != 2 or p.shape[1] != t.size:
            raise MetricError(f"cumulative incidences have shape {p.shape}; expected (n_samples, {t.size}).")
        if t.size > 1 and np.any(np.diff(t) <= 0):
            raise MetricError("cumulative incidence times must be strictly increasing.")
        if not np.all(np.isfinite(p)) or np.any(p < -1e-9) or np.any(p > 1 + 1e-9):
            raise MetricError(f"cumulative incidences of model {self.model!r} must be finite and lie in [0, 1].")
        object.__setattr__(self, "times", t)
        object.__setattr__(self, "risks", np.clip(p, 0.0, 1.0))

    @property
    def n_samples(self) -> int:
        return self.risks.shape[0]

    def risk_at(self, t: float) -> np.ndarray:
        """F(t | x) at one time (right-continuous step lookup)."""
        t = float(t)
        if not t >= self.times[0]:
            raise MetricError(
                f"time {t:g} lies before the first time of the predicted cumulative incidence "
                f"({self.times[0]:g}); predict on a grid that starts earlier."
            )
        return self.risks[:, int(np.searchsorted(self.times, t, side="right")) - 1]
