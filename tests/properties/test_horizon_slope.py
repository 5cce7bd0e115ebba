"""The horizon-specific calibration slope, checked against a known generator.

Reference: simulation from a generator whose truth is known (Morris, White & Crowther,
Stat Med 2019 for the design). With predictions from the TRUE proportional-hazards model
the slope of observed on predicted risk is 1 in expectation at every horizon (van
Houwelingen, Stat Med 2000: a correctly specified model needs no recalibration); when the
covariate effect wanes over time but the model assumes it constant, the slope fitted up to
an early horizon reflects the early, stronger effect and the slope up to a late horizon a
weaker one, so the two differ. Tolerances: n = 20,000 gives a slope SE of about 0.015-0.02,
so 0.06 is over three standard errors.
"""

from __future__ import annotations

import numpy as np
import pytest

from workbench.cohort import make_outcome
from workbench.metrics.calibration import calibration_slope
from workbench.predictions import RiskScores, SurvivalCurves
from workbench.validation.evaluate import evaluate_predictions

H = np.array([2.0, 5.0, 10.0])
LAM = 0.08


def _sample(n, seed, beta_early, beta_late, change=3.0):
    rng = np.random.default_rng(seed)
    x = rng.normal(size=n)
    e = rng.exponential(size=n)
    early = LAM * change * np.exp(beta_early * x)  # cumulative hazard reached at the change point
    t = np.where(e < early, e / (LAM * np.exp(beta_early * x)),
                 change + (e - early) / (LAM * np.exp(beta_late * x)))
    c = rng.uniform(0, 25, size=n)
    return x, make_outcome(np.minimum(t, c), t <= c)


def _ph_curves(x, beta):
    return SurvivalCurves(H, np.exp(-LAM * H[None, :] * np.exp(beta * x)[:, None]), "ph")


def test_correct_model_has_slope_one_at_every_horizon():
    x, y = _sample(20_000, 11, 1.0, 1.0)
    curves = _ph_curves(x, 1.0)
    slopes = [calibration_slope(y, curves, h).slope for h in H]
    assert slopes == pytest.approx([1.0, 1.0, 1.0], abs=0.06)
    # the engine's fast path gives the same horizon-specific slope
    perf = evaluate_predictions(RiskScores(x, "ph"), curves, y, y, H, ibs_times=H)
    assert perf.cal_slope == pytest.approx(slopes, abs=1e-4)


def test_waning_effect_gives_different_slopes_by_horizon():
    # true log hazard ratio 1.5 before time 3 and 0.3 after; the model says 1.0 throughout
    x, y = _sample(20_000, 12, 1.5, 0.3)
    curves = _ph_curves(x, 1.0)
    slopes = np.array([calibration_slope(y, curves, h).slope for h in H])
    assert slopes[0] == pytest.approx(1.5, abs=0.08)  # before the change the truth is 1.5 / 1.0
    assert slopes[0] - slopes[2] > 0.3
    assert np.all(np.diff(slopes) < 0)
    # the old whole-follow-up slope is (up to clipping of extreme risks) one number for
    # every horizon, and it misses the early miscalibration
    whole = [calibration_slope(y, curves, h, censor_at_horizon=False).slope for h in H]
    assert np.ptp(whole) < 1e-3 and abs(whole[0] - slopes[0]) > 0.3
