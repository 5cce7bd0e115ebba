"""Reduced version of bench/bench_competing_external.py (seeded simulation, invented data).

20 simulated cohorts (development 300, external 200 patients, the Fine-Gray design of
bench_competing.py), 20 resamples of the external patients each, truth from 20,000
uncensored patients computed without the method under test. Pooled over the models,
metrics and horizons the 95% intervals must cover the truth in at least 0.85 of the cells
(a binomial lower tail far below a true 0.95), and for the AUC the interval's implied SE
(half-width / t) must match the spread of estimate minus truth across cohorts within a
factor of 0.7-1.5: an interval with half or twice the right width fails.
"""

from __future__ import annotations

import sys
from pathlib import Path

import numpy as np
import pytest
from joblib import Parallel, delayed
from scipy.stats import t as t_dist

sys.path.insert(0, str(Path(__file__).parents[2] / "bench"))
from bench_competing_external import one_cohort  # noqa: E402

pytestmark = pytest.mark.slow
COHORTS, REPS = 20, 20


@pytest.fixture(scope="module")
def rows():
    seeds = np.random.SeedSequence(777).generate_state(COHORTS)
    return Parallel(n_jobs=2)(delayed(one_cohort)(int(s), 300, 200, REPS, 20_000) for s in seeds)


def test_external_intervals_cover_the_truth(rows):
    hits = []
    for r in rows:
        for _est, lo, hi, truth in r.values():
            ok = np.isfinite(lo)
            hits += list((lo[ok] <= truth[ok]) & (truth[ok] <= hi[ok]))
    assert len(hits) > 0.9 * COHORTS * 18  # intervals were reported (18 cells per cohort)
    assert np.mean(hits) >= 0.85, np.mean(hits)


@pytest.mark.parametrize("model", ["clinical", "combined", "combined_minus_clinical"])
def test_external_auc_interval_has_the_width_of_the_sampling_spread(rows, model):
    t975 = t_dist.ppf(0.975, REPS - 1) * np.sqrt(1 + 1 / REPS)
    for j in range(2):
        est = np.array([r[(model, "auc")][0][j] for r in rows])
        lo = np.array([r[(model, "auc")][1][j] for r in rows])
        hi = np.array([r[(model, "auc")][2][j] for r in rows])
        truth = np.array([r[(model, "auc")][3][j] for r in rows])
        implied = np.mean((hi - lo) / 2 / t975)
        spread = np.std(est - truth, ddof=1)
        assert 0.7 <= implied / spread <= 1.5, (model, j, implied, spread)
