"""Variance inflation factors and score correlations against statsmodels, scikit-learn and numpy.

Data: German Breast Cancer Study Group 2 (Schumacher et al., J Clin Oncol 1994) as shipped
with scikit-survival (``load_gbsg2``); the design is the one the clinical Cox model builds.
References: statsmodels' ``variance_inflation_factor`` (with an explicit constant column, as
its documentation requires) and the closed form 1 / (1 - R^2) with R^2 from scikit-learn's
``LinearRegression`` (with intercept) of each column on the others.
"""

from __future__ import annotations

import numpy as np
import pytest
import statsmodels.api as sm
from sklearn.linear_model import LinearRegression
from statsmodels.stats.outliers_influence import variance_inflation_factor

from workbench.preprocess.clinical import ClinicalTransformer, PredictorSpec
from workbench.stats.collinearity import score_collinearity, variance_inflation

SPECS = (
    PredictorSpec("age"),
    PredictorSpec("estrec"),
    PredictorSpec("horTh", kind="categorical", reference="no"),
    PredictorSpec("menostat", kind="categorical", reference="Post"),
    PredictorSpec("pnodes"),
    PredictorSpec("progrec"),
    PredictorSpec("tgrade", kind="categorical", levels=("I", "II", "III"), reference="I"),
)


@pytest.fixture(scope="module")
def gbsg2_design(gbsg2_cohort):
    cohort, _ = gbsg2_cohort()
    tr = ClinicalTransformer(SPECS).fit(cohort)
    return tr.transform(cohort).X, tr.columns_, cohort.clinical["tsize"].to_numpy(dtype=float)


def test_vif_equals_statsmodels(gbsg2_design):
    X, _, _ = gbsg2_design
    exog = sm.add_constant(X)
    want = [variance_inflation_factor(exog, j) for j in range(1, exog.shape[1])]
    np.testing.assert_allclose(variance_inflation(X), want, rtol=1e-10)


def test_vif_equals_closed_form_from_least_squares(gbsg2_design):
    X, _, size = gbsg2_design
    A = np.column_stack([X, size])
    want = []
    for j in range(A.shape[1]):
        others = np.delete(A, j, axis=1)
        r2 = LinearRegression().fit(others, A[:, j]).score(others, A[:, j])
        want.append(1.0 / (1.0 - r2))
    np.testing.assert_allclose(variance_inflation(A), want, rtol=1e-9)


def test_score_collinearity_table(gbsg2_design):
    # tumour size (GBSG2's tsize, mm) stands in for a score added to the clinical design
    X, cols, size = gbsg2_design
    t = score_collinearity(X, cols, size, score_name="tsize")
    assert t.n == X.shape[0] and [r.column for r in t.rows] == list(cols)
    for j, r in enumerate(t.rows):
        assert r.correlation == pytest.approx(np.corrcoef(X[:, j], size)[0, 1], abs=1e-12)
    exog = sm.add_constant(np.column_stack([X, size]))
    with_score = [variance_inflation_factor(exog, j) for j in range(1, exog.shape[1])]
    np.testing.assert_allclose([r.vif_with for r in t.rows], with_score[:-1], rtol=1e-10)
    assert t.score_vif == pytest.approx(with_score[-1], rel=1e-10)
    r2 = LinearRegression().fit(X, size).score(X, size)
    assert t.score_r2 == pytest.approx(r2, abs=1e-10)
    # per term: R^2 of the score on that term's columns alone (scikit-learn LinearRegression)
    terms = ["tgrade" if c.startswith("tgrade") else c for c in cols]
    t2 = score_collinearity(X, cols, size, terms=terms)
    grade = [j for j, c in enumerate(cols) if c.startswith("tgrade")]
    assert len(grade) == 2 and dict(t2.term_r2)["tgrade"] == pytest.approx(
        LinearRegression().fit(X[:, grade], size).score(X[:, grade], size), abs=1e-12)
    assert dict(t2.term_r2)["pnodes"] == pytest.approx(np.corrcoef(X[:, cols.index("pnodes")], size)[0, 1] ** 2,
                                                       abs=1e-12)
    # adding a column can only raise (or keep) the others' inflation
    assert all(r.vif_with >= r.vif_without - 1e-12 for r in t.rows)


def test_degenerate_columns():
    rng = np.random.default_rng(4)
    X = rng.normal(size=(50, 2))
    v = variance_inflation(np.column_stack([X, np.ones(50)]))
    assert np.isnan(v[2]) and np.all(np.isfinite(v[:2]))
    v = variance_inflation(np.column_stack([X, X[:, 0] - 2 * X[:, 1], rng.normal(size=50)]))
    assert np.all(np.isinf(v[:3])) and np.isfinite(v[3])
    assert variance_inflation(X[:, :1]) == pytest.approx([1.0])
