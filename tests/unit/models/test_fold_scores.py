"""Pre-validated signature scores from the penalty choice's own fold fits (``cross_fit="inner_folds"``).

What is checked, on invented data from the demo generator (behaviour checks, no reference
numbers): the fold fits handed out are exactly the cross-validation's paths without each
fold (recomputed here with the path solver on the training rows alone); a fold's
coefficients depend on its own patients only through the chosen penalty (refitted from the
training rows alone at that penalty, solver tolerance); the signature fitted on all rows is
the one ``fit`` gives; the combined model's routes share that signature and differ only in
the pre-validated coefficient. Pre-validation: Tibshirani RJ, Efron B. Stat Appl Genet Mol
Biol 2002;1:1.
"""

from __future__ import annotations

import warnings
from pathlib import Path

import numpy as np
import pytest

from workbench.cohort import Cohort
from workbench.errors import ModelError
from workbench.models.cox import CombinedCox
from workbench.models.coxpath import fit_cox_path
from workbench.models.penalized import fit_penalized_path, fit_penalized_path_folds
from workbench.models.signature import ImagingSignature
from workbench.prepare import select_pool
from workbench.simulate import simulate_cohort
from workbench.study import read_study

DEMO = Path(__file__).parents[3] / "demo_cohort" / "study.toml"


@pytest.fixture(scope="module")
def cohort():
    sim = simulate_cohort(200, random_state=21, n_features=48)
    clin = sim.clinical.drop(columns=["os_months", "status", "patient_id"]).reset_index(drop=True)
    feats = sim.imaging.drop(columns=["patient_id", "scanner"]).reset_index(drop=True)
    c = Cohort(ids=sim.clinical["patient_id"].to_numpy(), y=sim.outcome(), clinical=clin, features=feats,
               batch=sim.imaging["scanner"].to_numpy())
    return select_pool(c)[0]


def _Z(cohort):
    X = cohort.features.to_numpy(float)
    return (X - X.mean(0)) / X.std(0)


def _signature(**kw):
    return ImagingSignature(harmonize=True, unseen_batch="reference", n_alphas=20, n_folds=5, l1_ratio=1.0,
                            random_state=4, **kw)


def test_fold_fits_are_the_cross_validation_paths_without_each_fold(cohort):
    Z, y = _Z(cohort), cohort.y
    res, fits = fit_penalized_path_folds(Z, y, groups=cohort.ids, n_alphas=20, l1_ratio=1.0, random_state=2)
    assert fits.coefs.shape == (5, Z.shape[1]) and set(np.unique(fits.fold)) == set(range(5))
    np.testing.assert_array_equal(res.coefs, fit_penalized_path(Z, y, groups=cohort.ids, n_alphas=20, l1_ratio=1.0,
                                                                random_state=2).coefs)
    for k in range(5):
        tr = fits.fold != k
        direct = fit_cox_path(Z[tr], cohort.time[tr], cohort.event[tr], alphas=res.alphas, l1_ratio=1.0,
                              tol=1e-7, stop_flat=False).coefs[:, res.index]
        np.testing.assert_allclose(fits.coefs[k], direct, rtol=0, atol=1e-12)


def test_a_fold_sees_its_own_patients_only_through_the_chosen_penalty(cohort):
    # Refit from the training rows alone, on that fold's own path down to the shared penalty:
    # the same penalised objective (the solver's tolerance: 1e-7 of the null deviance per
    # update) and coefficients within 1e-2 (correlated features leave a flat valley).
    from workbench.models.coxlik import weighted_loglik

    def objective(b, tr):
        return (-weighted_loglik(Z[tr] @ b, cohort.time[tr], cohort.event[tr], None) / tr.sum()
                + res.alpha * np.abs(b).sum())

    Z, y = _Z(cohort), cohort.y
    res, fits = fit_penalized_path_folds(Z, y, groups=cohort.ids, n_alphas=20, l1_ratio=1.0, random_state=2)
    assert res.index > 0 and np.count_nonzero(fits.coefs) > 0
    for k in range(5):
        tr = fits.fold != k
        own = fit_cox_path(Z[tr], cohort.time[tr], cohort.event[tr], n_alphas=40, l1_ratio=1.0,
                           alpha_min_ratio=0.05, tol=1e-9, stop_flat=False)
        grid = own.alphas[own.alphas > res.alpha]
        alone = fit_cox_path(Z[tr], cohort.time[tr], cohort.event[tr], alphas=np.append(grid, res.alpha),
                             l1_ratio=1.0, tol=1e-9, stop_flat=False).coefs[:, -1]
        assert objective(fits.coefs[k], tr) == pytest.approx(objective(alone, tr), rel=1e-5)
        np.testing.assert_allclose(fits.coefs[k], alone, rtol=0, atol=1e-2)


def test_given_folds_must_keep_patients_together_and_reproduce_the_own_folds(cohort):
    Z, y = _Z(cohort), cohort.y
    res, fits = fit_penalized_path_folds(Z, y, groups=cohort.ids, n_alphas=12, random_state=5)
    res2, fits2 = fit_penalized_path_folds(Z, y, groups=cohort.ids, n_alphas=12, folds=fits.fold + 10)
    np.testing.assert_array_equal(res.coefs, res2.coefs)
    np.testing.assert_array_equal(fits.fold, fits2.fold)
    boot = np.random.default_rng(0).integers(0, cohort.n, cohort.n)
    bad = np.arange(cohort.n) % 3
    with pytest.raises(ModelError, match="one patient"):
        fit_penalized_path_folds(Z[boot], y[boot], groups=cohort.ids[boot], n_alphas=12, folds=bad)
    _, fb = fit_penalized_path_folds(Z[boot], y[boot], groups=cohort.ids[boot], n_alphas=12, random_state=5)
    for g in np.unique(cohort.ids[boot]):  # a bootstrap sample's copies share their patient's fold
        assert np.unique(fb.fold[cohort.ids[boot] == g]).size == 1


def test_signature_fold_scores_sit_on_the_scale_of_its_own_score(cohort):
    kw = dict(groups=cohort.ids, batch=cohort.batch)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        plain = _signature().fit(cohort.features, cohort.y, **kw)
        sig, fs = _signature().fit_fold_scores(cohort.features, cohort.y, **kw)
        _, none = _signature(screen_fdr=0.5).fit_fold_scores(cohort.features, cohort.y, **kw)
    assert none is None  # an outcome screen fitted on all rows: no honest fold fits to reuse
    assert sig.selected_features_ == plain.selected_features_ and sig.selected_features_
    np.testing.assert_array_equal(sig.coef_.to_numpy(), plain.coef_.to_numpy())
    assert fs.scores.shape == (cohort.n, 5)
    np.testing.assert_array_equal(fs.out_of_fold, fs.scores[np.arange(cohort.n), fs.fold])
    full = sig.score(cohort.features, batch=cohort.batch)
    # the fold signatures are close to the all-rows one, on the same (harmonised, standardised) scale
    for k in range(5):
        assert np.corrcoef(fs.scores[:, k], full)[0, 1] > 0.8
        assert abs(fs.scores[:, k].mean()) < 0.2 * full.std()


def _combined(route, **kw):
    preds = tuple(read_study(DEMO).predictors)
    return CombinedCox(preds, signature=_signature(), protect=("stage",), cross_fit=route, **kw)


def test_combined_routes_share_the_signature_and_differ_only_in_the_coefficient(cohort):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        fits = {r: _combined(r).fit(cohort) for r in ("refit", "inner_folds")}
        ins = _combined("inner_folds", coefficient="in_sample").fit(cohort)
        three = _combined("inner_folds", prevalidation_folds=3).fit(cohort)
    a, b = fits["refit"], fits["inner_folds"]
    assert a.selected_features_ == b.selected_features_ == ins.selected_features_ == three.selected_features_
    assert a.coefficient_source_ == b.coefficient_source_ == "prevalidated"
    np.testing.assert_array_equal(a.signature_.coef_.to_numpy(), b.signature_.coef_.to_numpy())
    b_in = ins.fit_.coef[-1]
    assert 0 < b.fit_.coef[-1] < b_in and 0 < a.fit_.coef[-1] < b_in  # both shrink the in-sample coefficient
    assert b.fit_.coef[-1] == pytest.approx(a.fit_.coef[-1], rel=0.25)
    assert three.fit_.coef[-1] != pytest.approx(b.fit_.coef[-1], rel=1e-6)  # 3 folds != 5: the refit route
    with pytest.raises(ModelError, match="cross_fit"):
        _combined("sometimes").fit(cohort)


def test_inner_fold_shrinkage_uses_the_fold_fits(cohort):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        m = _combined("inner_folds", shrinkage="cross_validated_slope").fit(cohort)
    assert 0 < m.shrinkage_factor_ <= 1


def test_the_cheap_routes_are_not_study_options():
    # Both cheap routes failed their simulation (bench_added_value.py, bench_prevalidation.py):
    # they stay constructor arguments for the benches, and a study file cannot choose them.
    import tomllib

    from workbench.errors import SpecError
    from workbench.study import dumps_study, study_from_dict

    doc = tomllib.loads(dumps_study(read_study(DEMO)))
    for block, key in ((doc["models"]["combined"], "cross_fit"), (doc["added_value"], "refits")):
        block[key] = "inner_folds"
        with pytest.raises(SpecError, match=key):
            study_from_dict(doc)
        del block[key]
