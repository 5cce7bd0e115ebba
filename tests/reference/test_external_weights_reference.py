"""External validation weights: IPCW Brier score and AUC with EVALUATION-cohort censoring weights.

Source: scikit-survival 0.28 ``sksurv.metrics.brier_score`` and
``cumulative_dynamic_auc`` called with ``survival_train = survival_test =`` the
external part, which makes the library estimate the censoring distribution on
the external rows. Data: GBSG2 (``sksurv.datasets.load_gbsg2``) split by a
covariate into a "development" part (premenopausal) and an "external" part
(postmenopausal); a Cox model (``CoxPHSurvivalAnalysis``) fitted on the
development part gives the predictions. Censorings that share a time with an
event are moved by half a day (the library uses G(T), we use the left limit
G(T-); see tests/reference/test_brier_reference.py).

Stratified (per-centre) weights: the Brier score is a mean of per-patient terms,
so with a Kaplan-Meier curve per stratum it equals the size-weighted mean of the
library's Brier score computed within each stratum, an exact external check.
"""

from __future__ import annotations

import numpy as np
import pytest
from sksurv.datasets import load_gbsg2
from sksurv.linear_model import CoxPHSurvivalAnalysis
from sksurv.metrics import brier_score as sk_brier
from sksurv.metrics import cumulative_dynamic_auc
from sksurv.preprocessing import OneHotEncoder

from workbench.cohort import make_outcome
from workbench.metrics.censoring import row_censoring
from workbench.predictions import RiskScores, SurvivalCurves
from workbench.validation.external import evaluate_cohort

H = np.array([730.0, 1095.0, 1460.0])


def _untie(y):
    y = y.copy()
    ev = np.unique(y["time"][y["cens"]])
    clash = ~y["cens"] & np.isin(y["time"], ev)
    y["time"] = np.where(clash, y["time"] + 0.5, y["time"])
    return y


@pytest.fixture(scope="module")
def split():
    X, y = load_gbsg2()
    y = _untie(y)
    post = (X["menostat"] == "Post").to_numpy()
    Xe = OneHotEncoder().fit_transform(X.drop(columns="menostat"))
    model = CoxPHSurvivalAnalysis(ties="efron").fit(Xe[~post], y[~post])
    risk = model.predict(Xe[post])
    grid = np.unique(np.r_[H, y["time"][post][y["cens"][post] & (y["time"][post] <= H[-1])]])
    curves = np.vstack([f(grid) for f in model.predict_survival_function(Xe[post])])
    # a second grouping for the stratified check: tumour grade in the external part
    grade = X["tgrade"].astype(str).to_numpy()[post]
    return y[~post], y[post], risk, grid, curves, grade


def test_external_brier_and_auc_use_the_external_censoring(split):
    y_dev, y_ext, risk, grid, curves, _ = split
    yy = make_outcome(y_ext["time"], y_ext["cens"])
    preds = {"cox": (RiskScores(risk), SurvivalCurves(grid, curves))}
    kw = {"tau": None, "calibration": False, "thresholds": None, "time_unit": "days"}
    perf = evaluate_cohort(preds, yy, None, "km", H, grid, kw)["cox"]
    pos = np.searchsorted(grid, H)
    _, ref_bs = sk_brier(y_ext, y_ext, curves[:, pos], H)
    np.testing.assert_allclose(perf.brier, ref_bs, rtol=0, atol=1e-12)
    ref_auc, _ = cumulative_dynamic_auc(y_ext, y_ext, risk, H)
    np.testing.assert_allclose(perf.auc, ref_auc, rtol=0, atol=1e-10)
    # and development-cohort weights would have given other numbers (the bug this replaces)
    _, dev_bs = sk_brier(y_dev, y_ext, curves[:, pos], H)
    assert np.max(np.abs(dev_bs - ref_bs)) > 1e-4


def test_stratified_weights_equal_the_weighted_mean_of_per_stratum_brier(split):
    _, y_ext, risk, grid, curves, grade = split
    yy = make_outcome(y_ext["time"], y_ext["cens"])
    pos = np.searchsorted(grid, H)
    t = H[:2]  # inside every grade's follow-up
    cens = row_censoring(yy, "km_by_centre", strata=grade)
    from workbench.metrics.brier import brier_score

    ours = brier_score(yy, yy, SurvivalCurves(grid, curves), t, censoring=cens).brier
    ref = np.zeros(t.size)
    for g in np.unique(grade):
        m = grade == g
        ref += m.sum() / m.size * sk_brier(y_ext[m], y_ext[m], curves[m][:, pos[:2]], t)[1]
    np.testing.assert_allclose(ours, ref, rtol=0, atol=1e-12)
