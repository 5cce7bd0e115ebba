"""Shared pieces of the validation benchmarks: a seeded generator with a known truth,
small models following the workbench model protocol, and the true C of a fitted model.

Generator: three correlated covariates (x1 clinical-like, x2 clinical-like, x3 an
"imaging" covariate correlated 0.4 with x1), a proportional-hazards truth with log
hazard ratios (0.6, 0.4, 0.35), a Weibull baseline (shape 1.2) and uniform censoring,
about 55-60% events by the end of follow-up. Horizons 1, 2 and 3 (time units).
Imported by bench/bench_intervals.py, bench/bench_forest_validation.py and the reduced
property tests in tests/properties/test_validation_simulation.py.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from workbench.cohort import Cohort, make_outcome
from workbench.metrics.concordance import harrell_c
from workbench.models.base import as_times
from workbench.predictions import RiskScores, SurvivalCurves
from workbench.stats.coxph import fit_coxph, linear_predictor, predict_survival

BETA = np.array([0.6, 0.4, 0.35])
HORIZONS = [1.0, 2.0, 3.0]
TRUTH_N = 20_000


def simulate(n: int, seed: int, beta=BETA, nonlinear: float = 0.0, censor: bool = True) -> Cohort:
    """One cohort of ``n`` patients; ``nonlinear`` adds a term in x1**2 and x1*x2 (for the forest).

    ``censor=False`` keeps every true event time (a truth sample)."""
    rng = np.random.default_rng(seed)
    z = rng.standard_normal((n, 3))
    x = z.copy()
    x[:, 2] = 0.4 * z[:, 0] + np.sqrt(1 - 0.16) * z[:, 2]
    eta = x @ np.asarray(beta) + nonlinear * (x[:, 0] ** 2 - 1 + x[:, 0] * x[:, 1])
    t = (rng.exponential(size=n) / (0.35 * np.exp(eta))) ** (1 / 1.2)
    c = rng.uniform(0.5, 4.0, size=n) if censor else np.full(n, np.inf)
    feats = pd.DataFrame(x, columns=["x1", "x2", "x3"])
    return Cohort(
        ids=np.array([f"P{seed}-{i}" for i in range(n)]),
        y=make_outcome(np.minimum(t, c), t <= c),
        clinical=pd.DataFrame(index=range(n)),
        features=feats,
        time_unit="years",
    )


class SmallCox:
    """Unpenalised Cox model on named feature columns (workbench model protocol)."""

    def __init__(self, columns=("x1", "x2"), name="cox"):
        self.columns = columns
        self.name = name

    def fit(self, cohort):
        X = cohort.features[list(self.columns)].to_numpy(float)
        self.fit_ = fit_coxph(X, cohort.time, cohort.event, names=list(self.columns), min_events_per_parameter=0)
        return self

    def _X(self, cohort):
        return cohort.features[list(self.columns)].to_numpy(float)

    def predict_risk(self, cohort):
        return RiskScores(linear_predictor(self.fit_, self._X(cohort)), self.name)

    def predict_survival(self, cohort, times):
        t = as_times(times)
        return SurvivalCurves(t, predict_survival(self.fit_, self._X(cohort), t), self.name)


class SmallForest:
    """Random survival forest on the three covariates (workbench model protocol)."""

    apparent_fit_interpolates = True

    def __init__(self, n_estimators=100, min_samples_leaf=5, random_state=None, name="forest"):
        self.n_estimators = n_estimators
        self.min_samples_leaf = min_samples_leaf
        self.random_state = random_state
        self.name = name

    def fit(self, cohort):
        from workbench.models.forest import SurvivalForest

        self.forest_ = SurvivalForest(n_estimators=self.n_estimators, min_samples_leaf=self.min_samples_leaf,
                                      random_state=self.random_state)
        self.forest_.fit(cohort.features[["x1", "x2", "x3"]].to_numpy(float), cohort.y)
        return self

    def predict_risk(self, cohort):
        return RiskScores(self.forest_.predict_risk(cohort.features[["x1", "x2", "x3"]].to_numpy(float)), self.name)

    def predict_survival(self, cohort, times):
        return self.forest_.predict_survival_curves(cohort.features[["x1", "x2", "x3"]].to_numpy(float),
                                                    as_times(times))


def true_c(fitted, fresh: Cohort) -> float:
    """Harrell's C of a fitted model on a large fresh sample of the same generator."""
    return float(harrell_c(fresh.y, fitted.predict_risk(fresh)).c_index)


def mc_se_prop(p: float, r: int) -> float:
    return float(np.sqrt(p * (1 - p) / r))


def true_metrics(fitted: dict, fresh: Cohort, horizon, baseline: str | None = None,
                 calibration: bool = True) -> dict:
    """Every scalar metric of each fitted model on a large uncensored fresh sample (the conditional truth).

    ``fresh`` has no censoring (``simulate(..., censor=False)``), so the IPCW metrics reduce to
    their plain versions; the null model of the Brier score / IPA is the fresh sample's own
    Kaplan-Meier curve (the population marginal survival). The integrated Brier score uses 41
    equally spaced times from horizon/40 to the horizon. With ``baseline``, also the model-minus-
    baseline NRI and IDI (``evaluate_pair``) under the key ``(model, baseline)``; ``calibration=False``
    leaves the calibration metrics NaN (faster). ``horizon`` may be a list of horizons (then the
    mean AUC over them is defined, and the integration grid runs to the last one).
    Returns ``{model: {metric: value}}`` (plus the pair entries).
    """
    from workbench.validation.evaluate import evaluate_pair, evaluate_predictions

    h = np.atleast_1d(np.asarray(horizon, dtype=float))
    grid = np.linspace(h[-1] / 40, h[-1], 41)
    curves = {nm: m.predict_survival(fresh, np.unique(np.r_[grid, h])) for nm, m in fitted.items()}
    out = {nm: evaluate_predictions(m.predict_risk(fresh), curves[nm], fresh.y, fresh.y, h,
                                    ibs_times=grid, thresholds=[0.5], calibration=calibration,
                                    model=nm).scalars()
           for nm, m in fitted.items()}
    if baseline is not None:
        for nm in fitted:
            if nm != baseline:
                out[(nm, baseline)] = evaluate_pair(curves[nm], curves[baseline], fresh.y, h).scalars()
    return out
