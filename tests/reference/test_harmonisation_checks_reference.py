"""The tests behind the harmonisation checks, against general-purpose libraries.

* Benjamini-Hochberg q-values: statsmodels ``multipletests(method="fdr_bh")``.
* Location test: the F test of nested OLS models from statsmodels ``anova_lm``.
* Scale test: with no covariates it is the Brown-Forsythe test, scipy
  ``stats.levene(center="median")``.
* Scanner classifier: scikit-learn's ``cross_val_predict`` + ``roc_auc_score`` with the
  same folds and model.
Data: simulated (invented) scanners and features, seeded.
"""

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from scipy import stats
from statsmodels.stats.anova import anova_lm
from statsmodels.stats.multitest import multipletests

from workbench.preprocess.harmonisation_checks import (
    bh_qvalues,
    location_pvalues,
    scale_pvalues,
    scanner_classifier_auc,
)


@pytest.fixture
def table():
    rng = np.random.default_rng(4)
    batch = np.repeat(["s1", "s2", "s3"], [40, 35, 45])
    age = rng.normal(60, 10, batch.size)
    shift = pd.Series({"s1": 0.0, "s2": 0.4, "s3": -0.2})[batch].to_numpy()
    scale = pd.Series({"s1": 1.0, "s2": 1.5, "s3": 0.8})[batch].to_numpy()
    X = 0.03 * age[:, None] + shift[:, None] * rng.uniform(0, 1, 6) + scale[:, None] * rng.standard_normal((120, 6))
    return X, batch, age


def test_bh_qvalues_match_statsmodels():
    p = np.random.default_rng(1).uniform(0, 0.2, 50) ** 2
    np.testing.assert_allclose(bh_qvalues(p), multipletests(p, method="fdr_bh")[1], rtol=0, atol=1e-12)


def test_location_test_matches_nested_ols_f_test(table):
    X, batch, age = table
    ours = location_pvalues(X, batch, age)
    for j in range(X.shape[1]):
        df = pd.DataFrame({"y": X[:, j], "age": age, "scanner": batch})
        small = sm.OLS.from_formula("y ~ age", df).fit()
        big = sm.OLS.from_formula("y ~ age + C(scanner)", df).fit()
        ref = anova_lm(small, big)["Pr(>F)"].iloc[1]
        assert ours[j] == pytest.approx(ref, rel=1e-8)


def test_scale_test_is_brown_forsythe_without_covariates(table):
    X, batch, _ = table
    ours = scale_pvalues(X, batch)
    for j in range(X.shape[1]):
        ref = stats.levene(*(X[batch == b, j] for b in ("s1", "s2", "s3")), center="median").pvalue
        assert ours[j] == pytest.approx(ref, rel=1e-8)


def test_classifier_auc_matches_scikit_learn_cross_val_predict(table):
    from sklearn.linear_model import LogisticRegression
    from sklearn.metrics import roc_auc_score
    from sklearn.model_selection import StratifiedKFold, cross_val_predict
    from sklearn.pipeline import make_pipeline
    from sklearn.preprocessing import StandardScaler

    X, batch, _ = table
    codes = pd.factorize(batch, sort=True)[0]
    prob = cross_val_predict(make_pipeline(StandardScaler(), LogisticRegression(C=1.0, max_iter=2000)), X, codes,
                             cv=StratifiedKFold(5, shuffle=True, random_state=3), method="predict_proba")
    ref = roc_auc_score(codes, prob, multi_class="ovr", average="macro")
    assert scanner_classifier_auc(X, batch, random_state=3) == pytest.approx(ref, abs=1e-12)
