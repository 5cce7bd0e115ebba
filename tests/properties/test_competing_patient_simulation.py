"""Reduced, fast version of bench/bench_competing_patient.py (seeded simulation, invented data).

100 cohorts of 200 patients: coverage of the 95% limits of a patient's absolute risk, the
Fine-Gray route under a true Fine-Gray model and the cause-specific route (both causes and
the event-free survival) under true cause-specific proportional hazards, for two fixed
covariate patterns at three horizons. The acceptance band 0.91-0.985 for the pooled
coverage allows for the Monte Carlo error of 100 correlated cohorts around the nominal
0.95; the same standard errors with half the width (about 0.68 expected) or double the
width (about 0.9999) fall outside it, which the test checks too. Also: the incidences of
all causes and the event-free survival add to 1, and every limit brackets its estimate.
"""

from __future__ import annotations

import sys
from pathlib import Path

import numpy as np
import pytest

sys.path.insert(0, str(Path(__file__).parents[2] / "bench"))
from bench_competing_patient import (  # noqa: E402
    HORIZONS,
    PATIENTS,
    Z95,
    run,
    simulate_cause_specific,
)

from workbench.competing.absolute_risk import cause_specific_risks  # noqa: E402
from workbench.competing.outcome import make_competing_outcome  # noqa: E402
from workbench.competing.regression import fit_cause_specific  # noqa: E402

COHORTS = 100
BAND = (0.91, 0.985)


@pytest.fixture(scope="module")
def rows():
    return run(COHORTS, 200, seed=11)


def _coverage(z, width=1.0):
    return float(np.mean(np.abs(z) <= width * Z95))


def _accepted(z, width):
    return BAND[0] <= _coverage(z, width) <= BAND[1]


@pytest.mark.parametrize("route", ["fg", "cs"])
def test_limits_cover_and_a_half_or_double_width_would_not(rows, route):
    arr = np.array([r[route] for r in rows])
    z = arr[..., 1, :]  # the standardised errors of every cell
    assert np.all(np.isfinite(z))
    assert _accepted(z, 1.0), _coverage(z)
    assert not _accepted(z, 0.5), _coverage(z, 0.5)
    assert not _accepted(z, 2.0), _coverage(z, 2.0)


def test_incidences_and_event_free_add_to_one_and_limits_bracket():
    rng = np.random.default_rng(3)
    Z, t, c = simulate_cause_specific(150, rng)
    y = make_competing_outcome(t, c)
    fit = fit_cause_specific(Z, y, min_events_per_parameter=0)
    for x in PATIENTS:
        r = cause_specific_risks(fit, Z, y, x[None, :], np.r_[0.0, HORIZONS, 10.0])
        np.testing.assert_allclose(r.risk.sum(axis=0) + r.event_free, 1.0, rtol=0, atol=1e-12)
        assert np.all((r.lower <= r.risk + 1e-15) & (r.risk <= r.upper + 1e-15))
        assert np.all((r.lower >= 0) & (r.upper <= 1))
        assert np.all((r.event_free_lower <= r.event_free) & (r.event_free <= r.event_free_upper))
        # before any event: no risk and a degenerate interval
        assert r.risk[:, 0].max() == 0 and r.upper[:, 0].max() == 0
