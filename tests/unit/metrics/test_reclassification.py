"""Unit tests for workbench.metrics.reclassification."""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest

from workbench.cohort import make_outcome
from workbench.errors import MetricError
from workbench.metrics.reclassification import (
    continuous_nri,
    integrated_discrimination,
    reclassification_at,
)
from workbench.predictions import RiskScores, SurvivalCurves


def _data(n=250, seed=8):
    rng = np.random.default_rng(seed)
    x1, x2 = rng.normal(size=(2, n))
    lp = 0.7 * x1 + 0.7 * x2
    t = rng.exponential(1.0 / (0.2 * np.exp(lp)))
    c = rng.uniform(0, 10, size=n)
    grid = np.linspace(0.0, 10.0, 101)
    old = np.exp(-0.2 * grid[None, :] * np.exp(0.7 * x1)[:, None])
    new = np.exp(-0.2 * grid[None, :] * np.exp(lp)[:, None])
    y = make_outcome(np.minimum(t, c), t <= c)
    return y, SurvivalCurves(grid, old, "old"), SurvivalCurves(grid, new, "new")


def test_inputs_are_checked():
    y, old, new = _data()
    with pytest.raises(MetricError, match="SurvivalCurves"):
        continuous_nri(y, RiskScores(np.zeros(y.size)), new, 3.0)
    with pytest.raises(MetricError, match="same patients"):
        integrated_discrimination(y, old, new.take(np.arange(10)), 3.0)
    with pytest.raises(MetricError, match="outside the follow-up"):
        reclassification_at(y, old, new, 0.0)


def test_result_fields_caution_and_bounds():
    y, old, new = _data()
    res = reclassification_at(y, old, new, 3.0)
    nri, idi = res.nri, res.idi
    assert res.baseline_model == "old" and res.new_model == "new"
    assert "Kerr" in nri.caution and "noise" in nri.caution
    assert "Hilden" in idi.caution
    for p in (nri.p_up_events, nri.p_down_events, nri.p_up_nonevents, nri.p_down_nonevents):
        assert 0.0 <= p <= 1.0
    # Separate Kaplan-Meier fits per group need not add up exactly to the overall one,
    # so with no ties these two sum to 1 only approximately.
    assert nri.p_up_events + nri.p_down_events == pytest.approx(1.0, abs=0.05)
    assert nri.nri == pytest.approx(nri.nri_events + nri.nri_nonevents)
    assert idi.idi == pytest.approx(idi.slope_new - idi.slope_baseline, abs=1e-12)
    # The new model holds a real second predictor: both should improve on this sample.
    assert nri.nri > 0 and idi.idi > 0
    with pytest.raises(dataclasses.FrozenInstanceError):
        nri.nri = 0.0
