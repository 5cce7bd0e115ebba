"""With no competing events each competing-risks metric equals the ordinary one on 1 - S.

Data: scikit-survival's GBSG2 trial (one event type), predictions from the project's
Cox fitter on a training half, evaluated on the other half.
"""

import numpy as np
import pandas as pd
import pytest
from sksurv.datasets import load_gbsg2

from workbench.cohort.outcome import make_outcome
from workbench.competing.metrics import (
    competing_auc,
    competing_brier,
    competing_grouped_calibration,
    competing_net_benefit,
    competing_smoothed_calibration,
)
from workbench.competing.outcome import IncidenceCurves, make_competing_outcome
from workbench.metrics.brier import brier_score
from workbench.metrics.calibration import grouped_calibration, smoothed_calibration
from workbench.metrics.decision import net_benefit
from workbench.metrics.td_auc import time_dependent_auc
from workbench.predictions import RiskScores, SurvivalCurves
from workbench.stats.coxph import fit_coxph, predict_survival

TOL = 1e-10


@pytest.fixture(scope="module")
def gbsg2():
    X, y = load_gbsg2()
    D = pd.DataFrame({
        "age": X["age"], "size": X["tsize"], "nodes": X["pnodes"], "pgr": np.log1p(X["progrec"]),
        "hormone": (X["horTh"] == "yes").astype(float),
    }).astype(float)
    t, e = y["time"].astype(float), y["cens"].astype(bool)
    train = np.arange(t.size) % 2 == 0
    fit = fit_coxph(D[train], t[train], e[train])
    grid = np.unique(t)
    surv = predict_survival(fit, D[~train], grid)
    return {
        "y_tr": make_outcome(t[train], e[train]), "y_te": make_outcome(t[~train], e[~train]),
        "c_tr": make_competing_outcome(t[train], e[train].astype(int)),
        "c_te": make_competing_outcome(t[~train], e[~train].astype(int)),
        "curves": SurvivalCurves(grid, surv), "inc": IncidenceCurves(grid, 1.0 - surv, cause=1),
    }


@pytest.mark.parametrize("t0", [365.0, 730.0, 1460.0])
def test_auc_equals_cumulative_dynamic_auc(gbsg2, t0):
    ours = competing_auc(gbsg2["c_tr"], gbsg2["c_te"], gbsg2["inc"], t0)
    ref = time_dependent_auc(gbsg2["y_tr"], gbsg2["y_te"], RiskScores(gbsg2["curves"].risk_at(t0)), [t0])
    assert ours.n_controls_competing == 0
    assert abs(ours.auc - ref.auc[0]) < TOL
    assert abs(ours.std_err - ref.std_err[0]) < TOL


def test_auc_standard_error_on_the_same_sample(gbsg2):
    # apparent performance: training and evaluation rows are the same patients
    ours = competing_auc(gbsg2["c_te"], gbsg2["c_te"], gbsg2["inc"], 730.0)
    ref = time_dependent_auc(gbsg2["y_te"], gbsg2["y_te"], RiskScores(gbsg2["curves"].risk_at(730.0)), [730.0])
    assert abs(ours.auc - ref.auc[0]) < TOL
    assert abs(ours.std_err - ref.std_err[0]) < TOL


def test_brier_and_ipa_equal_survival_brier(gbsg2):
    times = [365.0, 730.0, 1460.0]
    ours = competing_brier(gbsg2["c_tr"], gbsg2["c_te"], gbsg2["inc"], times)
    ref = brier_score(gbsg2["y_tr"], gbsg2["y_te"], gbsg2["curves"], times)
    np.testing.assert_allclose(ours.brier, ref.brier, rtol=0, atol=TOL)
    np.testing.assert_allclose(ours.null_brier, ref.null_brier, rtol=0, atol=TOL)
    np.testing.assert_allclose(ours.ipa, ref.ipa, rtol=0, atol=TOL)


def test_grouped_calibration_equals_km_groups(gbsg2):
    ours = competing_grouped_calibration(gbsg2["c_te"], gbsg2["inc"], 1460.0)
    ref = grouped_calibration(gbsg2["y_te"], gbsg2["curves"], 1460.0)
    for f in ("n", "events", "mean_predicted", "observed", "edges"):
        np.testing.assert_allclose(getattr(ours, f), getattr(ref, f), rtol=0, atol=TOL)
    # Intervals differ by design: log(-log F) here, log(-log S) for Kaplan-Meier.


def test_smoothed_calibration_equals_cox_ici(gbsg2):
    ours = competing_smoothed_calibration(gbsg2["c_te"], gbsg2["inc"], 1460.0)
    ref = smoothed_calibration(gbsg2["y_te"], gbsg2["curves"], 1460.0)
    for f in ("ici", "e50", "e90", "emax"):
        assert abs(getattr(ours, f) - getattr(ref, f)) < TOL, f
    np.testing.assert_allclose(ours.grid_observed, ref.grid_observed, rtol=0, atol=TOL)


def test_net_benefit_equals_survival_decision_curve(gbsg2):
    ours = competing_net_benefit(gbsg2["c_te"], gbsg2["inc"], 1460.0)
    ref = net_benefit(gbsg2["y_te"], gbsg2["curves"], 1460.0)
    for f in ("net_benefit", "treat_all", "proportion_treated"):
        np.testing.assert_allclose(getattr(ours, f), getattr(ref, f), rtol=0, atol=TOL)
    assert abs(ours.event_risk - ref.event_risk) < TOL
