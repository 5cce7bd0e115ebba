"""The AUC-over-time figure's grid starts no earlier than the first event.

Found on scikit-survival's ``load_cgvhd`` (chronic graft-versus-host disease; first event at
0.28 years) with horizons 0.5 and 1 year: the grid began at 0.25 years, where no patient had
had the event, and ``workbench run`` stopped while drawing its figures.
"""

from __future__ import annotations

import numpy as np
from sksurv.datasets import load_cgvhd
from sksurv.metrics import cumulative_dynamic_auc
from sksurv.util import Surv

from workbench.metrics.td_auc import time_dependent_auc
from workbench.predictions import RiskScores
from workbench.report.figureset import td_auc_grid


def test_grid_starts_at_the_first_event_and_every_point_has_an_auc():
    X, y = load_cgvhd()
    time, event = y["ftime"].astype(float), y["status"] == 1  # other events censored: cause-specific
    assert time[event].min() > 0.25  # the case: half the first horizon comes before the first event
    grid = td_auc_grid((0.5, 1.0), time, event)
    assert grid[0] == time[event].min() and len(grid) == 15 and grid[-1] <= 0.9 * time.max()
    risk = X["age"].to_numpy(float)
    yy = Surv.from_arrays(event, time)
    ours = time_dependent_auc(yy, yy, RiskScores(risk), grid[1:-1])
    # reference: scikit-survival's cumulative/dynamic AUC with the same (Kaplan-Meier) censoring weights;
    # censorings tied with event times are weighted by a different convention there, which moves the AUC
    # by up to ~2e-4 (as in tests/reference/test_discrimination_reference.py)
    ref, _ = cumulative_dynamic_auc(yy, yy, risk, grid[1:-1])
    np.testing.assert_allclose(np.asarray(ours.auc), ref, atol=2e-4)


def test_grid_is_unchanged_when_events_come_early():
    time = np.array([0.1, 0.2, 0.3, 2.0, 3.0, 4.0])
    event = np.array([True, False, True, True, False, False])
    np.testing.assert_allclose(td_auc_grid((1.0, 2.0), time, event), np.linspace(0.5, min(3.6, 2.68), 15))
