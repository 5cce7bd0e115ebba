"""Reduced, fast version of bench/bench_added_value.py (invented data from the demo generator).

The full benchmark checks the false-positive rate over 200 null cohorts with its Monte
Carlo SE; here a handful of cohorts at small scale check the properties the test rests on.
"""

from __future__ import annotations

import warnings
from pathlib import Path

import numpy as np
import pytest

from workbench.cohort import Cohort
from workbench.models.cox import ClinicalCox, CombinedCox
from workbench.models.signature import ImagingSignature
from workbench.prepare import select_pool
from workbench.simulate import simulate_cohort
from workbench.study import read_study
from workbench.validation.added_value import added_value_test
from workbench.validation.permutation import nuisance_design, residualise, within_permutation

pytestmark = pytest.mark.slow  # a permutation test on 20 simulated cohorts

DEMO = Path(__file__).parents[2] / "demo_cohort" / "study.toml"


def _cohort(n, seed, effect):
    sim = simulate_cohort(n, random_state=seed, imaging_effect=effect, n_features=44)
    clin = sim.clinical.drop(columns=["os_months", "status", "patient_id"]).reset_index(drop=True)
    feats = sim.imaging.drop(columns=["patient_id", "scanner"]).reset_index(drop=True)
    c = Cohort(ids=sim.clinical["patient_id"].to_numpy(), y=sim.outcome(), clinical=clin, features=feats,
               batch=sim.imaging["scanner"].to_numpy())
    return select_pool(c)[0]


@pytest.fixture(scope="module")
def preds():
    return tuple(read_study(DEMO).predictors)


def _models(preds, seed):
    sig = ImagingSignature(harmonize=True, unseen_batch="reference", n_alphas=15, n_folds=3, rule="min",
                           random_state=seed)
    return CombinedCox(preds, signature=sig, coefficient="in_sample"), ClinicalCox(preds)


def test_residual_permutation_keeps_the_stage_link_that_plain_permutation_breaks(preds):
    c = _cohort(300, 1, 0.0)
    vol = c.features["morph_volume_cc"].to_numpy(float)
    stage = c.clinical["stage"].map({"I": 0, "II": 1, "III": 2, "IV": 3}).to_numpy(float)
    r_obs = np.corrcoef(vol, stage)[0, 1]
    assert r_obs > 0.3  # the generator ties volume to stage
    Z, names = nuisance_design(c, preds)
    assert "stage=IV" in names and any(n.startswith("batch=") for n in names)
    fitted, resid = residualise(vol[:, None], Z)
    rng = np.random.default_rng(0)
    kept = [np.corrcoef(fitted[:, 0] + resid[within_permutation(c.batch, rng), 0], stage)[0, 1] for _ in range(50)]
    plain = [np.corrcoef(vol[rng.permutation(c.n)], stage)[0, 1] for _ in range(50)]
    assert abs(np.mean(kept) - r_obs) < 0.05
    assert abs(np.mean(plain)) < 0.05


def test_null_cohorts_reject_rarely_and_strong_imaging_is_found(preds):
    # 10 null cohorts, K = 9, alpha = 0.1: rejections ~ Binomial(10, 0.1) if the level holds;
    # P(>= 5) = 0.0016, so 5 or more would be a real failure of the level.
    rejections = 0
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        for r in range(10):
            comb, clin = _models(preds, r)
            t = added_value_test(comb, clin, _cohort(140, 500 + r, 0.0), permutations=9, folds=3,
                                 random_state=r, backend="serial")
            assert t.null.size == 9 and 0.1 <= t.p_value <= 1.0
            rejections += t.p_value <= 0.1 + 1e-12
        assert rejections <= 4, rejections
        comb, clin = _models(preds, 7)
        alt = added_value_test(comb, clin, _cohort(220, 900, 1.5), permutations=9, folds=3, random_state=7,
                               backend="serial")
    assert alt.observed > 0 and alt.p_value == pytest.approx(0.1)


def test_cached_clinical_designs_give_the_same_statistic_as_refitting_the_whole_model(preds):
    from workbench.models.penalized import patient_folds
    from workbench.validation.added_value_cvpl import _cvpl_cached, _fold_designs, cv_partial_loglik

    c = _cohort(150, 33, 1.0)
    comb, _ = _models(preds, 2)
    fold = patient_folds(c.ids, c.event, 3, random_state=1)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        whole = cv_partial_loglik(comb, c, fold)
        cached = _cvpl_cached(comb, c, _fold_designs(comb, c, fold))
    assert cached == pytest.approx(whole, rel=1e-10, abs=1e-8)
