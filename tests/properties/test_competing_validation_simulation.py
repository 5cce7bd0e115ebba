"""Reduced version of bench/bench_competing_validation.py (seeded simulation, invented data).

COHORTS simulated cohorts of N patients from the demo generator with deaths from other
causes, REPS bootstrap replicates each, truth (the apparent fits' AUC and Brier score)
from 5,000 uncensored patients of the same generator, computed without the method
under test. Checks, pooled over the horizons and the clinical and clinical + signature
models:

* the route's validated estimate (out-of-bootstrap) removes the apparent optimism: its
  mean error is within 0.02 of 0 (about 2 MC SEs here, common practice: 2-3 SEs), and
  the apparent AUC's mean error, larger than 0.01, would fail that check;
* the width of its AUC interval (model and difference) matches the spread of estimate
  minus truth: the mean squared standardised error ((estimate - truth) / the interval's
  implied SE) lies in [0.4, 2.5]. An interval of half the width multiplies it by 4, of
  twice the width divides it by 4, so either fails.
"""

from __future__ import annotations

import sys
from pathlib import Path

import numpy as np
import pytest
from joblib import Parallel, delayed
from scipy.stats import t as t_dist

sys.path.insert(0, str(Path(__file__).parents[2] / "bench"))
from bench_competing_validation import one_cohort, simulate_competing_cohort  # noqa: E402

pytestmark = pytest.mark.slow
COHORTS, N, REPS = 10, 200, 10
H = 3  # horizons of the demo competing study


@pytest.fixture(scope="module")
def rows():
    truth = simulate_competing_cohort(5_000, 99, censor=False)
    return Parallel(n_jobs=2)(delayed(one_cohort)(r, N, REPS, truth, 4242) for r in range(COHORTS))


def _errors(rows, metric, kind):
    return np.array([r[(model, metric, kind)] - r[(model, metric, "truth")]
                     for r in rows for model in ("clinical", "combined")])


@pytest.mark.parametrize("metric", ["auc", "brier"])
def test_validated_estimate_removes_the_apparent_optimism(rows, metric):
    apparent, oob = np.nanmean(_errors(rows, metric, "apparent")), np.nanmean(_errors(rows, metric, "oob"))
    assert abs(oob) < 0.02, (apparent, oob)
    assert abs(apparent) > 0.005 and abs(oob) < abs(apparent), (apparent, oob)
    assert sum(r["failed"] for r in rows) == 0


@pytest.mark.parametrize("model", ["clinical", "combined", "difference"])
def test_auc_interval_has_the_width_of_the_error(rows, model):
    t975 = t_dist.ppf(0.975, REPS - 1)
    z2 = []
    for r in rows:
        lo, hi = r[(model, "auc", "lower")], r[(model, "auc", "upper")]  # as the route reports them
        se = (hi - lo) / 2 / t975
        ok = np.isfinite(se) & (se > 0)
        z2 += list(((r[(model, "auc", "oob")] - r[(model, "auc", "truth")])[ok] / se[ok]) ** 2)
    assert len(z2) >= 0.8 * COHORTS * H  # intervals were reported
    assert 0.4 <= np.mean(z2) <= 2.5, (model, np.mean(z2))
