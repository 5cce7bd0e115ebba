"""Decision curves: net benefit of acting on predicted risk at a horizon.

The net benefit of a rule "treat when the predicted risk of an event by ``t0``
is at least the threshold probability ``pt``" counts true positives and
subtracts false positives weighted by the odds ``pt / (1 - pt)`` at which a
patient would be indifferent between treatment and no treatment. With censored
follow-up the true and false positives among the treated are estimated with a
Kaplan-Meier estimate inside the treated group, so censored patients are not
dropped or counted as event-free.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from workbench.cohort.outcome import split_outcome
from workbench.errors import MetricError
from workbench.metrics.brier import _check_single_horizon, _require_curves
from workbench.predictions import SurvivalCurves


def _weighted_km_at(time: np.ndarray, event: np.ndarray, t0: float, weights: np.ndarray) -> np.ndarray:
    """Kaplan-Meier survival at ``t0`` for many case-weight columns at once.

    Parameters
    ----------
    time, event : ndarray of shape (n,)
    t0 : float
    weights : ndarray of shape (n,) or (n, k)
        Non-negative case weights; a 0/1 column gives the Kaplan-Meier estimate
        within that subgroup.

    Returns
    -------
    ndarray of shape (k,) (or a scalar for 1-d weights)
        ``prod_{t_j <= t0} (1 - d_j / r_j)`` with weighted event counts ``d_j``
        and weighted numbers at risk ``r_j``; a column whose risk set empties
        keeps its last value, and an all-zero column gives 1.
    """
    w = np.asarray(weights, dtype=float)
    one_d = w.ndim == 1
    if one_d:
        w = w[:, None]
    order = np.argsort(time, kind="stable")
    t = time[order]
    e = event[order]
    w = w[order]
    # One row per distinct time: weighted deaths and weighted totals leaving the risk set.
    starts = np.flatnonzero(np.r_[True, t[1:] != t[:-1]])
    uniq = t[starts]
    totals = np.add.reduceat(w, starts, axis=0)
    deaths = np.add.reduceat(w * e[:, None], starts, axis=0)
    at_risk = np.cumsum(totals[::-1], axis=0)[::-1]
    keep = uniq <= t0
    d = deaths[keep]
    r = at_risk[keep]
    hazard = np.divide(d, r, out=np.zeros_like(d), where=r > 0)
    surv = np.prod(1.0 - hazard, axis=0)
    return surv[0] if one_d else surv


@dataclass(frozen=True)
class DecisionCurveResult:
    """Net benefit over threshold probabilities at one horizon.

    Attributes
    ----------
    t0 : float
        Horizon, in the cohort's time unit.
    thresholds : ndarray of shape (k,)
        Threshold probabilities of an event by ``t0``.
    net_benefit : ndarray of shape (k,)
        Net benefit of treating patients whose predicted risk is at least the threshold.
    treat_all : ndarray of shape (k,)
        Net benefit of treating everyone.
    treat_none : ndarray of shape (k,)
        Net benefit of treating no one (zero by definition).
    proportion_treated : ndarray of shape (k,)
        Share of patients the model would treat at each threshold.
    event_risk : float
        Kaplan-Meier risk of an event by ``t0`` in the whole sample.
    model : str
    """

    t0: float
    thresholds: np.ndarray
    net_benefit: np.ndarray
    treat_all: np.ndarray
    treat_none: np.ndarray
    proportion_treated: np.ndarray
    event_risk: float
    model: str = ""


def net_benefit(
    y: np.ndarray, curves: SurvivalCurves, t0: float, thresholds=None
) -> DecisionCurveResult:
    """Decision curve of a survival model at horizon ``t0``.

    For threshold ``pt`` let ``H`` be the patients with predicted risk
    ``1 - S(t0 | x) >= pt`` and ``S_H(t0)`` the Kaplan-Meier survival at ``t0``
    inside ``H``. With ``n`` patients in all,

    .. math::

        NB(p_t) = \\frac{|H|}{n}\\left[(1 - S_H(t_0)) - S_H(t_0)\\,\\frac{p_t}{1 - p_t}\\right],

    treat-all uses the whole sample for ``H`` and treat-none is zero.

    Parameters
    ----------
    y : structured array of shape (n,)
        Outcome of the evaluation rows.
    curves : SurvivalCurves
        Predicted survival curves for the same rows; the risk used is ``1 - S(t0 | x)``.
    t0 : float
        Horizon, in the same time unit as ``y``.
    thresholds : array-like, optional
        Threshold probabilities in ``[0, 1)``; by default 0.01 to 0.99 in steps of 0.01.

    Returns
    -------
    DecisionCurveResult

    References
    ----------
    .. [1] Vickers AJ, Elkin EB. Decision curve analysis: a novel method for
           evaluating prediction models. Med Decis Making 2006;26:565-74.
    .. [2] Vickers AJ, Cronin AM, Elkin EB, Gonen M. Extensions to decision curve
           analysis, a novel method for evaluating diagnostic tests, prediction
           models and molecular markers. BMC Med Inform Decis Mak 2008;8:53.
    """
    curves = _require_curves(curves, "net_benefit")
    time, event = split_outcome(y)
    if curves.n_samples != time.size:
        raise MetricError(
            f"net_benefit: {curves.n_samples} predicted curves but {time.size} outcomes; "
            "predictions and outcomes must describe the same patients in the same order."
        )
    t0 = _check_single_horizon(time, event, t0, "net_benefit")
    pt = np.arange(1, 100) / 100.0 if thresholds is None else np.atleast_1d(np.asarray(thresholds, float))
    if pt.ndim != 1 or np.any(~np.isfinite(pt)) or np.any(pt < 0) or np.any(pt >= 1):
        raise MetricError(
            "net_benefit: threshold probabilities must be numbers from 0 up to (not including) 1, "
            "for example 0.05, 0.10, ..., 0.50."
        )
    risk = curves.risk_at(t0)
    n = time.size
    treated = risk[:, None] >= pt[None, :]
    n_treated = treated.sum(axis=0)
    s_treated = _weighted_km_at(time, event, t0, treated)
    odds = pt / (1.0 - pt)
    nb = n_treated / n * ((1.0 - s_treated) - s_treated * odds)
    nb = np.where(n_treated > 0, nb, 0.0)
    s_all = float(_weighted_km_at(time, event, t0, np.ones(n)))
    treat_all = (1.0 - s_all) - s_all * odds
    return DecisionCurveResult(
        t0=t0,
        thresholds=pt,
        net_benefit=nb,
        treat_all=treat_all,
        treat_none=np.zeros_like(pt),
        proportion_treated=n_treated / n,
        event_risk=1.0 - s_all,
        model=curves.model,
    )
