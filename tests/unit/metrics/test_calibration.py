"""Unit tests for workbench.metrics.calibration (inputs, messages, grouping)."""

from __future__ import annotations

import dataclasses
import warnings

import numpy as np
import pytest

from workbench.cohort import make_outcome
from workbench.errors import FollowUpWarning, MetricError
from workbench.metrics.calibration import (
    calibration_at,
    calibration_slope,
    grouped_calibration,
    observed_expected,
    smoothed_calibration,
)
from workbench.metrics.calibration_cox import _rcs_basis
from workbench.predictions import RiskScores, SurvivalCurves


def _data(n=300, seed=11):
    rng = np.random.default_rng(seed)
    lp = rng.normal(size=n)
    t = rng.exponential(1.0 / (0.3 * np.exp(lp)))
    c = rng.uniform(0, 8, size=n)
    grid = np.linspace(0.0, 8.0, 161)
    S = np.exp(-0.3 * grid[None, :] * np.exp(lp)[:, None])
    return make_outcome(np.minimum(t, c), t <= c), SurvivalCurves(grid, S, "m")


@pytest.mark.parametrize(
    "fn", [grouped_calibration, smoothed_calibration, calibration_slope, observed_expected, calibration_at]
)
def test_each_view_refuses_risk_scores_and_bad_horizons(fn):
    y, curves = _data()
    with pytest.raises(MetricError, match="SurvivalCurves"):
        fn(y, RiskScores(np.ones(y.size)), 2.0)
    with pytest.raises(MetricError, match="outside the follow-up"):
        fn(y, curves, 100.0)
    with pytest.raises(MetricError, match="outside the follow-up"):
        fn(y, curves, -1.0)
    with pytest.raises(MetricError, match="same patients"):
        fn(y[:-1], curves, 2.0)


def test_horizon_before_any_event_is_refused():
    y, curves = _data()
    first = y["time"][y["event"]].min()
    with pytest.raises(MetricError, match="no patient had an event"):
        observed_expected(y, curves, first / 2)


def test_late_horizon_warns_about_thin_follow_up():
    y, curves = _data()
    t_late = np.sort(y["time"])[-5]
    with pytest.warns(FollowUpWarning, match="still followed"):
        observed_expected(y, curves, t_late)


def test_constant_predictions_cannot_be_smoothed_but_have_an_o_e():
    y, curves = _data()
    flat = SurvivalCurves(curves.times, np.tile(curves.probs.mean(axis=0), (y.size, 1)))
    with pytest.raises(MetricError, match="same predicted risk"):
        smoothed_calibration(y, flat, 2.0)
    with pytest.raises(MetricError, match="same predicted risk"):
        calibration_slope(y, flat, 2.0)
    assert observed_expected(y, flat, 2.0).ratio > 0
    assert grouped_calibration(y, flat, 2.0).n.tolist() == [y.size]  # ties stay together


def test_cutpoints_define_the_groups():
    y, curves = _data()
    res = grouped_calibration(y, curves, 2.0, cutpoints=[0.2, 0.5])
    risk = curves.risk_at(2.0)
    expected_n = [np.sum(risk < 0.2), np.sum((risk >= 0.2) & (risk < 0.5)), np.sum(risk >= 0.5)]
    assert res.n.tolist() == expected_n
    assert res.edges[1:-1].tolist() == [0.2, 0.5]
    assert np.all(res.observed_lower <= res.observed) and np.all(res.observed <= res.observed_upper)
    with pytest.raises(MetricError, match="increasing risks"):
        grouped_calibration(y, curves, 2.0, cutpoints=[0.5, 0.2])
    with pytest.raises(MetricError, match="whole number"):
        grouped_calibration(y, curves, 2.0, n_groups=0)


def test_quantile_groups_are_about_equal_in_size():
    y, curves = _data()
    res = grouped_calibration(y, curves, 2.0, n_groups=10)
    assert res.n.size == 10 and res.n.sum() == y.size
    assert res.n.max() - res.n.min() <= 1
    assert np.all(np.diff(res.mean_predicted) > 0)


def test_spline_basis_is_linear_beyond_the_outer_knots():
    knots = np.array([-1.0, 0.0, 2.0])
    x = np.array([3.0, 4.0, 5.0, -3.0, -2.0, -1.5])
    B = _rcs_basis(x, knots)
    assert B.shape == (6, 2)
    # second differences vanish on equally spaced points outside the knots
    assert np.diff(B[:3, 1], 2) == pytest.approx(0.0, abs=1e-12)
    np.testing.assert_allclose(B[3:, 1], 0.0, atol=0)


def test_smoothed_options_and_summary_order():
    y, curves = _data()
    res = smoothed_calibration(y, curves, 2.0, knots=4, grid_size=15)
    assert res.knots.size == 4 and res.grid_predicted.size == 15
    assert 0 <= res.e50 <= res.e90 <= res.emax and res.ici <= res.emax
    with pytest.raises(MetricError, match="knots"):
        smoothed_calibration(y, curves, 2.0, knots=2)
    cut = smoothed_calibration(y, curves, 2.0, censor_at_horizon=True)
    assert cut.ici != res.ici


def test_bundle_is_frozen_and_consistent():
    y, curves = _data()
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        res = calibration_at(y, curves, 2.0, n_groups=4)
    assert res.model == "m" and res.t0 == 2.0
    assert res.grouped.n.size == 4
    assert res.slope.ci_lower < res.slope.slope < res.slope.ci_upper
    assert res.observed_expected.ci_lower < res.observed_expected.ratio < res.observed_expected.ci_upper
    assert res.smoothed.ici == smoothed_calibration(y, curves, 2.0).ici
    with pytest.raises(dataclasses.FrozenInstanceError):
        res.t0 = 3.0
