"""Censoring distribution for inverse-probability-of-censoring weights (IPCW).

The censoring survival function G(t) = P(C > t) is estimated by the
Kaplan-Meier method with censoring as the "event", on TRAINING rows only, and
then evaluated at the times of the evaluation rows.

Ties: when an event and a censoring share a time, the event is taken to come
first, so patients with an event at t are no longer at risk of being censored
at t. G therefore jumps at t by the factor 1 - c_t / (n_t - d_t), where n_t is
the number at risk, d_t the events and c_t the censorings at t. This is the
usual convention and the one scikit-survival's censoring estimator uses.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from workbench.cohort.outcome import split_outcome
from workbench.errors import MetricError

__all__ = ["CensoringSurvival", "fit_censoring"]


@dataclass(frozen=True)
class CensoringSurvival:
    """Kaplan-Meier estimate of the censoring survival function G(t).

    Attributes
    ----------
    times : ndarray of shape (n_times,)
        Unique observed times of the training rows.
    survival : ndarray of shape (n_times,)
        G(t) just after each time (right-continuous).
    at_risk : ndarray of shape (n_times,)
        Number at risk of censoring at each time (events at that time removed).
    censored : ndarray of shape (n_times,)
        Number of censorings at each time.
    n_train : int
        Number of training rows the estimate was built from.
    """

    times: np.ndarray
    survival: np.ndarray
    at_risk: np.ndarray
    censored: np.ndarray
    n_train: int

    def survival_at(self, t, *, left_limit: bool = True, check_positive: bool = True) -> np.ndarray:
        """G(t-) (default) or G(t) at one or more times.

        Parameters
        ----------
        t : float or array-like
            Times at which to evaluate.
        left_limit : bool, default True
            If True return G(t-), the probability of still being uncensored
            just before t (the weight for an event at t); otherwise the
            right-continuous value G(t) (the weight for a patient known to be
            event-free beyond t).
        check_positive : bool, default True
            Raise a :class:`MetricError` where the value is 0, because an
            inverse weight would be infinite there.

        Returns
        -------
        ndarray shaped like ``t``

        Notes
        -----
        Before the first training time G = 1; after the last training time the
        last value is carried forward.
        """
        tt = np.asarray(t, dtype=float)
        if not np.all(np.isfinite(tt)):
            raise MetricError("times at which to evaluate the censoring distribution must be finite.")
        side = "left" if left_limit else "right"
        idx = np.searchsorted(self.times, tt, side=side) - 1
        g = np.where(idx >= 0, self.survival[np.maximum(idx, 0)], 1.0)
        if check_positive and np.any(g <= 0):
            first = float(np.min(np.atleast_1d(tt)[np.atleast_1d(g) <= 0]))
            raise MetricError(
                f"the probability of remaining uncensored has dropped to 0 at time {first:g}: "
                "every training patient still followed at that time was censored, so inverse "
                "censoring weights are undefined there. Choose a horizon (or tau) earlier "
                f"than {first:g}, inside the follow-up of the training data."
            )
        return g

    def inverse_at(self, t, *, left_limit: bool = True) -> np.ndarray:
        """1 / G(t-) (default) or 1 / G(t); raises where G is 0."""
        return 1.0 / self.survival_at(t, left_limit=left_limit)

    def martingale_parts(self) -> tuple[np.ndarray, np.ndarray]:
        """Hazard increments and at-risk proportions on ``times``.

        Returns ``(d_lambda, y)`` with d_lambda = c_t / Y_t (the censoring
        hazard increment) and y = Y_t / n_train; they enter the influence
        function of the Kaplan-Meier estimate of G.
        """
        with np.errstate(divide="ignore", invalid="ignore"):
            d_lambda = np.where(self.at_risk > 0, self.censored / self.at_risk, 0.0)
        return d_lambda, self.at_risk / self.n_train


def fit_censoring(y_train) -> CensoringSurvival:
    """Estimate the censoring survival function G from training rows.

    Parameters
    ----------
    y_train : structured ndarray
        Outcome of the training rows (``workbench.cohort.make_outcome``).

    Returns
    -------
    CensoringSurvival

    References
    ----------
    .. [1] Robins JM, Rotnitzky A. Recovery of information and adjustment for
       dependent censoring using surrogate markers. In: AIDS Epidemiology,
       Birkhauser, 1992 (inverse probability of censoring weighting).
    """
    time, event = split_outcome(y_train)
    if time.size == 0:
        raise MetricError("the training outcome is empty; the censoring distribution needs patients.")
    times, inv = np.unique(time, return_inverse=True)
    d = np.bincount(inv, weights=event.astype(float), minlength=times.size)
    c = np.bincount(inv, weights=(~event).astype(float), minlength=times.size)
    n = np.cumsum((d + c)[::-1])[::-1]
    # Events at t leave the risk set before the censorings at t (events first).
    at_risk_c = n - d
    with np.errstate(divide="ignore", invalid="ignore"):
        factor = np.where(c > 0, 1.0 - c / at_risk_c, 1.0)
    surv = np.clip(np.cumprod(factor), 0.0, 1.0)
    return CensoringSurvival(
        times=times, survival=surv, at_risk=at_risk_c, censored=c, n_train=int(time.size)
    )
