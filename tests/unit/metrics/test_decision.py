"""Unit tests for workbench.metrics.decision."""

from __future__ import annotations

import numpy as np
import pytest
from lifelines import KaplanMeierFitter

from workbench.cohort import make_outcome
from workbench.errors import MetricError
from workbench.metrics.decision import _weighted_km_at, net_benefit
from workbench.predictions import RiskScores, SurvivalCurves
from workbench.stats.km import kaplan_meier, survival_at


def _data(n=200, seed=5):
    rng = np.random.default_rng(seed)
    lp = rng.normal(size=n)
    t = np.round(rng.exponential(1.0 / (0.3 * np.exp(lp))), 1)  # rounding creates ties
    c = np.round(rng.uniform(0, 8, size=n), 1)
    grid = np.linspace(0.0, 8.0, 81)
    S = np.exp(-0.3 * grid[None, :] * np.exp(lp)[:, None])
    return make_outcome(np.minimum(t, c), t <= c), SurvivalCurves(grid, S, "m")


@pytest.mark.filterwarnings("ignore:It looks like your weights")
def test_weighted_km_columns_match_lifelines_and_subgroup_fits():
    # Source: lifelines KaplanMeierFitter with case weights, and on subgroups.
    y, _ = _data()
    rng = np.random.default_rng(0)
    w = rng.uniform(0.2, 3.0, size=y.size)
    sub = y["time"] > 1.0
    W = np.column_stack([np.ones(y.size), w, sub.astype(float)])
    got = _weighted_km_at(y["time"], y["event"], 2.5, W)
    kmf = KaplanMeierFitter()
    ref = [
        kmf.fit(y["time"], y["event"]).survival_function_at_times(2.5).iloc[0],
        kmf.fit(y["time"], y["event"], weights=w).survival_function_at_times(2.5).iloc[0],
        kmf.fit(y["time"][sub], y["event"][sub]).survival_function_at_times(2.5).iloc[0],
    ]
    np.testing.assert_allclose(got, ref, atol=1e-12)
    assert _weighted_km_at(y["time"], y["event"], 2.5, np.ones(y.size)) == pytest.approx(
        survival_at(kaplan_meier(y["time"], y["event"]), 2.5), abs=1e-14
    )
    assert _weighted_km_at(y["time"], y["event"], 2.5, np.zeros((y.size, 1)))[0] == 1.0


def test_inputs_are_checked():
    y, curves = _data()
    with pytest.raises(MetricError, match="SurvivalCurves"):
        net_benefit(y, RiskScores(np.zeros(y.size)), 2.0)
    with pytest.raises(MetricError, match="threshold"):
        net_benefit(y, curves, 2.0, [0.1, 1.0])
    with pytest.raises(MetricError, match="threshold"):
        net_benefit(y, curves, 2.0, [-0.1])
    with pytest.raises(MetricError, match="outside the follow-up"):
        net_benefit(y, curves, 50.0)


def test_default_grid_treat_none_and_thresholds_above_every_risk():
    y, curves = _data()
    res = net_benefit(y, curves, 2.0)
    assert res.thresholds.size == 99 and np.all(res.treat_none == 0)
    top = curves.risk_at(2.0).max()
    beyond = res.thresholds > top
    assert np.all(res.net_benefit[beyond] == 0) and np.all(res.proportion_treated[beyond] == 0)
    assert np.all(np.diff(res.proportion_treated) <= 0)
    assert res.event_risk == pytest.approx(1 - survival_at(kaplan_meier(y["time"], y["event"]), 2.0))
