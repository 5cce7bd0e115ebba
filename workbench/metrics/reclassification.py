"""Category-free net reclassification and integrated discrimination at a horizon.

Both compare a baseline model with a new model through their predicted risks of
an event by ``t0``. With censored follow-up, "event" and "non-event" are not
known for patients censored before ``t0``; the probabilities conditional on
the outcome are obtained from Kaplan-Meier estimates by Bayes' rule instead of
dropping those patients.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from workbench.cohort.outcome import split_outcome
from workbench.errors import MetricError
from workbench.metrics.brier import _check_single_horizon, _require_curves
from workbench.metrics.decision import _weighted_km_at
from workbench.predictions import SurvivalCurves

NRI_CAUTION = (
    "The net reclassification index is not a measure of how much better the new model "
    "predicts. A new model that adds only noise, or that is badly calibrated, can still "
    "show a positive value; the event and non-event parts are simply added, whatever the "
    "share of patients with events; and the usual significance tests for it are "
    "unreliable. Read its two parts separately, and judge the new model mainly on "
    "calibration, the change in discrimination (C-index, AUC) and net benefit "
    "(Kerr et al., Epidemiology 2014)."
)

IDI_CAUTION = (
    "The integrated discrimination improvement rewards a new model for spreading its "
    "predicted risks apart, even where that makes the risks less accurate, so it can "
    "favour a miscalibrated model. Report it only beside calibration and the change in "
    "Brier score, never as the sole evidence (Hilden and Gerds, Stat Med 2014)."
)


@dataclass(frozen=True)
class NRIResult:
    """Category-free (continuous) net reclassification index at a horizon.

    Attributes
    ----------
    t0 : float
    nri : float
        ``nri_events + nri_nonevents`` (between -2 and 2).
    nri_events : float
        ``P(up | event) - P(down | event)``.
    nri_nonevents : float
        ``P(down | non-event) - P(up | non-event)``.
    p_up_events, p_down_events, p_up_nonevents, p_down_nonevents : float
        The four conditional probabilities.
    n_up, n_down, n_unchanged : int
        Patients whose predicted risk went up, down, or stayed exactly the same.
    caution : str
        Plain-language caveat on interpreting the NRI.
    """

    t0: float
    nri: float
    nri_events: float
    nri_nonevents: float
    p_up_events: float
    p_down_events: float
    p_up_nonevents: float
    p_down_nonevents: float
    n_up: int
    n_down: int
    n_unchanged: int
    caution: str = NRI_CAUTION


@dataclass(frozen=True)
class IDIResult:
    """Integrated discrimination improvement at a horizon.

    Attributes
    ----------
    t0 : float
    idi : float
        ``idi_events + idi_nonevents``, equal to the change in discrimination slope.
    idi_events : float
        Rise in mean predicted risk among patients with an event by ``t0``.
    idi_nonevents : float
        Fall in mean predicted risk among patients event-free at ``t0``.
    slope_baseline, slope_new : float
        Discrimination slopes: mean risk among events minus mean risk among non-events.
    caution : str
    """

    t0: float
    idi: float
    idi_events: float
    idi_nonevents: float
    slope_baseline: float
    slope_new: float
    caution: str = IDI_CAUTION


@dataclass(frozen=True)
class ReclassificationResult:
    """NRI and IDI of a new model against a baseline model at one horizon."""

    nri: NRIResult
    idi: IDIResult
    baseline_model: str = ""
    new_model: str = ""


def _paired_risks(y, baseline, new, t0, where):
    baseline = _require_curves(baseline, where)
    new = _require_curves(new, where)
    time, event = split_outcome(y)
    if baseline.n_samples != time.size or new.n_samples != time.size:
        raise MetricError(
            f"{where}: the baseline model has {baseline.n_samples} predictions, the new model "
            f"{new.n_samples} and there are {time.size} outcomes; all three must describe the "
            "same patients in the same order."
        )
    t0 = _check_single_horizon(time, event, t0, where)
    s_all = float(_weighted_km_at(time, event, t0, np.ones(time.size)))
    if s_all <= 0.0:
        raise MetricError(
            f"{where}: the Kaplan-Meier estimate says every patient has had the event by "
            f"{t0:g}, so no one is event-free to compare. Choose an earlier horizon."
        )
    return time, event, t0, baseline.risk_at(t0), new.risk_at(t0), s_all


def continuous_nri(
    y: np.ndarray, baseline: SurvivalCurves, new: SurvivalCurves, t0: float
) -> NRIResult:
    """Category-free net reclassification index at horizon ``t0``.

    A patient moves "up" if the new model's risk ``1 - S(t0|x)`` is strictly
    higher than the baseline model's, "down" if strictly lower. With ``S`` the
    Kaplan-Meier survival at ``t0`` in all patients, ``S_up`` and ``S_down``
    within the up and down groups and ``n_up / n``, ``n_down / n`` their shares,
    Bayes' rule gives

    .. math::

        P(up | D) = \\frac{(1 - S_{up}) n_{up}/n}{1 - S}, \\qquad
        P(up | \\bar D) = \\frac{S_{up}\\, n_{up}/n}{S},

    and likewise for "down", where ``D`` is an event by ``t0``. This is the
    Kaplan-Meier estimator for survival data of Pencina et al. (2011); it needs
    censoring to be independent of the event time within the up and down groups.
    Because the three Kaplan-Meier curves are fitted separately,
    ``P(up | D) + P(down | D)`` can differ slightly from 1 even without ties.

    Parameters
    ----------
    y : structured array of shape (n,)
    baseline, new : SurvivalCurves
        Predicted survival of the same patients from the two models.
    t0 : float
        Horizon, in the time unit of ``y``.

    Returns
    -------
    NRIResult

    References
    ----------
    .. [1] Pencina MJ, D'Agostino RB Sr, Steyerberg EW. Extensions of net
           reclassification improvement calculations to measure usefulness of
           new biomarkers. Stat Med 2011;30:11-21.
    .. [2] Kerr KF, Wang Z, Janes H, McClelland RL, Psaty BM, Pepe MS. Net
           reclassification indices for evaluating risk prediction instruments:
           a critical review. Epidemiology 2014;25:114-21.
    """
    time, event, t0, r_old, r_new, s_all = _paired_risks(y, baseline, new, t0, "continuous_nri")
    n = time.size
    groups = np.column_stack([r_new > r_old, r_new < r_old]).astype(float)
    share = groups.sum(axis=0) / n
    s_grp = _weighted_km_at(time, event, t0, groups)
    p_event = (1.0 - s_grp) * share / (1.0 - s_all)
    p_nonevent = s_grp * share / s_all
    nri_ev = float(p_event[0] - p_event[1])
    nri_ne = float(p_nonevent[1] - p_nonevent[0])
    n_up, n_down = (int(c) for c in groups.sum(axis=0))
    return NRIResult(
        t0=t0,
        nri=nri_ev + nri_ne,
        nri_events=nri_ev,
        nri_nonevents=nri_ne,
        p_up_events=float(p_event[0]),
        p_down_events=float(p_event[1]),
        p_up_nonevents=float(p_nonevent[0]),
        p_down_nonevents=float(p_nonevent[1]),
        n_up=n_up,
        n_down=n_down,
        n_unchanged=n - n_up - n_down,
    )


def integrated_discrimination(
    y: np.ndarray, baseline: SurvivalCurves, new: SurvivalCurves, t0: float
) -> IDIResult:
    """Integrated discrimination improvement at horizon ``t0``.

    The mean predicted risk among patients with an event by ``t0`` is
    :math:`E[p\\,I(D)] / P(D)`. The same Bayes-rule step used for the NRI,
    with the predicted risk ``p`` as a case weight instead of a 0/1 group
    indicator, gives :math:`E[p\\,I(D)] = \\bar p\\,(1 - S_p(t_0))`, where
    :math:`S_p` is the Kaplan-Meier estimate with case weights ``p`` and
    :math:`\\bar p` the mean risk. Hence

    .. math::

        E[p | D] = \\frac{\\bar p (1 - S_p)}{1 - S}, \\qquad
        E[p | \\bar D] = \\frac{\\bar p\\, S_p}{S},

    and IDI = (E[p_new|D] - E[p_old|D]) + (E[p_old|not D] - E[p_new|not D]).
    The weighted Kaplan-Meier step assumes censoring independent of the event
    time and of the predicted risks. Without censoring before ``t0`` this equals
    the plain difference of group means of Pencina et al. (2008).

    Parameters
    ----------
    y, baseline, new, t0
        As in :func:`continuous_nri`.

    Returns
    -------
    IDIResult

    References
    ----------
    .. [1] Pencina MJ, D'Agostino RB Sr, D'Agostino RB Jr, Vasan RS. Evaluating
           the added predictive ability of a new marker: from area under the ROC
           curve to reclassification and beyond. Stat Med 2008;27:157-72.
    .. [2] Pencina MJ, D'Agostino RB Sr, Steyerberg EW. Stat Med 2011;30:11-21.
    .. [3] Hilden J, Gerds TA. A note on the evaluation of novel biomarkers: do
           not rely on integrated discrimination improvement and net
           reclassification index. Stat Med 2014;33:3405-14.
    """
    time, event, t0, r_old, r_new, s_all = _paired_risks(
        y, baseline, new, t0, "integrated_discrimination"
    )
    risks = np.column_stack([r_old, r_new])
    mean_risk = risks.mean(axis=0)
    s_w = _weighted_km_at(time, event, t0, risks)
    m_event = mean_risk * (1.0 - s_w) / (1.0 - s_all)
    m_nonevent = mean_risk * s_w / s_all
    idi_ev = float(m_event[1] - m_event[0])
    idi_ne = float(m_nonevent[0] - m_nonevent[1])
    slopes = m_event - m_nonevent
    return IDIResult(
        t0=t0,
        idi=idi_ev + idi_ne,
        idi_events=idi_ev,
        idi_nonevents=idi_ne,
        slope_baseline=float(slopes[0]),
        slope_new=float(slopes[1]),
    )


def reclassification_at(
    y: np.ndarray, baseline: SurvivalCurves, new: SurvivalCurves, t0: float
) -> ReclassificationResult:
    """Continuous NRI and IDI of ``new`` against ``baseline`` at ``t0``.

    See :func:`continuous_nri` and :func:`integrated_discrimination` for the
    estimators and their references.
    """
    return ReclassificationResult(
        nri=continuous_nri(y, baseline, new, t0),
        idi=integrated_discrimination(y, baseline, new, t0),
        baseline_model=getattr(baseline, "model", ""),
        new_model=getattr(new, "model", ""),
    )
