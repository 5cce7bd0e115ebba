"""Unit tests of feature reduction steps (workbench.preprocess.reduce)."""

import numpy as np
import pandas as pd
import pytest
from lifelines import CoxPHFitter
from lifelines.datasets import load_rossi
from statsmodels.duration.hazard_regression import PHReg
from statsmodels.stats.multitest import multipletests

from workbench.cohort.outcome import make_outcome
from workbench.errors import CohortError, ModelError, NotFittedError
from workbench.preprocess.reduce import (
    CoxScreen,
    NearZeroVarianceFilter,
    RedundancyFilter,
    Standardizer,
    benjamini_hochberg,
    univariate_cox,
)


@pytest.fixture
def cohort():
    """Continuous times (no ties, so Breslow = Efron = exact), two prognostic features."""
    rng = np.random.default_rng(11)
    n = 300
    X = rng.standard_normal((n, 6))
    X[:, 1] = 3 * X[:, 1] + 20
    X[:, 2] = 0.97 * X[:, 0] + 0.2 * rng.standard_normal(n)  # near copy of the strong feature, r ~ 0.98
    t = rng.exponential(np.exp(-0.8 * X[:, 0] - 0.1 * X[:, 1]))
    c = rng.exponential(2.0, n)
    y = make_outcome(np.minimum(t, c), t <= c)
    return pd.DataFrame(X, columns=[f"f{j}" for j in range(6)]), y


def test_wald_matches_lifelines_exact_per_feature_fit(cohort):
    # Reference: lifelines CoxPHFitter, one exact Newton fit per feature (its stopping
    # rule on the log-likelihood leaves ~1e-8 in the coefficient, hence 1e-7), and
    # statsmodels PHReg iterated to tol 1e-14 for a tight check of the same maximum.
    X, y = cohort
    res = univariate_cox(X, y, test="wald")
    for j in (0, 1, 3, 5):
        df = pd.DataFrame({"x": X.iloc[:, j], "T": y["time"], "E": y["event"]})
        f = CoxPHFitter().fit(df, "T", "E", fit_options={"precision": 1e-12})
        assert res.coef[j] == pytest.approx(f.params_["x"], abs=1e-7)
        assert res.se[j] == pytest.approx(f.standard_errors_["x"], rel=1e-6)
        sm = PHReg(y["time"], X.iloc[:, [j]].to_numpy(), status=y["event"].astype(int)).fit(tol=1e-14)
        assert res.coef[j] == pytest.approx(sm.params[0], abs=1e-10)
    assert res.converged.all()


def test_score_and_wald_match_statsmodels_breslow_on_rossi():
    # Reference: statsmodels PHReg (ties="breslow") on the Rossi recidivism data
    # shipped with lifelines; weeks are heavily tied, which exercises the tie handling.
    rossi = load_rossi()
    y = make_outcome(rossi["week"], rossi["arrest"])
    cols = ["age", "prio", "fin", "wexp"]
    score = univariate_cox(rossi[cols], y, test="score")
    wald = univariate_cox(rossi[cols], y, test="wald")
    for j, c in enumerate(cols):
        m = PHReg(rossi["week"], rossi[[c]], status=rossi["arrest"], ties="breslow")
        u = m.score(np.zeros(1))[0]
        info = -m.hessian(np.zeros(1))[0, 0]
        assert score.z[j] == pytest.approx(u / np.sqrt(info), rel=1e-9)
        fit = m.fit()
        assert wald.coef[j] == pytest.approx(fit.params[0], abs=1e-7)
        assert wald.se[j] == pytest.approx(fit.bse[0], rel=1e-6)


def test_benjamini_hochberg_matches_statsmodels():
    p = np.random.default_rng(3).uniform(size=57) ** 3
    np.testing.assert_allclose(benjamini_hochberg(p), multipletests(p, method="fdr_bh")[1], atol=1e-14)


def test_standardizer_uses_training_rows_only(cohort):
    X, _ = cohort
    s = Standardizer().fit(X.iloc[:200])
    out = s.transform(X.iloc[200:])
    expected = (X.iloc[200:] - X.iloc[:200].mean()) / X.iloc[:200].std(ddof=0)
    np.testing.assert_allclose(out.to_numpy(), expected.to_numpy(), atol=1e-12)


def test_near_zero_variance_drops_constant_and_rare_features():
    rng = np.random.default_rng(0)
    n = 200
    X = pd.DataFrame({
        "const": np.ones(n),
        "rare": np.r_[np.zeros(n - 3), 1.0, 2.0, 3.0],  # 197:1 ratio, 2% distinct
        "binary": np.r_[np.zeros(100), np.ones(100)],  # few distinct values but balanced
        "texture": rng.standard_normal(n),
    })
    f = NearZeroVarianceFilter().fit(X)
    assert f.record_.kept == ("binary", "texture")
    assert f.record_.reasons["const"] == "constant in the training rows"
    assert "197:1" in f.record_.reasons["rare"]
    assert list(f.transform(X).columns) == ["binary", "texture"]


def test_redundancy_keeps_the_more_representative_member_without_looking_at_outcome(cohort):
    X, y = cohort
    X = X[["f2", "f0", "f1", "f3"]]
    f = RedundancyFilter(0.9).fit(X, y)
    R = np.abs(np.corrcoef(X.to_numpy(), rowvar=False))
    np.fill_diagonal(R, 0)
    rep = (R * R).sum(axis=0)  # sum of squared correlations, computed independently with numpy
    a, b = ("f2", "f0") if rep[0] >= rep[1] else ("f0", "f2")
    assert a in f.record_.kept and b not in f.record_.kept
    assert a in f.record_.reasons[b] and "represents" in f.record_.reasons[b]
    kept = f.transform(X).to_numpy()
    r = np.corrcoef(kept, rowvar=False)
    assert np.abs(r[np.triu_indices_from(r, 1)]).max() <= 0.9


def test_redundancy_choice_does_not_change_when_outcomes_are_shuffled():
    rng = np.random.default_rng(11)
    F = rng.standard_normal((200, 8))
    X = F[:, rng.integers(0, 8, 60)] + 0.3 * rng.standard_normal((200, 60))
    t = rng.exponential(np.exp(-X[:, 0]), 200)
    y = make_outcome(t, rng.random(200) < 0.7)
    kept = RedundancyFilter(0.85).fit(X, y).record_.kept
    for seed in range(5):
        perm = np.random.default_rng(seed).permutation(200)
        assert RedundancyFilter(0.85).fit(X, y[perm]).record_.kept == kept
    assert RedundancyFilter(0.85).fit(X).record_.kept == kept  # no outcome needed at all


def test_redundancy_on_many_correlated_features_leaves_no_pair_above_threshold():
    rng = np.random.default_rng(5)
    F = rng.standard_normal((150, 10))
    X = F[:, rng.integers(0, 10, 120)] + 0.25 * rng.standard_normal((150, 120))
    y = make_outcome(rng.exponential(1, 150), rng.random(150) < 0.7)
    f = RedundancyFilter(0.85).fit(X, y)
    K = f.transform(X)
    r = np.abs(np.corrcoef(K, rowvar=False))
    np.fill_diagonal(r, 0)
    assert r.max() <= 0.85 and K.shape[1] < 60  # many copies collapsed
    # every dropped feature is redundant with at least one kept feature
    full = np.abs(np.corrcoef(X, rowvar=False))
    assert (full[~f.support_][:, f.support_].max(axis=1) > 0.85).all()


def test_cox_screen_keeps_signal_and_drops_noise(cohort):
    X, y = cohort
    s = CoxScreen(fdr=0.05).fit(X, y)
    assert {"f0", "f2"} <= set(s.record_.kept)
    assert not {"f3", "f4", "f5"} & set(s.record_.kept)
    assert "q =" in s.record_.reasons["f3"]


def test_cox_screen_on_pure_noise_can_keep_nothing():
    rng = np.random.default_rng(9)
    X = rng.standard_normal((200, 100))
    y = make_outcome(rng.exponential(1, 200), rng.random(200) < 0.6)
    assert CoxScreen(fdr=0.05).fit(X, y).record_.n_out <= 2
    assert CoxScreen(fdr=1e-12, min_keep=3).fit(X, y).record_.n_out == 3


def test_errors_are_clear(cohort):
    X, y = cohort
    with pytest.raises(NotFittedError):
        Standardizer().transform(X)
    Xn = X.copy()
    Xn.iloc[4, 2] = np.nan
    with pytest.raises(CohortError, match=r"columns \['f2'\]"):
        NearZeroVarianceFilter().fit(Xn)
    f = NearZeroVarianceFilter().fit(X)
    with pytest.raises(ModelError, match="differ from those seen in fit"):
        f.transform(X[X.columns[::-1]])
    with pytest.raises(ModelError, match="unknown"):
        univariate_cox(X, y, test="lrt")


def test_cox_screen_counts_each_patient_once_with_bootstrap_duplicates():
    rng = np.random.default_rng(3)
    n, p = 150, 40
    X = rng.standard_normal((n, p))
    y = make_outcome(rng.exponential(np.exp(-0.35 * X[:, 0]), n), rng.random(n) < 0.7)
    ids = np.array([f"p{i}" for i in range(n)])
    once = CoxScreen(fdr=0.10).fit(X, y)
    idx = rng.integers(0, n, 3 * n)  # heavy duplication, as a bootstrap sample of size 3n
    idx = np.concatenate([np.arange(n), idx])  # every patient at least once
    dup = CoxScreen(fdr=0.10).fit(X[idx], y[idx], groups=ids[idx])
    assert dup.record_.kept == once.record_.kept
    np.testing.assert_allclose(dup.z_, once.z_, rtol=1e-12)
    naive = CoxScreen(fdr=0.10).fit(X[idx], y[idx])  # rows as if independent patients
    assert np.abs(naive.z_).sum() > 1.5 * np.abs(once.z_).sum()
