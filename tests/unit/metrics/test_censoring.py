"""Censoring weights of the evaluation rows: choice of model and the per-row G(t | x).

References: the log-rank test of the censoring times is checked against
lifelines.statistics.multivariate_logrank_test on the reversed indicator; the
Cox censoring model against lifelines.CoxPHFitter on GBSG2 (scikit-survival
dataset) with the reversed indicator, continuous-time data (no ties, so the
Breslow and Efron partial likelihoods coincide).
"""

from __future__ import annotations

import numpy as np
import pytest

from workbench.cohort import make_outcome
from workbench.errors import MetricError
from workbench.metrics._ipcw import fit_censoring
from workbench.metrics.censoring import choose_censoring, row_censoring


def _two_centres(rng, n=400, short=20.0, long=100.0):
    c = np.repeat(["A", "B"], n // 2)
    t = rng.exponential(60.0, n)
    cens = np.where(c == "A", rng.uniform(0, short, n), rng.uniform(0, long, n))
    return make_outcome(np.minimum(t, cens), t <= cens), c


def test_auto_stratifies_when_censoring_differs_between_centres():
    from lifelines.statistics import multivariate_logrank_test

    y, c = _two_centres(np.random.default_rng(1))
    ch = choose_censoring(y, c, "auto")
    assert ch.method == "km_by_centre" and ch.requested == "auto" and ch.p_value < 0.05
    ref = multivariate_logrank_test(y["time"], c, ~y["event"])
    assert ch.statistic == pytest.approx(ref.test_statistic, rel=1e-8)
    assert "differs between centres" in ch.reason


def test_auto_keeps_one_curve_when_censoring_is_alike_or_one_centre():
    y, c = _two_centres(np.random.default_rng(2), short=100.0, long=100.0)
    ch = choose_censoring(y, c, "auto")
    assert ch.method == "km" and ch.p_value >= 0.05 and "no evidence" in ch.reason
    assert choose_censoring(y, None, "auto").method == "km"
    with pytest.raises(MetricError, match="needs a centre column"):
        choose_censoring(y, None, "km_by_centre")
    with pytest.raises(MetricError, match="unknown censoring method"):
        choose_censoring(y, c, "weibull")


def test_km_rows_equal_the_single_curve_and_strata_use_their_own():
    y, c = _two_centres(np.random.default_rng(3))
    one = row_censoring(y, "km")
    g = fit_censoring(y)
    np.testing.assert_allclose(one.at([10.0, 15.0])[0], g.survival_at([10.0, 15.0], left_limit=False))
    strat = row_censoring(y, "km_by_centre", strata=c)
    ga = fit_censoring(y[c == "A"])
    np.testing.assert_allclose(strat.at([10.0])[c == "A", 0], ga.survival_at(10.0, left_limit=False))
    # centre A follows nobody past 20: its weights are undefined there, and the error says so
    with pytest.raises(MetricError, match="dropped to 0"):
        strat.at([25.0])


def test_cox_censoring_model_matches_lifelines():
    from lifelines import CoxPHFitter
    from sksurv.datasets import load_gbsg2

    X, yy = load_gbsg2()
    rng = np.random.default_rng(0)
    time = yy["time"] + rng.uniform(0, 0.01, yy.size)  # break ties
    y = make_outcome(time, yy["cens"])
    z = X["age"].to_numpy(float)
    rc = row_censoring(y, "cox", covariates=z[:, None])
    import pandas as pd

    df = pd.DataFrame({"t": time, "c": (~yy["cens"]).astype(int), "age": z})
    cph = CoxPHFitter().fit(df, "t", "c")
    # lifelines interpolates between jump times; compare at censoring (jump) times
    cens_times = np.sort(time[~yy["cens"]])
    ts = cens_times[[50, 150, 300]]
    ref = cph.predict_survival_function(df[["age"]], times=ts).to_numpy().T
    np.testing.assert_allclose(rc.at(ts), ref, rtol=0, atol=1e-5)
