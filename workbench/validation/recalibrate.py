"""Recalibration of a fitted model on a new cohort (intercept, or intercept and slope).

When a model travels to another hospital its ranking of patients may hold while
its absolute risks drift (a different baseline hazard), or its risks may be too
extreme (coefficients too large for the new population). The usual updating
methods, in increasing order of change (Steyerberg, Clinical Prediction Models,
2nd ed. 2019, ch. 20; van Houwelingen, Stat Med 2000):

* ``"intercept"``: keep the linear predictor, re-estimate the baseline hazard on
  the new cohort (a Cox model with the linear predictor as a fixed offset);
* ``"slope"``: fit a Cox model of the new outcome on the linear predictor; its
  coefficient is the calibration slope, and the baseline is re-estimated too.

Performance of a recalibrated model measured on the cohort it was recalibrated
on is apparent, not validated; results say so.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from workbench.cohort.outcome import split_outcome
from workbench.errors import MetricError
from workbench.predictions import RiskScores, SurvivalCurves
from workbench.stats.coxph import fit_coxph, predict_survival

METHODS = ("intercept", "slope")


@dataclass(frozen=True)
class RecalibrationResult:
    """A recalibrated model's predictions on the new cohort.

    Attributes
    ----------
    method : {"intercept", "slope"}
    slope, slope_se : float
        Coefficient of the original linear predictor (1 for ``"intercept"``).
    curves : SurvivalCurves
        Recalibrated survival predictions for the new cohort's patients.
    note : str
    """

    method: str
    slope: float
    slope_se: float
    curves: SurvivalCurves
    note: str = (
        "Recalibrated on the same cohort it is evaluated on: apparent performance, "
        "optimistic for other patients from this hospital."
    )


def recalibrate(risk: RiskScores, y, times, method: str = "intercept") -> RecalibrationResult:
    """Recalibrate a model's linear predictor on a new cohort.

    Parameters
    ----------
    risk : RiskScores
        The model's linear predictor for the new cohort (a Cox-type score; a
        forest's cumulative-hazard sum is not a linear predictor and should not
        be recalibrated this way).
    y : outcome array of the new cohort
    times : array-like
        Times at which to predict.
    method : {"intercept", "slope"}
    """
    if method not in METHODS:
        raise MetricError(f"recalibration method {method!r} is not known; choose 'intercept' or 'slope'.")
    if not isinstance(risk, RiskScores):
        raise MetricError("recalibrate needs RiskScores (a model's linear predictor), not raw arrays.")
    time, event = split_outcome(y)
    lp = risk.values - risk.values.mean()
    t = np.unique(np.atleast_1d(np.asarray(times, float)))
    if method == "intercept":
        fit = fit_coxph(np.empty((lp.size, 0)), time, event, offset=lp, min_events_per_parameter=0)
        probs = predict_survival(fit, np.empty((lp.size, 0)), t, offset=lp)
        slope, se = 1.0, 0.0
    else:
        fit = fit_coxph(lp[:, None], time, event, names=["linear_predictor"], min_events_per_parameter=0)
        probs = predict_survival(fit, lp[:, None], t)
        slope, se = float(fit.coef[0]), float(fit.se[0])
    return RecalibrationResult(method, slope, se, SurvivalCurves(t, probs, f"{risk.model} ({method} recalibrated)"))
