"""Calibration, decision-curve and reclassification metrics against outside references.

Sources named in each test: lifelines 0.30 (``KaplanMeierFitter``,
``CoxPHFitter``), scikit-survival 0.28 (``load_gbsg2``, ``load_veterans_lung_cancer``,
``CoxPHSurvivalAnalysis``), patsy (natural cubic regression splines), and the
defining formulas of the published methods.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from lifelines import CoxPHFitter, KaplanMeierFitter
from sksurv.datasets import load_gbsg2, load_veterans_lung_cancer
from sksurv.linear_model import CoxPHSurvivalAnalysis
from sksurv.preprocessing import OneHotEncoder

from workbench.cohort import make_outcome
from workbench.metrics.calibration import (
    calibration_slope,
    grouped_calibration,
    observed_expected,
    smoothed_calibration,
)
from workbench.metrics.calibration_cox import _cloglog, _rcs_basis, _rcs_knots
from workbench.metrics.decision import net_benefit
from workbench.metrics.reclassification import continuous_nri, integrated_discrimination
from workbench.predictions import SurvivalCurves

T0 = 1825.0  # five years, in days


@pytest.fixture(scope="module")
def gbsg2():
    X, y = load_gbsg2()
    X = OneHotEncoder().fit_transform(X)
    times = np.arange(30.0, 2500.0, 5.0)
    model = CoxPHSurvivalAnalysis(ties="efron").fit(X, y)
    P = np.vstack([f(times) for f in model.predict_survival_function(X)])
    small = CoxPHSurvivalAnalysis(ties="efron").fit(X[["age", "tsize"]], y)
    P_small = np.vstack([f(times) for f in small.predict_survival_function(X[["age", "tsize"]])])
    yy = make_outcome(y["time"], y["cens"])
    return yy, SurvivalCurves(times, P, "full"), SurvivalCurves(times, P_small, "age+size")


def _km(time, event, t0):
    kmf = KaplanMeierFitter().fit(time, event)
    s = float(kmf.survival_function_at_times(t0).iloc[0])
    ci = kmf.confidence_interval_survival_function_
    j = np.searchsorted(ci.index.to_numpy(), t0, side="right") - 1
    return s, float(ci.iloc[j, 0]), float(ci.iloc[j, 1]), kmf


def test_apparent_calibration_slope_of_a_cox_model_is_one(gbsg2):
    # Source: property of the partial-likelihood maximum (refitting a Cox model on its
    # own linear predictor returns coefficient 1; Van Houwelingen, Stat Med 2000).
    # cloglog of Cox-predicted risk at t0 is the linear predictor plus a constant.
    # The identity holds for the fit on all follow-up (censor_at_horizon=False); the
    # default, horizon-specific slope is checked in tests/properties/test_horizon_slope.py.
    y, full, _ = gbsg2
    res = calibration_slope(y, full, T0, censor_at_horizon=False)
    assert res.slope == pytest.approx(1.0, abs=1e-6)
    assert res.ci_lower < 1.0 < res.ci_upper
    assert 0.05 < res.std_err < 0.15


def test_grouped_observed_risk_matches_lifelines_kaplan_meier(gbsg2):
    # Source: lifelines KaplanMeierFitter (survival and its log(-log) "exponential
    # Greenwood" 95% interval) inside each group.
    y, full, _ = gbsg2
    res = grouped_calibration(y, full, T0, n_groups=4)
    risk = full.risk_at(T0)
    group = np.searchsorted(res.edges[1:-1], risk, side="right")
    assert res.n.sum() == y.size and res.n.size == 4
    for g in range(4):
        m = group == g
        s, lo, hi, _ = _km(y["time"][m], y["event"][m], T0)
        assert res.observed[g] == pytest.approx(1 - s, abs=1e-12)
        assert res.observed_lower[g] == pytest.approx(1 - hi, abs=1e-8)
        assert res.observed_upper[g] == pytest.approx(1 - lo, abs=1e-8)
        assert res.mean_predicted[g] == pytest.approx(risk[m].mean(), abs=1e-14)
        assert res.events[g] == np.sum(y["event"][m] & (y["time"][m] <= T0))


def test_observed_expected_matches_lifelines_and_greenwood(gbsg2):
    # Source: lifelines KaplanMeierFitter at 5 years; Greenwood's variance written out
    # from lifelines' event table; delta method for log(O/E).
    y, full, _ = gbsg2
    res = observed_expected(y, full, T0)
    s, _, _, kmf = _km(y["time"], y["event"], T0)
    tab = kmf.event_table
    tab = tab[tab.index <= T0]
    d, n = tab["observed"].to_numpy(float), tab["at_risk"].to_numpy(float)
    se = s * np.sqrt(np.sum(d / (n * (n - d))))
    ratio = (1 - s) / full.risk_at(T0).mean()
    assert res.ratio == pytest.approx(ratio, abs=1e-12)
    assert res.ci_upper == pytest.approx(ratio * np.exp(1.959963984540054 * se / (1 - s)), abs=1e-9)
    assert res.ci_lower == pytest.approx(ratio * np.exp(-1.959963984540054 * se / (1 - s)), abs=1e-9)


def test_spline_basis_spans_patsy_natural_cubic_splines(gbsg2):
    # Source: patsy ``cr`` (natural cubic regression spline). A restricted cubic spline
    # with knots k1 < k2 < k3 plus an intercept spans the same functions.
    import patsy

    y, full, _ = gbsg2
    x = _cloglog(full.risk_at(T0))
    knots = _rcs_knots(x, 3)
    np.testing.assert_allclose(knots, np.quantile(x, [0.1, 0.5, 0.9]), atol=0)
    ours = np.column_stack([np.ones_like(x), _rcs_basis(x, knots)])
    cr = np.asarray(
        patsy.dmatrix(
            f"cr(x, knots=({knots[1]!r},), lower_bound={knots[0]!r}, upper_bound={knots[2]!r}) - 1",
            {"x": x},
        )
    )
    assert cr.shape[1] == 3
    for A, B in ((ours, cr), (cr, ours)):
        coef, *_ = np.linalg.lstsq(A, B, rcond=None)
        np.testing.assert_allclose(A @ coef, B, atol=1e-8 * np.abs(B).max())


def test_smoothed_observed_risk_matches_lifelines_cox_prediction(gbsg2):
    # Source: lifelines CoxPHFitter on the same spline design, predicted survival at
    # five years from its Breslow baseline (fit tightened to converge fully); ICI, E50, E90, Emax by definition
    # (Austin, Harrell & van Klaveren, Stat Med 2020).
    y, _, small = gbsg2
    res = smoothed_calibration(y, small, T0)
    risk = small.risk_at(T0)
    x = _cloglog(risk)
    Z = _rcs_basis(x, _rcs_knots(x, 3))
    df = pd.DataFrame(Z, columns=["a", "b"]).assign(time=y["time"], event=y["event"].astype(int))
    # lifelines' default stopping rule leaves ~1e-4 in the coefficients here; tighten it.
    fit = CoxPHFitter().fit(df, "time", "event", fit_options={"precision": 1e-10})
    obs = 1.0 - fit.predict_survival_function(df[["a", "b"]], times=[T0]).to_numpy().ravel()
    diff = np.abs(obs - risk)
    assert res.ici == pytest.approx(diff.mean(), abs=1e-8)
    assert res.e50 == pytest.approx(np.median(diff), abs=1e-8)
    assert res.e90 == pytest.approx(np.quantile(diff, 0.9), abs=1e-8)
    assert res.emax == pytest.approx(diff.max(), abs=1e-8)
    assert np.all(res.grid_lower <= res.grid_observed) and np.all(res.grid_observed <= res.grid_upper)


def test_treat_all_and_model_net_benefit_by_hand(gbsg2):
    # Source: Vickers et al., BMC Med Inform Decis Mak 2008 (survival extension):
    # NB = P(treated) * [(1 - S_treated(t0)) - S_treated(t0) * pt / (1 - pt)],
    # Kaplan-Meier from lifelines.
    y, full, _ = gbsg2
    pts = np.array([0.0, 0.2, 0.4, 0.6])
    res = net_benefit(y, full, T0, pts)
    s_all, _, _, _ = _km(y["time"], y["event"], T0)
    np.testing.assert_allclose(res.treat_all, (1 - s_all) - s_all * pts / (1 - pts), atol=1e-12)
    risk = full.risk_at(T0)
    for k, pt in enumerate(pts):
        m = risk >= pt
        s, _, _, _ = _km(y["time"][m], y["event"][m], T0)
        assert res.net_benefit[k] == pytest.approx(m.mean() * ((1 - s) - s * pt / (1 - pt)), abs=1e-12)
    assert res.net_benefit[0] == pytest.approx(res.treat_all[0], abs=1e-12)


def test_nri_by_hand_with_lifelines_kaplan_meier(gbsg2):
    # Source: Pencina, D'Agostino & Steyerberg, Stat Med 2011, Kaplan-Meier form of the
    # category-free NRI, with the Kaplan-Meier estimates from lifelines.
    y, full, small = gbsg2
    res = continuous_nri(y, small, full, T0)
    up = full.risk_at(T0) > small.risk_at(T0)
    down = full.risk_at(T0) < small.risk_at(T0)
    s, *_ = _km(y["time"], y["event"], T0)
    s_up, *_ = _km(y["time"][up], y["event"][up], T0)
    s_dn, *_ = _km(y["time"][down], y["event"][down], T0)
    pu, pd_ = up.mean(), down.mean()
    ev = ((1 - s_up) * pu - (1 - s_dn) * pd_) / (1 - s)
    ne = (s_dn * pd_ - s_up * pu) / s
    assert res.nri_events == pytest.approx(ev, abs=1e-12)
    assert res.nri_nonevents == pytest.approx(ne, abs=1e-12)
    assert res.nri == pytest.approx(ev + ne, abs=1e-12)
    assert res.n_up + res.n_down + res.n_unchanged == y.size


def test_nri_and_idi_equal_simple_proportions_without_early_censoring():
    # Source: Pencina et al., Stat Med 2008 (definitions for a binary outcome): in the
    # veterans' lung cancer data (scikit-survival) the first censoring is at day 25, so
    # at t0 = 21 days every outcome is known and the Kaplan-Meier forms reduce to counts.
    X, y = load_veterans_lung_cancer()
    X = OneHotEncoder().fit_transform(X)
    times = np.arange(1.0, 60.0)
    curves = []
    for cols in (["Karnofsky_score"], list(X.columns)):
        m = CoxPHSurvivalAnalysis(ties="efron").fit(X[cols], y)
        curves.append(SurvivalCurves(times, np.vstack([f(times) for f in m.predict_survival_function(X[cols])])))
    yy = make_outcome(y["Survival_in_days"], y["Status"])
    t0 = 21.0
    dead = (yy["time"] <= t0) & yy["event"]
    assert not np.any(~yy["event"] & (yy["time"] <= t0))
    old, new = curves[0].risk_at(t0), curves[1].risk_at(t0)
    up, down = new > old, new < old
    nri = continuous_nri(yy, curves[0], curves[1], t0)
    assert nri.p_up_events == pytest.approx(up[dead].mean(), abs=1e-12)
    assert nri.p_down_events == pytest.approx(down[dead].mean(), abs=1e-12)
    assert nri.p_up_nonevents == pytest.approx(up[~dead].mean(), abs=1e-12)
    assert nri.p_down_nonevents == pytest.approx(down[~dead].mean(), abs=1e-12)
    idi = integrated_discrimination(yy, curves[0], curves[1], t0)
    ev = new[dead].mean() - old[dead].mean()
    ne = old[~dead].mean() - new[~dead].mean()
    assert idi.idi_events == pytest.approx(ev, abs=1e-12)
    assert idi.idi_nonevents == pytest.approx(ne, abs=1e-12)
    assert idi.slope_new == pytest.approx(new[dead].mean() - new[~dead].mean(), abs=1e-12)
