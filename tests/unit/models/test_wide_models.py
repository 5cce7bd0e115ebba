"""The forest behind the model protocol reads survival at the study horizons exactly."""

from __future__ import annotations

import numpy as np

from workbench.models.wide import ForestModel


def test_horizons_on_the_grid_give_exact_survival(simulated_cohort, demo_predictors):
    cohort, _ = simulated_cohort
    h = (13.7, 29.3)
    coarse = ForestModel(demo_predictors, n_estimators=30, time_grid=8, extra_times=h, random_state=1).fit(cohort)
    # a grid as long as the cohort holds every event time: the full-resolution curves
    full = ForestModel(demo_predictors, n_estimators=30, time_grid=cohort.n, random_state=1).fit(cohort)
    np.testing.assert_allclose(coarse.predict_survival(cohort, h).probs, full.predict_survival(cohort, h).probs,
                               atol=1e-12)
    without = ForestModel(demo_predictors, n_estimators=30, time_grid=8, random_state=1).fit(cohort)
    assert np.abs(without.predict_survival(cohort, h).probs - full.predict_survival(cohort, h).probs).max() > 1e-3
