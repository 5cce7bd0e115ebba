"""The combined model's signature coefficient on cross-fitted (pre-validated) scores.

Tibshirani RJ, Efron B. Pre-validation and inference in microarrays. Stat Appl Genet Mol
Biol 2002;1:1. Invented data from the demo generator (a behaviour check, no reference
numbers); the shrinkage factor is checked against a Cox fit of lifelines.
"""

from __future__ import annotations

import warnings
from dataclasses import replace
from pathlib import Path

import numpy as np
import pytest

from workbench.cohort import Cohort
from workbench.models.cox import CombinedCox
from workbench.models.penalized import patient_folds
from workbench.models.signature import ImagingSignature
from workbench.prepare import select_pool
from workbench.report._codec import CODECS
from workbench.simulate import simulate_cohort
from workbench.study import read_study

DEMO = Path(__file__).parents[3] / "demo_cohort" / "study.toml"


@pytest.fixture(scope="module")
def cohort():
    sim = simulate_cohort(240, random_state=12, n_features=50)
    clin = sim.clinical.drop(columns=["os_months", "status", "patient_id"]).reset_index(drop=True)
    feats = sim.imaging.drop(columns=["patient_id", "scanner"]).reset_index(drop=True)
    c = Cohort(ids=sim.clinical["patient_id"].to_numpy(), y=sim.outcome(), clinical=clin, features=feats,
               batch=sim.imaging["scanner"].to_numpy())
    return select_pool(c)[0]


def _model(**kw):
    preds = tuple(read_study(DEMO).predictors)
    sig = ImagingSignature(harmonize=True, unseen_batch="reference", n_alphas=20, n_folds=3, rule="min",
                           random_state=3)
    return CombinedCox(preds, signature=sig, protect=("stage",), **kw)


@pytest.fixture(scope="module")
def fits(cohort):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return {k: _model(coefficient=k).fit(cohort) for k in ("prevalidated", "in_sample")}


def test_prevalidated_coefficient_differs_from_in_sample_and_is_smaller(fits):
    pv, ins = fits["prevalidated"], fits["in_sample"]
    assert pv.selected_features_ == ins.selected_features_ and pv.selected_features_
    b_pv, b_in = pv.fit_.coef[-1], ins.fit_.coef[-1]
    assert pv.coefficient_source_ == "prevalidated" and ins.coefficient_source_ == "in_sample"
    assert pv.signature_coef_in_sample_ == pytest.approx(b_in)
    assert b_pv != pytest.approx(b_in, rel=1e-3)
    assert 0 < b_pv < b_in  # the in-sample score is over-fitted; its coefficient is inflated
    # the final model scores with the same signature (fitted on all rows) as the in-sample one
    np.testing.assert_allclose(pv.signature_.coef_.to_numpy(), ins.signature_.coef_.to_numpy())
    rows = pv.coefficient_rows()
    sig_row = [r for r in rows if r.column == "imaging_signature"][0]
    assert np.isnan(sig_row.p_value) and sig_row.hazard_ratio == pytest.approx(np.exp(b_pv))


def test_out_of_fold_scores_do_not_see_their_own_patients(cohort):
    # Changing the follow-up times (not the events, so the folds stay the same) of the
    # patients of one fold leaves their cross-fitted scores unchanged: each was scored
    # by a signature fitted without them.
    m = _model()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        m.fit(cohort)
        X_clin = m._design(cohort)[:, :-1]
        names = m.fit_.names
        oof, _ = m._cross_fit(cohort, X_clin, names)
        fold = patient_folds(cohort.ids, cohort.event, m.prevalidation_folds, random_state=3)
        held = fold == 0
        y2 = cohort.y.copy()
        y2["time"][held] = y2["time"][held][::-1]
        other = replace(cohort, y=y2)
        oof2, _ = m._cross_fit(other, X_clin, names)
    np.testing.assert_allclose(oof2[held], oof[held], rtol=0, atol=1e-12)
    assert not np.allclose(oof2[~held], oof[~held])


def test_cross_validated_shrinkage_matches_a_library_cox_fit_of_the_oof_predictor(cohort):
    import pandas as pd
    from lifelines import CoxPHFitter

    m = _model(shrinkage="cross_validated_slope")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        m.fit(cohort)
        X_clin = m._design(cohort)[:, :-1]
        oof_score, oof_lp = m._cross_fit(cohort, X_clin, m.fit_.names)
    df = pd.DataFrame({"lp": oof_lp, "T": cohort.time, "E": cohort.event.astype(int)})
    slope = CoxPHFitter().fit(df, "T", "E").params_["lp"]  # lifelines, Efron ties
    assert m.shrinkage_factor_ == pytest.approx(min(max(slope, 0.0), 1.0), abs=1e-5)
    assert 0 < m.shrinkage_factor_ < 1
    pv = _model()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        pv.fit(cohort)
    np.testing.assert_allclose(m.fit_.coef, pv.fit_.coef * m.shrinkage_factor_, rtol=1e-10)
    # the baseline hazard was re-estimated with the shrunk predictor as offset: the
    # predicted cumulative hazards over each patient's follow-up sum to the number of
    # events (a property of the Breslow-type estimator at the fitted linear predictor,
    # on the design the coefficients were fitted to: clinical terms and cross-fitted scores)
    from workbench.stats.coxph import linear_predictor

    lp = linear_predictor(m.fit_, np.column_stack([X_clin, oof_score]))
    idx = np.searchsorted(m.fit_.baseline_times, cohort.time, side="right") - 1
    H0 = np.where(idx >= 0, m.fit_.baseline_cumhaz[np.maximum(idx, 0)], 0.0)
    assert float(np.sum(H0 * np.exp(lp))) == pytest.approx(cohort.n_events, rel=0.02)


def test_codec_knows_the_new_fitted_attributes(fits):
    from workbench.report._codec import ArrayStore, decode_value, encode_value

    pv = fits["prevalidated"]
    store = ArrayStore()
    enc = encode_value(pv, store, "combined")
    back = decode_value(enc, ArrayStore(store.arrays), "combined")
    assert back.coefficient_source_ == "prevalidated"
    assert back.shrinkage_factor_ == 1.0
    assert back.signature_coef_in_sample_ == pytest.approx(pv.signature_coef_in_sample_)
    assert "CombinedCox" in CODECS


class _AllRowsOnly:
    """A stand-in signature that keeps its first feature only when fitted on ``n_all`` rows.

    It reproduces what the Rossi data (lifelines load_rossi, one count feature) did in a bootstrap
    replicate: the signature kept a feature on all rows and none in any pre-validation fold.
    """

    def __init__(self, n_all=0):
        self.n_all = n_all

    def get_params(self, deep=True):
        return {"n_all": self.n_all}

    def set_params(self, **kw):
        self.n_all = kw.get("n_all", self.n_all)
        return self

    def fit(self, X, y, groups=None, batch=None, covariates=None):
        self.feature_names_in_ = tuple(X.columns)
        col = X.columns[0]
        self.selected_features_ = (col,) if len(X) == self.n_all else ()
        self.mean_, self.sd_ = float(X[col].mean()), float(X[col].std())
        return self

    def score(self, X, batch=None, covariates=None):
        if not self.selected_features_:
            return np.zeros(len(X))
        return (X[self.selected_features_[0]].to_numpy(float) - self.mean_) / self.sd_


def test_signature_empty_in_every_fold_gives_the_clinical_model(cohort):
    # The replicate once failed ("imaging_signature has the same value for every patient") and was
    # dropped, so only replicates where imaging helped stayed in the combined model's estimates.
    from workbench.errors import EmptySignatureWarning
    from workbench.models.cox import ClinicalCox

    preds = tuple(read_study(DEMO).predictors)
    m = CombinedCox(preds, signature=_AllRowsOnly(n_all=cohort.n), coefficient="prevalidated")
    with pytest.warns(EmptySignatureWarning, match="no feature in any of the 5 pre-validation folds"):
        m.fit(cohort)
    clin = ClinicalCox(preds).fit(cohort)
    assert m.selected_features_ == () and m.signature_.selected_features_
    assert m.coefficient_source_.startswith("prevalidated (no cross-fitted signature")
    np.testing.assert_allclose(m.fit_.coef, clin.fit_.coef, atol=1e-12)
    np.testing.assert_allclose(m.predict_survival(cohort, (12.0, 24.0)).probs,
                               clin.predict_survival(cohort, (12.0, 24.0)).probs, atol=1e-12)


class _EmptyOnce(_AllRowsOnly):
    """A stand-in signature whose ``empty_at``-th fit (counted over all copies) keeps no feature."""

    fits = 0
    random_state = 3  # the pre-validation folds follow the signature's seed: the same folds on replay

    def __init__(self, n_all=0, empty_at=2):
        self.n_all, self.empty_at = n_all, empty_at

    def get_params(self, deep=True):
        return {"n_all": self.n_all, "empty_at": self.empty_at}

    def fit(self, X, y, groups=None, batch=None, covariates=None):
        super().fit(X, y)
        type(self).fits += 1
        self.selected_features_ = () if type(self).fits == self.empty_at else (X.columns[0],)
        return self


def test_shrinkage_with_one_empty_fold_signature_keeps_the_shrinkage(cohort):
    # A fold whose signature kept nothing used to make its Cox fit fail on a constant column, and the
    # whole model fell back to the unshrunk in-sample fit. That fold's model is now the clinical model.
    import pandas as pd
    from lifelines import CoxPHFitter

    from workbench.errors import ConvergenceWarning

    preds = tuple(read_study(DEMO).predictors)
    _EmptyOnce.fits = 0  # the 1st fit is on all rows, the 2nd the first pre-validation fold's
    m = CombinedCox(preds, signature=_EmptyOnce(empty_at=2), coefficient="in_sample",
                    shrinkage="cross_validated_slope")
    with warnings.catch_warnings():
        warnings.simplefilter("error", ConvergenceWarning)
        m.fit(cohort)
    assert m.coefficient_source_ == "in_sample" and 0 < m.shrinkage_factor_ < 1
    X_clin = m._design(cohort)[:, :-1]
    _EmptyOnce.fits = 1  # replay the folds: the first fold's signature is the empty one again
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        _, oof_lp = m._cross_fit(cohort, X_clin, m.fit_.names)
    fold = m._prevalidation_fold(cohort)
    tr, te = fold != np.unique(fold)[0], fold == np.unique(fold)[0]
    cols = [f"x{j}" for j in range(X_clin.shape[1])]
    df = pd.DataFrame(X_clin[tr], columns=cols).assign(T=cohort.time[tr], E=cohort.event[tr].astype(int))
    beta = CoxPHFitter().fit(df, "T", "E").params_[cols].to_numpy()  # lifelines, Efron ties: clinical terms only
    ref = X_clin[te] @ beta
    np.testing.assert_allclose(oof_lp[te] - oof_lp[te].mean(), ref - ref.mean(), atol=1e-4)
