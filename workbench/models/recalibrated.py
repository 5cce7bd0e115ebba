"""A Cox-type model recalibrated for a new site, as a model that can be saved in a bundle.

The original model is kept unchanged; only its linear predictor's scale and the
baseline hazard are re-estimated on the new site's patients (Steyerberg,
Clinical Prediction Models, 2nd ed. 2019, ch. 20; van Houwelingen, Stat Med
2000;19:3401-15):

* ``"intercept"``: baseline hazard re-estimated with the linear predictor as a
  fixed offset (slope 1) -- calibration-in-the-large at every horizon;
* ``"slope"``: a Cox model of the new outcome on the linear predictor; its
  coefficient rescales the linear predictor, and the baseline is re-estimated.

Predictions: S(t | x) = S0_new(t) ** exp(slope * (lp(x) - centre)).
"""

from __future__ import annotations

import numpy as np

from workbench.cohort.core import Cohort
from workbench.errors import ModelError
from workbench.models.base import as_times
from workbench.predictions import RiskScores, SurvivalCurves
from workbench.stats.coxph import fit_coxph, predict_survival

__all__ = ["RECALIBRATION_METHODS", "RecalibratedModel"]

RECALIBRATION_METHODS = ("intercept", "slope")


class RecalibratedModel:
    """A fitted Cox-type model with its baseline hazard (and slope) updated on a new site.

    Parameters
    ----------
    base : fitted model with ``predict_risk`` returning its linear predictor
    method : {"intercept", "slope"}
    name : str, optional
    """

    def __init__(self, base, method: str = "intercept", name: str | None = None):
        self.base = base
        self.method = method
        self.name = name

    def fit(self, cohort: Cohort) -> RecalibratedModel:
        if self.method not in RECALIBRATION_METHODS:
            raise ModelError(f"recalibration method {self.method!r} is not known; choose 'intercept' or 'slope'.")
        lp = np.asarray(self.base.predict_risk(cohort).values, dtype=float)
        self.centre_ = float(lp.mean())
        x = (lp - self.centre_)[:, None]
        if self.method == "intercept":
            self.fit_ = fit_coxph(np.empty((lp.size, 0)), cohort.time, cohort.event, offset=x[:, 0],
                                  min_events_per_parameter=0)
            self.slope_, self.slope_se_ = 1.0, 0.0
        else:
            self.fit_ = fit_coxph(x, cohort.time, cohort.event, names=["linear_predictor"],
                                  min_events_per_parameter=0)
            self.slope_, self.slope_se_ = float(self.fit_.coef[0]), float(self.fit_.se[0])
        return self

    def _x(self, cohort: Cohort) -> np.ndarray:
        return np.asarray(self.base.predict_risk(cohort).values, dtype=float) - self.centre_

    def predict_risk(self, cohort: Cohort) -> RiskScores:
        return RiskScores(self.slope_ * self._x(cohort), model=self.name or "")

    def predict_survival(self, cohort: Cohort, times) -> SurvivalCurves:
        t = as_times(times)
        x = self._x(cohort)
        if self.method == "intercept":
            probs = predict_survival(self.fit_, np.empty((x.size, 0)), t, offset=x)
        else:
            probs = predict_survival(self.fit_, x[:, None], t)
        return SurvivalCurves(t, probs, model=self.name or "")
