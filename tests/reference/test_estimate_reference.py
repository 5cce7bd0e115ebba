"""Individual-patient estimates against outside references.

- Point estimates: the Rossi recidivism data (lifelines ``load_rossi``; Fox's appendix
  to An R and S-PLUS Companion to Applied Regression) through ``estimate_patient``
  against scikit-survival 0.28 ``CoxPHSurvivalAnalysis(ties="breslow")``, whose
  ``predict_survival_function`` uses the Breslow baseline estimator.
- Intervals: lifelines' ``CoxPHFitter`` reports no interval for an individual's
  predicted survival (its ``predict_survival_function`` returns point values only),
  so the delta-method limits are checked (a) by a seeded parametric simulation from
  a known Cox model, whose true S(t | x) the 95% limits must cover about 95% of the
  time (Link, Biometrics 1984; Therneau & Grambsch 2000, section 10.2), and (b) on
  the demo cohort against the percentile limits of 200 nonparametric bootstrap
  refits of the clinical model (Efron & Tibshirani 1993, chapter 13).
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from lifelines.datasets import load_rossi
from sksurv.linear_model import CoxPHSurvivalAnalysis

from workbench.cohort.core import Cohort
from workbench.cohort.outcome import make_outcome
from workbench.estimate import estimate_patient, ranges_from_model, refit_bootstrap
from workbench.models.cox import ClinicalCox
from workbench.models.registry import build_models
from workbench.prepare import prepare_cohort
from workbench.preprocess.clinical import PredictorSpec
from workbench.report.bundle_training import summarise_training
from workbench.study import read_study

REPO = Path(__file__).resolve().parents[2]
ROSSI_COLS = ["fin", "age", "race", "wexp", "mar", "paro", "prio"]


def _cohort(clinical: pd.DataFrame, time, event, time_unit="weeks") -> Cohort:
    n = len(clinical)
    return Cohort(ids=np.arange(n).astype(str), y=make_outcome(time, event),
                  clinical=clinical.reset_index(drop=True), features=pd.DataFrame(index=range(n)),
                  time_unit=time_unit)


def test_rossi_point_estimates_match_scikit_survival():
    rossi = load_rossi()
    cohort = _cohort(rossi[ROSSI_COLS], rossi["week"], rossi["arrest"])
    model = ClinicalCox(tuple(PredictorSpec(c) for c in ROSSI_COLS), ties="breslow").fit(cohort)
    X = rossi[ROSSI_COLS].astype(float)
    sk = CoxPHSurvivalAnalysis(ties="breslow").fit(X, make_outcome(rossi["week"], rossi["arrest"]))
    weeks = [10.0, 26.0, 52.0]
    rows = range(0, len(rossi), 37)
    ours = np.array([[h.survival for h in estimate_patient(model, rossi.loc[i, ROSSI_COLS].to_dict(), weeks,
                                                             training_ranges=ranges_from_model(model)).horizons]
                     for i in rows])
    theirs = np.array([fn(weeks) for fn in sk.predict_survival_function(X.iloc[list(rows)])])
    np.testing.assert_allclose(ours, theirs, rtol=0, atol=1e-6)


def test_delta_limits_cover_the_true_survival_in_a_known_cox_model():
    # Seeded simulation: hazard 0.04/month x exp(0.7 a + 0.5 b), a ~ Bernoulli(1/2),
    # b ~ N(0, 1), uniform censoring on 12-60 months; the patient has a = 1, b = 0.5.
    beta, lam, horizons = np.array([0.7, 0.5]), 0.04, np.array([12.0, 24.0])
    truth = np.exp(-lam * horizons * np.exp(beta @ [1.0, 0.5]))
    predictors = (PredictorSpec("a"), PredictorSpec("b"))
    rng = np.random.default_rng(20240611)
    reps, n, covered = 400, 300, np.zeros(horizons.size)
    for _ in range(reps):
        a, b = rng.binomial(1, 0.5, n).astype(float), rng.standard_normal(n)
        t_event = rng.exponential(1.0 / (lam * np.exp(beta[0] * a + beta[1] * b)))
        t_cens = rng.uniform(12.0, 60.0, n)
        cohort = _cohort(pd.DataFrame({"a": a, "b": b}), np.minimum(t_event, t_cens), t_event <= t_cens, "months")
        est = estimate_patient(ClinicalCox(predictors).fit(cohort), {"a": 1.0, "b": 0.5}, horizons)
        lo = np.array([h.lower for h in est.horizons])
        hi = np.array([h.upper for h in est.horizons])
        covered += (lo <= truth) & (truth <= hi)
    # binomial SD of the coverage over 400 replicates is 0.011; allow about 3 SD
    np.testing.assert_allclose(covered / reps, 0.95, atol=0.035)


@pytest.mark.slow
def test_delta_limits_agree_with_bootstrap_percentiles_on_the_demo_cohort():
    spec = read_study(REPO / "demo_cohort" / "study.toml")
    cohort = prepare_cohort(spec).cohort
    model = build_models(spec)["clinical"].fit(cohort)
    ranges = ranges_from_model(model, summarise_training(cohort, {"clinical": model}, spec.horizons))
    lean = cohort.take(np.arange(cohort.n))
    lean = Cohort(lean.ids, lean.y, lean.clinical, pd.DataFrame(index=range(cohort.n)), lean.time_unit)
    refits = refit_bootstrap(model, lean, 200, random_state=20241202)
    risk = model.predict_risk(cohort).values
    # a low-, a middle- and a high-risk training patient
    picks = np.argsort(risk)[[cohort.n // 10, cohort.n // 2, 9 * cohort.n // 10]]
    for i in picks:
        row = {p.column: cohort.clinical[p.column].iloc[i] for p in spec.predictors}
        delta = estimate_patient(model, row, spec.horizons, training_ranges=ranges)
        boot = estimate_patient(model, row, spec.horizons, training_ranges=ranges, method="bootstrap",
                                bootstrap_models=refits)
        for d, b in zip(delta.horizons, boot.horizons, strict=True):
            assert d.survival == b.survival
            # tolerance 0.03 on the survival scale: Monte Carlo error of a 2.5th percentile
            # from 200 refits plus the delta method's normal approximation
            assert abs(d.lower - b.lower) <= 0.03, (i, d, b)
            assert abs(d.upper - b.upper) <= 0.03, (i, d, b)
