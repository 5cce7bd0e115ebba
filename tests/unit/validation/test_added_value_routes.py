"""The added-value statistic's two routes (``refits="inner_folds"`` / ``"nested"``).

Invented data from the demo generator (behaviour checks). The inner-folds statistic is
recomputed here from its definition: one signature fit whose penalty choice uses the
test's folds, fold k's signature = that choice's fit without fold k, a Cox fit of the
clinical terms plus that score on fold k's training rows, and the cross-validated partial
log-likelihood of Verweij & van Houwelingen (Stat Med 1993;12:2305-14), scored by a plain
risk-set-by-risk-set Breslow log partial likelihood (Cox 1972 with Breslow ties), not the package's.
The level of both routes is measured in bench/bench_added_value.py.
"""

from __future__ import annotations

import warnings
from pathlib import Path

import numpy as np
import pytest

from workbench.cohort import Cohort
from workbench.errors import SpecError
from workbench.models.cox import ClinicalCox, CombinedCox
from workbench.models.penalized import patient_folds
from workbench.models.signature import ImagingSignature
from workbench.prepare import select_pool
from workbench.preprocess.clinical import ClinicalTransformer
from workbench.simulate import simulate_cohort
from workbench.stats.coxph import fit_coxph, linear_predictor
from workbench.study import read_study
from workbench.validation.added_value import added_value_test
from workbench.validation.added_value_cvpl import _cvpl_inner_folds, _fold_designs, _protected_all

DEMO = Path(__file__).parents[3] / "demo_cohort" / "study.toml"


@pytest.fixture(scope="module")
def setup():
    sim = simulate_cohort(160, random_state=8, imaging_effect=1.5, n_features=44)
    clin = sim.clinical.drop(columns=["os_months", "status", "patient_id"]).reset_index(drop=True)
    feats = sim.imaging.drop(columns=["patient_id", "scanner"]).reset_index(drop=True)
    c = Cohort(ids=sim.clinical["patient_id"].to_numpy(), y=sim.outcome(), clinical=clin, features=feats,
               batch=sim.imaging["scanner"].to_numpy())
    preds = tuple(read_study(DEMO).predictors)
    sig = ImagingSignature(harmonize=True, unseen_batch="reference", n_alphas=15, n_folds=3, random_state=1)
    comb = CombinedCox(preds, signature=sig, protect=("stage",), coefficient="in_sample")
    return select_pool(c)[0], comb, ClinicalCox(preds)


def _breslow_pl(lp, time, event):
    """Breslow log partial likelihood, written out risk set by risk set (an independent scorer)."""
    order = np.argsort(-time, kind="mergesort")
    t, e, x = time[order], event[order], lp[order]
    total = 0.0
    for i in np.flatnonzero(e):
        at_risk = t >= t[i]
        total += x[i] - np.log(np.exp(x[at_risk]).sum())
    return total


def test_inner_folds_statistic_matches_its_definition(setup):
    cohort, comb, _ = setup
    fold = patient_folds(cohort.ids, cohort.event, 3, random_state=2)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        stat = _cvpl_inner_folds(comb, cohort, _fold_designs(comb, cohort, fold), fold, _protected_all(comb, cohort))
        tr_all = ClinicalTransformer(comb.predictors).fit(cohort)
        cols = [j for t in tr_all.terms_ if t.column == "stage" for j in range(t.start, t.stop)]
        sig, fs = ImagingSignature(**comb.signature.get_params()).fit_fold_scores(
            cohort.features, cohort.y, groups=cohort.ids, batch=cohort.batch,
            covariates=tr_all.transform(cohort).X[:, cols], folds=fold)
        total = 0.0
        for k in range(3):
            tr = fold != k
            clin = ClinicalTransformer(comb.predictors).fit(cohort.take(np.flatnonzero(tr))).transform(cohort).X
            X = np.column_stack([clin, fs.scores[:, k]])
            lp = linear_predictor(fit_coxph(X[tr], cohort.time[tr], cohort.event[tr]), X)
            total += (_breslow_pl(lp, cohort.time, cohort.event)
                      - _breslow_pl(lp[tr], cohort.time[tr], cohort.event[tr]))
    assert stat == pytest.approx(total, rel=1e-8)


def test_both_routes_find_strong_imaging_and_bad_routes_are_refused(setup):
    cohort, comb, clin = setup
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        tests = {r: added_value_test(comb, clin, cohort, permutations=4, folds=3, random_state=3,
                                     backend="serial", refits=r) for r in ("inner_folds", "nested")}
    for t in tests.values():
        assert t.observed > 0 and t.p_value == pytest.approx(0.2)  # observed above all 4 permutations
    with pytest.raises(SpecError, match="refits"):
        added_value_test(comb, clin, cohort, permutations=4, refits="some")
