"""Recalibration on a new cohort, checked against lifelines on the Rossi data (lifelines `load_rossi`)."""

from __future__ import annotations

import numpy as np
import pytest
from lifelines import CoxPHFitter
from lifelines.datasets import load_rossi

from workbench.cohort import make_outcome
from workbench.errors import MetricError
from workbench.predictions import RiskScores
from workbench.validation.recalibrate import recalibrate


@pytest.fixture(scope="module")
def rossi():
    df = load_rossi()
    y = make_outcome(df["week"], df["arrest"])
    # a "transported" score: prio and age with deliberately inflated weights
    lp = 0.2 * df["prio"].to_numpy() - 0.1 * df["age"].to_numpy()
    return df, y, lp


def test_slope_equals_a_cox_fit_on_the_linear_predictor(rossi):
    df, y, lp = rossi
    res = recalibrate(RiskScores(lp, "m"), y, [20, 40], "slope")
    d = df[["week", "arrest"]].assign(lp=lp - lp.mean())
    lf = CoxPHFitter().fit(d, "week", "arrest")
    assert res.slope == pytest.approx(lf.params_["lp"], abs=1e-5)
    assert res.slope_se == pytest.approx(lf.standard_errors_["lp"], abs=1e-5)
    assert 0 < res.slope < 1  # the inflated weights are shrunk


def test_intercept_keeps_ranking_and_matches_observed_risk(rossi):
    _, y, lp = rossi
    grid = np.unique(y["time"])
    res = recalibrate(RiskScores(lp, "m"), y, grid, "intercept")
    s = res.curves.at(52)
    # ranking unchanged: survival decreases with the linear predictor
    assert np.corrcoef(s, lp)[0, 1] < -0.9
    assert res.slope == 1.0
    # A baseline hazard re-estimated with the score as offset makes expected events match
    # observed: sum_i H(T_i | x_i) = number of events (the Breslow-estimator identity;
    # Efron-tied increments, used here, differ slightly at tied times).
    idx = np.searchsorted(grid, y["time"])
    cumhaz = -np.log(res.curves.probs[np.arange(len(y)), idx])
    assert cumhaz.sum() == pytest.approx(y["event"].sum(), rel=0.01)


def test_bad_method(rossi):
    _, y, lp = rossi
    with pytest.raises(MetricError, match="choose 'intercept' or 'slope'"):
        recalibrate(RiskScores(lp), y, [10], "isotonic")
