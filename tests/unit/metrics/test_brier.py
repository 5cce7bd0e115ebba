"""Unit tests for workbench.metrics.brier (inputs, messages, shapes)."""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest

from workbench.cohort import make_outcome
from workbench.errors import FollowUpWarning, MetricError
from workbench.metrics.brier import brier_score, integrated_brier_score
from workbench.predictions import RiskScores, SurvivalCurves


def _data(n=120, seed=3):
    rng = np.random.default_rng(seed)
    lp = rng.normal(size=n)
    t = rng.exponential(1.0 / np.exp(lp))
    c = rng.uniform(0, 3, size=n)
    grid = np.linspace(0.0, 3.0, 61)
    S = np.exp(-grid[None, :] * np.exp(lp)[:, None])
    return make_outcome(np.minimum(t, c), t <= c), SurvivalCurves(grid, S, "m")


def test_risk_scores_are_refused_with_a_pointer_to_survival_curves():
    y, curves = _data()
    with pytest.raises(MetricError, match="SurvivalCurves"):
        brier_score(y, y, RiskScores(np.zeros(y.size)), [0.5])
    with pytest.raises(MetricError, match="risk score"):
        integrated_brier_score(y, y, RiskScores(np.zeros(y.size)), [0.5, 1.0])


def test_times_outside_follow_up_are_refused_in_plain_words():
    y, curves = _data()
    with pytest.raises(MetricError, match="inside the follow-up"):
        brier_score(y, y, curves, [0.5, y["time"].max()])
    with pytest.raises(MetricError, match="strictly increasing"):
        brier_score(y, y, curves, [1.0, 0.5])


def test_mismatched_rows_and_a_single_time_for_integration():
    y, curves = _data()
    with pytest.raises(MetricError, match="same patients"):
        brier_score(y, y[:-1], curves, [0.5])
    with pytest.raises(MetricError, match="at least two times"):
        integrated_brier_score(y, y, curves, [0.5])


def test_shapes_values_and_frozen_result():
    y, curves = _data()
    times = np.array([0.25, 0.5, 1.0])
    res = brier_score(y, y, curves, times)
    assert res.brier.shape == res.null_brier.shape == res.ipa.shape == (3,)
    np.testing.assert_allclose(res.ipa, 1 - res.brier / res.null_brier)
    assert res.model == "m"
    with pytest.raises(dataclasses.FrozenInstanceError):
        res.brier = None
    ibs = integrated_brier_score(y, y, curves, times)
    # trapezoid by hand over unequal steps, divided by the range
    by_hand = (0.25 * (res.brier[0] + res.brier[1]) / 2 + 0.5 * (res.brier[1] + res.brier[2]) / 2) / 0.75
    assert ibs.ibs == pytest.approx(by_hand, abs=1e-15)


def test_brier_of_a_perfect_prediction_without_censoring_is_zero():
    # No censoring: weights are 1, and predicting the observed status exactly scores 0.
    t = np.array([1.0, 2.0, 3.0, 4.0])
    y = make_outcome(t, [1, 1, 1, 1])
    grid = np.array([0.0, 1.0, 2.0, 3.0, 4.0])
    S = (grid[None, :] < t[:, None]).astype(float)
    res = brier_score(y, y, SurvivalCurves(grid, S), [1.5, 2.5])
    np.testing.assert_allclose(res.brier, 0.0, atol=1e-15)


def test_censoring_distribution_from_training_rows_reaching_zero_is_reported():
    y, curves = _data()
    # Training rows where everyone is censored by 0.2: G(t) = 0 at later horizons.
    y_train = make_outcome(np.linspace(0.05, 0.2, 10), np.zeros(10, bool))
    with pytest.raises(MetricError, match="uncensored"):
        brier_score(y_train, y, curves, [1.0])


def test_curves_must_start_before_the_first_time():
    y, curves = _data()
    late = SurvivalCurves(curves.times[10:], curves.probs[:, 10:])
    with pytest.raises(MetricError, match="before the first time"):
        brier_score(y, y, late, [0.1])


def test_follow_up_warning_is_not_raised_for_the_multi_time_brier():
    # The FollowUpWarning belongs to single-horizon metrics; here just check no noise.
    y, curves = _data()
    import warnings

    with warnings.catch_warnings():
        warnings.simplefilter("error", FollowUpWarning)
        res = brier_score(y, y, curves, [0.5, 1.0])
    assert np.all(np.isfinite(res.brier))
