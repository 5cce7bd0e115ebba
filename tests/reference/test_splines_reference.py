"""Reference checks of the spline basis and of clinical terms in a Cox model.

Sources:
* patsy's natural cubic regression spline ``cr()`` (general-purpose formula
  library used by statsmodels) -- same function space as our basis.
* Harrell, Regression Modeling Strategies, 2nd ed. (Springer 2015), Table 2.3 --
  default knot quantiles, typed here independently of the package constant.
* German Breast Cancer Study Group 2 (Schumacher et al. 1994) as shipped with
  scikit-survival (``load_gbsg2``), fitted with lifelines' ``CoxPHFitter``
  (Efron ties); coefficient values from the project's REFERENCE_VALUES.md
  (scikit-survival 0.28 on the same data).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import patsy
import pytest
from lifelines import CoxPHFitter
from sksurv.datasets import load_gbsg2

from workbench.errors import WorkbenchError
from workbench.preprocess.clinical import ClinicalTransformer, PredictorSpec, hazard_ratio_rows
from workbench.preprocess.splines import harrell_knots, rcs_basis

# Harrell (2015), Table 2.3: quantiles for 3 to 7 knots.
BOOK_QUANTILES = {
    3: [0.10, 0.50, 0.90],
    4: [0.05, 0.35, 0.65, 0.95],
    5: [0.05, 0.275, 0.50, 0.725, 0.95],
    6: [0.05, 0.23, 0.41, 0.59, 0.77, 0.95],
    7: [0.025, 0.1833, 0.3417, 0.50, 0.6583, 0.8167, 0.975],
}


@pytest.fixture(scope="module")
def gbsg2():
    X, y = load_gbsg2()
    frame = X.copy()
    frame["time"] = y["time"]
    frame["event"] = y["cens"].astype(int)
    return frame.reset_index(drop=True)


def _projection_residual(a: np.ndarray, b: np.ndarray) -> float:
    """Relative residual of projecting the columns of ``b`` onto span(a)."""
    coef, *_ = np.linalg.lstsq(a, b, rcond=None)
    return float(np.linalg.norm(b - a @ coef) / np.linalg.norm(b))


@pytest.mark.parametrize("k", [3, 4, 5, 6, 7])
def test_basis_spans_the_same_space_as_patsy_cr(gbsg2, k):
    # patsy cr() with the same interior and boundary knots spans the natural
    # cubic splines, constants included; ours is [x, nonlinear] without the
    # intercept (a Cox model has none), so compare against [1, ours].
    x = gbsg2["age"].to_numpy(dtype=float)
    t = harrell_knots(x, k)
    grid = np.linspace(t[0], t[-1], 97)
    for values in (x, grid):
        ours = np.column_stack([np.ones(values.size), rcs_basis(values, t)])
        natural = np.asarray(
            patsy.dmatrix(  # patsy also looks names up in this frame: keep locals distinct
                "cr(x, knots=inner, lower_bound=lo, upper_bound=hi) - 1",
                {"x": values, "inner": tuple(t[1:-1]), "lo": t[0], "hi": t[-1]},
            )
        )
        assert natural.shape[1] == ours.shape[1] == k
        assert _projection_residual(ours, natural) < 1e-10
        assert _projection_residual(natural, ours) < 1e-10


def test_basis_is_linear_beyond_the_boundary_knots():
    # Restricted cubic splines are linear in the tails (Harrell 2015, Sec. 2.4.5):
    # equally spaced second differences vanish outside [t_1, t_k] and not inside.
    t = np.array([40.0, 48.0, 53.0, 61.0, 70.0])
    h = 0.5
    below = rcs_basis(np.arange(20.0, t[0] + 1e-9, h), t)
    above = rcs_basis(np.arange(t[-1], 95.0, h), t)
    inside = rcs_basis(np.arange(t[0], t[-1], h), t)
    for part in (below, above):
        assert np.max(np.abs(np.diff(part, n=2, axis=0))) < 1e-9 * np.max(np.abs(above))
    assert np.min(np.max(np.abs(np.diff(inside[:, 1:], n=2, axis=0)), axis=0)) > 1e-4


@pytest.mark.parametrize("k", [3, 4, 5, 6, 7])
@pytest.mark.parametrize("column", ["age", "tsize", "progrec"])
def test_knots_are_numpy_percentiles_at_harrell_quantiles(gbsg2, column, k):
    x = gbsg2[column].to_numpy(dtype=float)
    expected = np.percentile(x, np.array(BOOK_QUANTILES[k]) * 100.0)
    if np.any(np.diff(expected) <= 0):
        # tied percentiles cannot be knots: the workbench refuses them with a clear error
        with pytest.raises(WorkbenchError):
            harrell_knots(x, k)
        return
    np.testing.assert_allclose(harrell_knots(x, k), expected, rtol=1e-12)


def test_transformer_puts_knots_on_the_transformed_scale(gbsg2):
    ct = ClinicalTransformer((PredictorSpec("tsize", "spline", transform="log", knots=5),)).fit(gbsg2)
    term = ct.terms_[0]
    expected = np.percentile(np.log(gbsg2["tsize"]), np.array(BOOK_QUANTILES[5]) * 100.0)
    np.testing.assert_allclose(term.knots, expected, rtol=1e-12)
    np.testing.assert_allclose(term.knots_raw, np.exp(expected), rtol=1e-12)


# ------------------------------------------------------------------ Cox model through the design


def _cox(design, frame) -> CoxPHFitter:
    df = design.to_frame()
    df["time"] = frame["time"].to_numpy()[design.rows_used]
    df["event"] = frame["event"].to_numpy()[design.rows_used]
    return CoxPHFitter().fit(df, duration_col="time", event_col="event")


OTHERS = (
    PredictorSpec("age"),
    PredictorSpec("estrec"),
    PredictorSpec("horTh", "categorical"),
    PredictorSpec("menostat", "categorical"),
    PredictorSpec("pnodes"),
    PredictorSpec("progrec"),
    PredictorSpec("tgrade", "categorical"),
)


def test_gbsg2_cox_coefficients_through_categorical_coding(gbsg2):
    # REFERENCE_VALUES.md (library, scikit-survival 0.28, Efron): horTh(yes) -0.3463,
    # pnodes 0.04879, tgrade II 0.6361, III 0.7797, log-likelihood -1735.73.
    ct = ClinicalTransformer((*OTHERS, PredictorSpec("tsize"))).fit(gbsg2)
    dm = ct.transform(gbsg2)
    assert ct.terms_[2].reference == "no" and ct.terms_[6].reference == "I"
    fit = _cox(dm, gbsg2)
    b = fit.params_
    assert b["horTh=yes"] == pytest.approx(-0.3463, abs=5e-4)
    assert b["pnodes"] == pytest.approx(0.04879, abs=5e-5)
    assert b["tgrade=II"] == pytest.approx(0.6361, abs=5e-4)
    assert b["tgrade=III"] == pytest.approx(0.7797, abs=5e-4)
    assert fit.log_likelihood_ == pytest.approx(-1735.73, abs=0.01)
    # our table rows reproduce lifelines' own hazard ratios and 95% intervals
    summary = fit.summary
    rows = hazard_ratio_rows(ct.terms_[6], fit.params_.to_numpy(), fit.variance_matrix_.to_numpy())
    assert [r.contrast for r in rows] == ["II vs I", "III vs I"]
    for r in rows:
        s = summary.loc[r.design_columns[0]]
        assert r.hr == pytest.approx(s["exp(coef)"], rel=1e-10)
        assert r.lower == pytest.approx(s["exp(coef) lower 95%"], rel=1e-8)
        assert r.upper == pytest.approx(s["exp(coef) upper 95%"], rel=1e-8)
        assert r.p_value == pytest.approx(s["p"], rel=1e-6)


def test_hazard_ratio_per_doubling_for_log2_and_log(gbsg2):
    # beta_log2 * log2(x) = (beta_log2 / ln 2) * ln(x): the two fits are the same
    # model, so HR per doubling = exp(beta_log2) = exp(beta_log * ln 2).
    fits = {}
    for tf in ("log2", "log"):
        ct = ClinicalTransformer((*OTHERS, PredictorSpec("tsize", transform=tf, unit="mm"))).fit(gbsg2)
        fit = _cox(ct.transform(gbsg2), gbsg2)
        rows = hazard_ratio_rows(ct.terms_[-1], fit.params_.to_numpy(), fit.variance_matrix_.to_numpy())
        fits[tf] = (fit, {r.contrast: r for r in rows})
    fit2, rows2 = fits["log2"]
    fite, rowse = fits["log"]
    b2, be = fit2.params_["log2(tsize)"], fite.params_["log(tsize)"]
    assert set(rows2) == {"per doubling"}
    assert set(rowse) == {"per e-fold increase", "per doubling"}
    assert rows2["per doubling"].hr == pytest.approx(np.exp(b2), rel=1e-12)
    assert rowse["per e-fold increase"].hr == pytest.approx(np.exp(be), rel=1e-12)
    assert rowse["per doubling"].hr == pytest.approx(np.exp(be * np.log(2.0)), rel=1e-12)
    # the reparametrised fits agree, intervals included (to the optimiser's tolerance)
    for attr in ("hr", "lower", "upper", "p_value"):
        assert getattr(rowse["per doubling"], attr) == pytest.approx(getattr(rows2["per doubling"], attr), rel=1e-5)
    s = fit2.summary.loc["log2(tsize)"]
    assert rows2["per doubling"].lower == pytest.approx(s["exp(coef) lower 95%"], rel=1e-8)


def test_spline_quartile_contrast_matches_a_reparametrised_fit(gbsg2):
    # HR(75th vs 25th percentile) = exp(c'b) with SE sqrt(c'Vc). Independent check:
    # refit with the spline columns multiplied by M^-1, M = [c; e2; e3], so that the
    # first new coefficient *is* c'b and lifelines reports its SE directly (ML
    # estimates are invariant to an invertible reparametrisation).
    ct = ClinicalTransformer((PredictorSpec("age", "spline", knots=4, unit="years"), *OTHERS[1:])).fit(gbsg2)
    dm = ct.transform(gbsg2)
    fit = _cox(dm, gbsg2)
    term = ct.terms_[0]
    (row,) = hazard_ratio_rows(term, fit.params_.to_numpy(), fit.variance_matrix_.to_numpy())
    q75, q25 = term.percentile(75), term.percentile(25)
    assert q75 == np.percentile(gbsg2["age"], 75) and q25 == np.percentile(gbsg2["age"], 25)
    c = rcs_basis([q75], term.knots)[0] - rcs_basis([q25], term.knots)[0]
    m = np.vstack([c, np.eye(3)[1:]])
    X = dm.X.copy()
    X[:, term.design_slice] = X[:, term.design_slice] @ np.linalg.inv(m)
    re = pd.DataFrame(X, columns=[f"v{j}" for j in range(X.shape[1])])
    re["time"], re["event"] = gbsg2["time"], gbsg2["event"]
    refit = CoxPHFitter().fit(re, duration_col="time", event_col="event")
    assert row.log_hr == pytest.approx(refit.params_["v0"], rel=1e-5)
    assert row.se == pytest.approx(refit.standard_errors_["v0"], rel=1e-4)
    # and the same HR as lifelines' predicted partial hazards of two patients
    # who differ only in age (75th vs 25th percentile)
    two = gbsg2.iloc[[0, 0]].copy()
    two["age"] = [q75, q25]
    ph = fit.predict_partial_hazard(ct.transform(two).to_frame()).to_numpy()
    assert ph[0] / ph[1] == pytest.approx(row.hr, rel=1e-10)
