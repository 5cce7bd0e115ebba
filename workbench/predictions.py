"""Typed predictions.

A metric accepts only the kind of prediction it needs: discrimination measures
take :class:`RiskScores` (higher = worse prognosis), calibration and Brier scores
take :class:`SurvivalCurves`. Passing survival probabilities where a risk score
belongs therefore fails loudly instead of silently giving an AUC below 0.5.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from workbench.errors import MetricError


@dataclass(frozen=True)
class RiskScores:
    """Risk scores, one per patient; higher means worse prognosis.

    Attributes
    ----------
    values : ndarray of shape (n_samples,)
    model : str
        Name of the model that produced them (for messages and tables).
    """

    values: np.ndarray
    model: str = ""

    def __post_init__(self):
        v = np.asarray(self.values, dtype=float).ravel()
        if not np.all(np.isfinite(v)):
            raise MetricError(f"risk scores of model {self.model!r} contain NaN or infinite values.")
        object.__setattr__(self, "values", v)

    def __len__(self) -> int:
        return self.values.size

    def take(self, idx) -> RiskScores:
        return RiskScores(self.values[np.asarray(idx)], self.model)


@dataclass(frozen=True)
class SurvivalCurves:
    """Predicted survival probabilities S(t | x) on a common time grid.

    Attributes
    ----------
    times : ndarray of shape (n_times,)
        Strictly increasing evaluation times, in the cohort's time unit.
    probs : ndarray of shape (n_samples, n_times)
        Survival probabilities in [0, 1], non-increasing along each row.
    model : str
    """

    times: np.ndarray
    probs: np.ndarray
    model: str = ""

    def __post_init__(self):
        t = np.asarray(self.times, dtype=float).ravel()
        p = np.asarray(self.probs, dtype=float)
        if p.ndim == 1:
            p = p[:, None]
        if p.ndim != 2 or p.shape[1] != t.size:
            raise MetricError(
                f"survival probabilities have shape {p.shape}; expected (n_samples, {t.size})."
            )
        if t.size > 1 and np.any(np.diff(t) <= 0):
            raise MetricError("survival curve times must be strictly increasing.")
        if not np.all(np.isfinite(p)):
            raise MetricError(f"survival probabilities of model {self.model!r} contain NaN or inf.")
        if np.any(p < -1e-9) or np.any(p > 1 + 1e-9):
            raise MetricError(f"survival probabilities of model {self.model!r} fall outside [0, 1].")
        object.__setattr__(self, "times", t)
        object.__setattr__(self, "probs", np.clip(p, 0.0, 1.0))

    @property
    def n_samples(self) -> int:
        return self.probs.shape[0]

    def at(self, t: float) -> np.ndarray:
        """Survival probabilities at one time (right-continuous step lookup)."""
        t = float(t)
        if t < self.times[0]:
            raise MetricError(f"time {t} lies before the first grid time {self.times[0]}.")
        j = np.searchsorted(self.times, t, side="right") - 1
        return self.probs[:, j]

    def risk_at(self, t: float) -> np.ndarray:
        """Predicted event probability 1 - S(t | x) at one time."""
        return 1.0 - self.at(t)

    def take(self, idx) -> SurvivalCurves:
        return SurvivalCurves(self.times, self.probs[np.asarray(idx)], self.model)
