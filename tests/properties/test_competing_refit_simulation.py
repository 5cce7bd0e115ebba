"""Reduced, fast version of bench/bench_competing_patient.py --pipeline --refits (seeded simulation, invented data).

The refit bootstrap (workbench.competing.refit_limits: patients resampled from the seed,
the arm refitted on each sample, every refit predicting the patients) on the clinical arm
of a study with two linear predictors, cohorts from the bench's cause-specific generator
(constant cause-specific hazards, closed-form true incidence, bench section 2): 16 cohorts
of 150 patients, 50 refits each, two covariate patterns at two horizons. The combined
model's refits are measured by the bench alone (a signature refit costs ~100 times more).

Checked: the refits' SD of the estimate tracks its SD over cohorts (mean ratio 0.7-1.4:
the SD over 16 cohorts is known to about +-18% per cell, common practice for the
tolerance), and the cloglog limits cover the true incidence in at least 80% of the 64
cells (nominal 0.95; 0.80 is about 3 MC SE below it for 64 correlated cells). The same
limits with half the SE (expected coverage about 0.68) must fall below that bound, so the
check can fail.
"""

from __future__ import annotations

import sys
import warnings
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

sys.path.insert(0, str(Path(__file__).parents[2] / "bench"))
from bench_competing_patient import simulate_cause_specific, true_cause_specific  # noqa: E402

from workbench.cohort.core import Cohort  # noqa: E402
from workbench.cohort.outcome import make_outcome  # noqa: E402
from workbench.competing.fitting import fit_arm  # noqa: E402
from workbench.competing.refit_limits import refit_arms, refit_limits, replicate_risks  # noqa: E402
from workbench.study import study_from_dict  # noqa: E402

COHORTS, N, REFITS = 16, 150, 50
HORIZONS = [0.5, 1.0]
X = np.array([[1.0, 1.0], [0.0, 0.0]])


def _cohort(Z, t, c) -> Cohort:
    n = len(t)
    return Cohort(ids=np.arange(n), y=make_outcome(t, c == 1), clinical=pd.DataFrame({"z1": Z[:, 0], "z2": Z[:, 1]}),
                  features=pd.DataFrame(index=range(n)), cause=c)


@pytest.fixture(scope="module")
def runs(tmp_path_factory):
    doc = {"study": {"name": "sim", "horizons": HORIZONS, "seed": 3},
           "data": {"clinical": "unused.csv", "time": "t", "event": "e", "event_codes": ["1"],
                    "competing_codes": ["2"], "censor_codes": ["0"]},
           "predictor": [{"column": "z1"}, {"column": "z2"}]}
    spec = study_from_dict(doc, base=tmp_path_factory.mktemp("sim"))
    patients = _cohort(X, np.ones(2), np.zeros(2, dtype=int))
    truth = np.array([true_cause_specific(x, HORIZONS)[0] for x in X])
    est, draws = [], []
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        for r in range(COHORTS):
            cohort = _cohort(*simulate_cause_specific(N, np.random.default_rng(500 + r)))
            arm = fit_arm(cohort, spec, "cause", imaging=False, random_state=r)
            rb = refit_arms(cohort, spec, imaging=False, replicates=REFITS, random_state=r, backend="serial",
                            workers=1)
            assert rb.failed == 0 and len(rb.arms) == REFITS
            rr = replicate_risks(rb, patients, HORIZONS)
            est.append(arm.predict(patients, HORIZONS, "cause_specific").risks)
            draws.append(rr.cause_specific[:, rr.causes.index(1)])
    return np.array(est), draws, truth, spec, patients


def test_refits_do_not_depend_on_the_backend_or_workers(runs):
    # replicate b's rows and seed come from the study seed alone (workbench.validation.plans' rule)
    _, draws, _, spec, patients = runs
    cohort = _cohort(*simulate_cause_specific(N, np.random.default_rng(500)))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        rb = refit_arms(cohort, spec, imaging=False, replicates=REFITS, random_state=0, backend="threads", workers=2)
    rr = replicate_risks(rb, patients, HORIZONS)
    np.testing.assert_array_equal(rr.cause_specific[:, rr.causes.index(1)], draws[0])


def test_refit_sd_tracks_the_spread_over_cohorts(runs):
    est, draws = runs[:2]
    sd_refit = np.mean([d.std(axis=0, ddof=1) for d in draws], axis=0)
    ratio = float(np.mean(sd_refit / est.std(axis=0, ddof=1)))
    assert 0.7 <= ratio <= 1.4, ratio


def test_cloglog_limits_cover_the_true_incidence_and_half_width_would_not(runs):
    est, draws, truth = runs[:3]
    hits, half = [], []
    for e, d in zip(est, draws, strict=True):
        lo, hi, _ = refit_limits(e, d, form="cloglog")
        hits.append((lo <= truth) & (truth <= hi))
        lo, hi, _ = refit_limits(e, d, form="cloglog", conf_level=0.6827)  # z = 1.0, about half of 1.96
        half.append((lo <= truth) & (truth <= hi))
    assert np.mean(hits) >= 0.80, np.mean(hits)
    assert np.mean(half) < 0.80, np.mean(half)
