"""Kaplan-Meier estimator with Greenwood standard errors and log(-log) intervals.

Pure numpy and vectorised: one sort, then cumulative sums over the unique times.
Case weights are supported so that the same code serves frequency weights
(bootstrap replicates) and inverse-probability weights.
"""

from __future__ import annotations

from dataclasses import dataclass
from statistics import NormalDist

import numpy as np

from workbench.errors import MetricError

__all__ = [
    "KaplanMeierResult",
    "MedianSurvival",
    "kaplan_meier",
    "km_ci_at",
    "loglog_limits",
    "median_survival",
    "reverse_kaplan_meier_median_followup",
    "survival_at",
]


@dataclass(frozen=True)
class KaplanMeierResult:
    """A fitted Kaplan-Meier curve.

    All arrays have one entry per unique observed time (event *or* censoring),
    sorted ascending, so that numbers at risk and censorings can be read off at
    every time where the curve could change its risk set. The curve is a
    right-continuous step function: ``survival[k]`` is S(t) for
    ``times[k] <= t < times[k + 1]``, and S(t) = 1 before ``times[0]``.

    Attributes
    ----------
    times : ndarray of shape (n_times,)
        Unique observed times.
    survival : ndarray of shape (n_times,)
        Kaplan-Meier estimate S(t) just after each time.
    std_err : ndarray of shape (n_times,)
        Greenwood standard error of S(t). Where S(t) = 0 the Greenwood term is
        undefined; the standard error is reported as 0 there.
    ci_lower, ci_upper : ndarray of shape (n_times,)
        Pointwise confidence limits on the log(-log S) scale, transformed back.
        They equal 1 where S(t) = 1 and 0 where S(t) = 0.
    at_risk : ndarray of shape (n_times,)
        (Weighted) number at risk just before each time.
    events : ndarray of shape (n_times,)
        (Weighted) number of events at each time.
    censored : ndarray of shape (n_times,)
        (Weighted) number censored at each time.
    conf_level : float
        Confidence level of the pointwise intervals.
    """

    times: np.ndarray
    survival: np.ndarray
    std_err: np.ndarray
    ci_lower: np.ndarray
    ci_upper: np.ndarray
    at_risk: np.ndarray
    events: np.ndarray
    censored: np.ndarray
    conf_level: float = 0.95

    def survival_at(self, t) -> np.ndarray | float:
        """S(t) at one or more times; see :func:`survival_at`."""
        return survival_at(self, t)

    def ci_at(self, t) -> tuple[np.ndarray, np.ndarray]:
        """Confidence limits at one or more times; see :func:`km_ci_at`."""
        return km_ci_at(self, t)


@dataclass(frozen=True)
class MedianSurvival:
    """Median time with a confidence interval read off the pointwise limits.

    ``inf`` means the curve (or the limit) never fell to 0.5 within follow-up,
    which is reported in papers as "not reached".
    """

    median: float
    ci_lower: float
    ci_upper: float
    conf_level: float = 0.95


def loglog_limits(p, se_loglog, conf_level: float) -> tuple[np.ndarray, np.ndarray]:
    """Pointwise limits of a probability ``p`` symmetric on the log(-log p) scale.

    ``p ** exp(+-z se)`` with ``se`` the standard error of ``log(-log p)`` (for a
    survival probability, of the log cumulative hazard); the limits stay in [0, 1].
    Where ``p`` is 0 or 1 or ``se`` is not finite the limits equal ``p``. Used for
    the Kaplan-Meier curve, the Aalen-Johansen cumulative incidence and conditional
    survival (Kalbfleisch & Prentice 1980).
    """
    p = np.asarray(p, dtype=float)
    se = np.broadcast_to(np.asarray(se_loglog, dtype=float), p.shape)
    z = NormalDist().inv_cdf(0.5 + conf_level / 2.0)
    lower, upper = p.copy(), p.copy()
    inner = (p > 0) & (p < 1) & np.isfinite(se) & np.isfinite(p)
    lower[inner] = p[inner] ** np.exp(z * se[inner])
    upper[inner] = p[inner] ** np.exp(-z * se[inner])
    return lower, upper


def _check_inputs(time, event, weights) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    t = np.asarray(time, dtype=float).ravel()
    e = np.asarray(event).ravel()
    if t.size == 0:
        raise MetricError("Kaplan-Meier needs at least one patient; the follow-up times are empty.")
    if e.shape != t.shape:
        raise MetricError(
            f"Kaplan-Meier got {t.size} follow-up times but {e.size} event flags; "
            "give one event flag per patient."
        )
    if not np.all(np.isfinite(t)) or np.any(t < 0):
        raise MetricError(
            "Kaplan-Meier follow-up times must be finite and non-negative; "
            "remove or correct missing, infinite or negative times."
        )
    if e.dtype != bool:
        if not np.all(np.isin(e, (0, 1))):
            raise MetricError("Kaplan-Meier event flags must be 0/1 or True/False.")
        e = e.astype(bool)
    if weights is None:
        w = np.ones_like(t)
    else:
        w = np.asarray(weights, dtype=float).ravel()
        if w.shape != t.shape:
            raise MetricError(
                f"Kaplan-Meier got {w.size} weights for {t.size} patients; give one weight per patient."
            )
        if not np.all(np.isfinite(w)) or np.any(w < 0):
            raise MetricError("Kaplan-Meier weights must be finite and non-negative.")
    return t, e, w


def kaplan_meier(time, event, *, weights=None, conf_level: float = 0.95) -> KaplanMeierResult:
    """Kaplan-Meier estimate of the survival function.

    Parameters
    ----------
    time : array-like of shape (n_samples,)
        Follow-up time, finite and non-negative.
    event : array-like of shape (n_samples,)
        True (1) where the event was observed, False (0) if censored.
    weights : array-like of shape (n_samples,), optional
        Non-negative case weights (bootstrap frequencies or inverse-probability
        weights). Counts in the result are then weighted counts.
    conf_level : float, default 0.95
        Level of the pointwise confidence interval.

    Returns
    -------
    KaplanMeierResult

    Notes
    -----
    With d_k events among n_k at risk at time t_k,
    S(t) = prod_{t_k <= t} (1 - d_k / n_k). Greenwood's variance is
    Var S(t) = S(t)^2 sum_{t_k <= t} d_k / (n_k (n_k - d_k)); with weights the
    same formula is applied to the weighted counts. The interval is
    S(t)^exp(+-z se / log S(t)) with se = sqrt(sum d/(n(n-d))), i.e. a symmetric
    interval for log(-log S(t)) (Kalbfleisch & Prentice), which stays in [0, 1].

    References
    ----------
    .. [1] Kaplan EL, Meier P. Nonparametric estimation from incomplete
       observations. J Am Stat Assoc 1958;53:457-481.
    .. [2] Greenwood M. The natural duration of cancer. Reports on Public
       Health and Medical Subjects 1926;33:1-26.
    .. [3] Kalbfleisch JD, Prentice RL. The Statistical Analysis of Failure
       Time Data. Wiley, 1980 (log(-log) interval).
    """
    if not 0.0 < conf_level < 1.0:
        raise MetricError(f"conf_level must lie strictly between 0 and 1, got {conf_level}.")
    t, e, w = _check_inputs(time, event, weights)
    times, inv = np.unique(t, return_inverse=True)
    events = np.bincount(inv, weights=w * e, minlength=times.size)
    censored = np.bincount(inv, weights=w * ~e, minlength=times.size)
    leaving = events + censored
    at_risk = np.cumsum(leaving[::-1])[::-1]

    with np.errstate(divide="ignore", invalid="ignore"):
        hazard = np.where(at_risk > 0, events / at_risk, 0.0)
        surv = np.cumprod(1.0 - hazard)
        # Greenwood term; d == n makes it infinite, which is exactly where S drops to 0.
        term = np.where(events > 0, events / (at_risk * (at_risk - events)), 0.0)
    cum = np.cumsum(term)
    surv = np.clip(surv, 0.0, 1.0)
    positive = surv > 0
    std_err = np.where(positive, surv * np.sqrt(np.where(positive, cum, 0.0)), 0.0)

    with np.errstate(divide="ignore", invalid="ignore"):
        se_loglog = np.sqrt(cum) / np.abs(np.log(surv))
    lower, upper = loglog_limits(surv, se_loglog, conf_level)
    return KaplanMeierResult(
        times=times,
        survival=surv,
        std_err=std_err,
        ci_lower=lower,
        ci_upper=upper,
        at_risk=at_risk,
        events=events,
        censored=censored,
        conf_level=float(conf_level),
    )


def _step_index(times: np.ndarray, t) -> tuple[np.ndarray, bool]:
    tt = np.asarray(t, dtype=float)
    scalar = tt.ndim == 0
    if not np.all(np.isfinite(tt)):
        raise MetricError("times at which to read the Kaplan-Meier curve must be finite.")
    idx = np.searchsorted(times, np.atleast_1d(tt), side="right") - 1
    return idx, scalar


def _read_step(values: np.ndarray, idx: np.ndarray, before: float) -> np.ndarray:
    return np.where(idx >= 0, values[np.maximum(idx, 0)], before)


def survival_at(result: KaplanMeierResult, t) -> np.ndarray | float:
    """Kaplan-Meier survival S(t) at one or more times.

    Right-continuous: at an event time the drop has already happened. Before the
    first observed time S = 1; after the last observed time the last value is
    carried forward (the estimate is not informative there).

    Parameters
    ----------
    result : KaplanMeierResult
    t : float or array-like

    Returns
    -------
    float or ndarray shaped like ``t``
    """
    idx, scalar = _step_index(result.times, t)
    out = _read_step(result.survival, idx, 1.0)
    return float(out[0]) if scalar else out.reshape(np.shape(t))


def km_ci_at(result: KaplanMeierResult, t) -> tuple[np.ndarray, np.ndarray]:
    """Pointwise confidence limits ``(lower, upper)`` at one or more times.

    Same step convention as :func:`survival_at`.
    """
    idx, scalar = _step_index(result.times, t)
    lo = _read_step(result.ci_lower, idx, 1.0)
    hi = _read_step(result.ci_upper, idx, 1.0)
    if scalar:
        return float(lo[0]), float(hi[0])
    return lo.reshape(np.shape(t)), hi.reshape(np.shape(t))


def _first_time_at_or_below(times: np.ndarray, curve: np.ndarray, level: float) -> float:
    # A small tolerance so that 10/20 computed as a product of fractions still counts as 0.5.
    hit = np.flatnonzero(curve <= level + 1e-12)
    return float(times[hit[0]]) if hit.size else float("inf")


def median_survival(result: KaplanMeierResult) -> MedianSurvival:
    """Median survival time with its confidence interval.

    The median is the smallest observed time t with S(t) <= 0.5; ``inf`` if the
    curve stays above 0.5 ("not reached"). The limits are the smallest times at
    which the lower and upper pointwise limits fall to 0.5 or below (the
    interval obtained by inverting the pointwise log(-log) test, Brookmeyer &
    Crowley).

    References
    ----------
    .. [1] Brookmeyer R, Crowley J. A confidence interval for the median
       survival time. Biometrics 1982;38:29-41.
    """
    return MedianSurvival(
        median=_first_time_at_or_below(result.times, result.survival, 0.5),
        ci_lower=_first_time_at_or_below(result.times, result.ci_lower, 0.5),
        ci_upper=_first_time_at_or_below(result.times, result.ci_upper, 0.5),
        conf_level=result.conf_level,
    )


def reverse_kaplan_meier_median_followup(
    time, event, *, conf_level: float = 0.95
) -> MedianSurvival:
    """Median follow-up by the reverse Kaplan-Meier method.

    The Kaplan-Meier estimator is applied with the roles swapped: censoring is
    the "event" and an observed event censors follow-up. The median of that
    curve estimates how long patients would have been followed had none of them
    had the event, which is the recommended summary of follow-up.

    Parameters
    ----------
    time, event : array-like of shape (n_samples,)
    conf_level : float, default 0.95

    Returns
    -------
    MedianSurvival

    References
    ----------
    .. [1] Schemper M, Smith TL. A note on quantifying follow-up in studies of
       failure time. Control Clin Trials 1996;17:343-346.
    """
    t, e, _ = _check_inputs(time, event, None)
    return median_survival(kaplan_meier(t, ~e, conf_level=conf_level))
