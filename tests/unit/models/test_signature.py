"""Unit tests of the imaging signature pipeline (workbench.models.signature) and of
patient-grouped cross-validation (workbench.models.penalized)."""

import warnings

import numpy as np
import pandas as pd
import pytest
from sklearn.base import clone

from workbench.cohort.outcome import make_outcome
from workbench.errors import DataQualityWarning, ModelError, SpecError, VolumeDominanceWarning
from workbench.models.penalized import fit_penalized_path, patient_folds
from workbench.models.signature import (
    ClinicalPlusImagingCox,
    ImagingSignature,
    check_volume_dominance,
    volume_correlation,
)

N, P = 300, 200
TRUE = {"f0": 0.5, "f1": -0.5, "f2": 0.4}


def _signal_cohort(seed=0, n=N, p=P):
    """Correlated features (10 latent factors), three true signals, three scanners."""
    rng = np.random.default_rng(seed)
    F = rng.standard_normal((n, 10))
    X = 0.8 * F[:, rng.integers(0, 10, p)] + 0.6 * rng.standard_normal((n, p))
    eta = X[:, :3] @ np.array(list(TRUE.values()))
    t = rng.exponential(np.exp(-eta))
    c = rng.exponential(2 * np.median(t), n)
    y = make_outcome(np.minimum(t, c), t <= c)
    batch = rng.choice(np.array(["A", "B", "C"]), n)
    X = X + pd.Series({"A": 0.0, "B": 0.8, "C": -0.5})[batch].to_numpy()[:, None]
    age = rng.normal(62, 9, n)
    cols = [f"f{j}" for j in range(p)]
    return pd.DataFrame(X, columns=cols), y, batch, age


@pytest.fixture(scope="module")
def cohort():
    return _signal_cohort()


@pytest.fixture(scope="module")
def fitted(cohort):
    X, y, batch, age = cohort
    return ImagingSignature(random_state=0).fit(X, y, batch=batch, covariates=age)


def _bootstrap(n, seed):
    return np.random.default_rng(seed).integers(0, n, n)


def test_grouped_folds_never_split_a_patient():
    rng = np.random.default_rng(1)
    ids = _bootstrap(N, 1)
    assert np.unique(ids).size < N  # duplicates present
    event = (rng.random(N) < 0.6)[ids]
    fold = patient_folds(ids, event, 5, random_state=0)
    per_patient = pd.Series(fold).groupby(ids).nunique()
    assert per_patient.max() == 1
    counts = np.bincount(fold[event], minlength=5)
    assert counts.min() > 0.6 * counts.max()  # events spread over folds


def test_grouped_cv_chooses_a_larger_penalty_than_row_folds_in_a_bootstrap_sample():
    # Row-wise folds put copies of a patient on both sides of a split, so weak
    # penalties look good (REFERENCE_VALUES.md, "Pitfalls measured on this machine").
    X, y, _, _ = _signal_cohort(seed=2)
    ids = _bootstrap(N, 102)
    Xb = X.to_numpy()[ids]
    Z = (Xb - Xb.mean(0)) / Xb.std(0)
    grouped = fit_penalized_path(Z, y[ids], groups=ids, random_state=2)
    with pytest.warns(DataQualityWarning, match="exact copies"):
        naive = fit_penalized_path(Z, y[ids], random_state=2)
    assert grouped.grouped and not naive.grouped
    assert grouped.alpha > naive.alpha
    assert grouped.n_nonzero[grouped.index] < naive.n_nonzero[naive.index]


def test_pure_noise_cohort_selects_few_or_no_features():
    rng = np.random.default_rng(0)
    X = pd.DataFrame(rng.standard_normal((N, P)), columns=[f"n{j}" for j in range(P)])
    y = make_outcome(rng.exponential(1.0, N), rng.random(N) < 0.7)
    sig = ImagingSignature(random_state=0).fit(X, y)
    assert len(sig.selected_features_) <= 3


def test_signal_features_are_found(fitted):
    assert len(set(TRUE) & set(fitted.selected_features_)) >= 2
    assert fitted.path_.alpha > fitted.path_.alphas[-1]  # optimum inside the path


def test_steps_record_counts_and_reasons(fitted):
    steps = fitted.steps_
    assert [s.step for s in steps] == [
        "ComBat harmonisation", "near-zero variance", "redundancy", "penalised Cox"]
    assert steps[0].n_in == P
    for a, b in zip(steps[:-1], steps[1:], strict=True):
        assert a.n_out == b.n_in
    for s in steps:
        assert len(s.kept) + len(s.dropped) == s.n_in
    assert steps[-1].kept == fitted.selected_features_
    assert all("zero coefficient" in r for _, r in steps[-1].dropped)


def test_score_is_the_linear_predictor_on_both_scales(fitted, cohort):
    X, _, batch, age = cohort
    s = fitted.score(X, batch=batch, covariates=age)
    H = fitted.combat_.transform(X, batch, age)
    manual = H[list(fitted.coef_original_.index)].to_numpy() @ fitted.coef_original_.to_numpy()
    np.testing.assert_allclose(s, manual + fitted.intercept_original_, atol=1e-10)
    Z = fitted.scaler_.transform(H)[list(fitted.coef_.index)].to_numpy()
    np.testing.assert_allclose(s, Z @ fitted.coef_.to_numpy(), atol=1e-10)
    np.testing.assert_array_equal(fitted.transform(X, batch, age), s)


def test_leakage_held_out_rows_cannot_change_fit_or_slice_scores(cohort):
    X, y, batch, age = cohort
    train = np.arange(200)
    sig = ImagingSignature(random_state=3).fit(X.iloc[train], y[train], batch=batch[train],
                                               covariates=age[train])
    before = sig.score(X, batch=batch, covariates=age)
    X2, y2, age2 = X.copy(), y.copy(), age.copy()
    X2.iloc[200:] = X2.iloc[200:].to_numpy()[::-1] * 50 + 7  # wreck the held-out rows
    y2["time"][200:] = y2["time"][200:][::-1]
    age2[200:] = 0.0
    sig2 = ImagingSignature(random_state=3).fit(X2.iloc[train], y2[train], batch=batch[train],
                                                covariates=age2[train])
    after = sig2.score(X2, batch=batch, covariates=age2)
    np.testing.assert_array_equal(before[train], after[train])
    np.testing.assert_array_equal(sig.coef_.to_numpy(), sig2.coef_.to_numpy())
    np.testing.assert_array_equal(sig.combat_.gamma_star_, sig2.combat_.gamma_star_)
    assert sig.steps_ == sig2.steps_
    assert not np.allclose(before[200:], after[200:])  # the mutation did reach the scores


def test_redundant_copy_is_dropped_with_a_reason():
    X, y, _, _ = _signal_cohort(seed=4)
    rng = np.random.default_rng(4)
    X = X.assign(f0_copy=X["f0"] + 0.05 * rng.standard_normal(N))
    sig = ImagingSignature(random_state=0).fit(X, y)
    red = next(s for s in sig.steps_ if s.step == "redundancy")
    dropped = dict(red.dropped)
    assert ("f0" in dropped) != ("f0_copy" in dropped)
    reason = dropped.get("f0", dropped.get("f0_copy"))
    assert "|r| = " in reason and "f0" in reason


def test_screening_on_noise_can_leave_an_empty_signature():
    rng = np.random.default_rng(6)
    X = pd.DataFrame(rng.standard_normal((150, 60)), columns=[f"n{j}" for j in range(60)])
    y = make_outcome(rng.exponential(1.0, 150), rng.random(150) < 0.7)
    sig = ImagingSignature(screen_fdr=1e-6, random_state=0).fit(X, y)
    assert sig.selected_features_ == () and sig.path_ is None
    np.testing.assert_array_equal(sig.score(X), 0.0)


def test_unseen_batch_and_missing_batch_are_clear_errors(fitted, cohort):
    X, _, batch, age = cohort
    b = batch.copy()
    b[:2] = "D"
    with pytest.raises(ModelError, match=r"\['D'\].*known batches are \['A', 'B', 'C'\]"):
        fitted.score(X, batch=b, covariates=age)
    with pytest.raises(ModelError, match="pass batch="):
        fitted.score(X)


def test_clone_gives_an_unfitted_copy(fitted):
    c = clone(fitted)
    assert c.get_params() == fitted.get_params()
    assert not hasattr(c, "steps_")


def test_clinical_plus_imaging_keeps_clinical_terms_unpenalised(cohort):
    X, y, _, age = cohort
    Xc = pd.concat([pd.DataFrame({"age": age, "stage": (age > 65).astype(float)}), X], axis=1)
    m = ClinicalPlusImagingCox(["age", "stage"], random_state=0).fit(Xc, y)
    clinical_rows = [0, 1]
    assert np.all(m.path_.coefs[clinical_rows] != 0)
    assert set(m.selected_features_) <= set(X.columns)
    assert m.score(Xc).shape == (N,)
    with pytest.raises(SpecError, match="grade"):
        ClinicalPlusImagingCox(["grade"]).fit(Xc, y)


def test_volume_dominance_check():
    rng = np.random.default_rng(2)
    X = pd.DataFrame({"shape_volume": rng.lognormal(3, 1, 200), "glcm": rng.standard_normal(200)})
    mostly_volume = np.log(X["shape_volume"]) + 0.1 * rng.standard_normal(200)
    res = volume_correlation(mostly_volume, X, "shape_volume")
    assert res.dominant and res.spearman > 0.9
    with pytest.warns(VolumeDominanceWarning, match="shape_volume"):
        check_volume_dominance(res)
    other = volume_correlation(X["glcm"], X, "shape_volume")
    assert not other.dominant
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        check_volume_dominance(other)
    with pytest.raises(SpecError, match="shape_volume"):
        volume_correlation(mostly_volume, X, "volume")


def test_path_is_extended_only_when_the_optimum_sits_on_its_end():
    # Few strong predictors and many patients: the cross-validated optimum lies at a
    # weak penalty, below the first stop at 0.05 x alpha_max.
    rng = np.random.default_rng(12)
    n = 400
    X = rng.standard_normal((n, 4))
    t = rng.exponential(np.exp(-X @ np.array([1.0, -0.8, 0.6, 0.4])))
    y = make_outcome(t, np.ones(n, bool))
    r = fit_penalized_path(X, y, path_stop_ratio=0.05, alpha_min_ratio=1e-3, random_state=0)
    assert r.n_extensions >= 1
    assert r.alphas[-1] < 0.05 * r.alpha_max
    assert r.index_min < r.alphas.size - 1 or r.on_boundary
    one_se = fit_penalized_path(X, y, path_stop_ratio=0.05, alpha_min_ratio=1e-3, rule="1se",
                                random_state=0)
    assert one_se.alpha >= r.alpha
    # a cohort with a weak signal stops at the first segment
    X2, y2, _, _ = _signal_cohort(seed=3)
    Z2 = ((X2 - X2.mean()) / X2.std(ddof=0)).to_numpy()
    r2 = fit_penalized_path(Z2, y2, random_state=0)
    assert r2.n_extensions == 0 and r2.alphas[-1] >= 0.05 * r2.alpha_max * (1 - 1e-9)
