"""A patient's absolute risk of each cause and its influence functions, against lifelines.

Data: scikit-survival's ``load_cgvhd`` (100 patients; causes 1 = chronic GvHD, 2 = relapse,
3 = death; Pintilie, Competing Risks: A Practical Perspective, Wiley 2006).

Sources:
* point estimates: lifelines 0.30 ``CoxPHFitter`` (Efron ties; its baseline is Breslow's,
  so ours is fitted with ``baseline_ties="breslow"``). Cause-specific: one lifelines fit per
  cause (other causes censored), cumulative hazards from ``predict_cumulative_hazard``
  combined by hand into the cumulative incidence. Fine-Gray: lifelines' weighted fit
  (``weights_col``, ``entry_col``) on the Fine-Gray expansion built independently, one
  patient at a time, with the censoring distribution from scikit-survival's
  ``CensoringDistributionEstimator`` (Geskus, Biometrics 2011, section 3); its Breslow
  baseline summed by hand over the expanded rows' risk sets (lifelines' own baseline leaves
  delayed entry out of the risk sets).
* influence functions (the variance is their sum of squares): the derivative of the
  lifelines estimate with respect to one patient's case weight, by central differences of
  refits (the infinitesimal jackknife; Efron B, The Jackknife, the Bootstrap and Other
  Resampling Plans, SIAM 1982, chapter 6). Event times are made tie-free (tiny
  deterministic shifts) so that lifelines' Efron fit and the Breslow-form influence
  describe the same estimator.
"""

import warnings

import numpy as np
import pandas as pd
import pytest
from fine_gray_expansion import independent_expansion
from lifelines import CoxPHFitter
from sksurv.datasets import load_cgvhd

from workbench.competing.absolute_risk import cause_specific_risks, cumhaz_influence, fine_gray_risk
from workbench.competing.outcome import make_competing_outcome
from workbench.competing.regression import expand_fine_gray, fit_cause_specific, fit_fine_gray

COLS = ["aml", "pb", "extensive", "age"]
PATIENT = pd.DataFrame([{"aml": 1.0, "pb": 0.0, "extensive": 1.0, "age": 40.0}])
HORIZONS = np.array([0.3, 0.6, 1.0, 2.0])


def _cgvhd(tie_free=False):
    X, y = load_cgvhd()
    D = pd.DataFrame({"aml": (X["dx"] == "AML").astype(float), "pb": (X["tx"] == "PB").astype(float),
                      "extensive": (X["extent"] == "E").astype(float), "age": X["age"].astype(float)})
    t = y["ftime"].astype(float)
    if tie_free:
        t = t + np.arange(t.size) * 1e-5
    return D, t, y["status"].astype(int)


def _lifelines(df, step_size=None, **kw):
    # Tight precision so both fits sit at the maximum; relapse (cause 2: 5 events, 4
    # predictors) needs lifelines' smaller Newton step to converge.
    opts = {"precision": 1e-12} if step_size is None else {"precision": 1e-12, "step_size": step_size}
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # lifelines' note on non-integer weights
        return CoxPHFitter().fit(df, fit_options=opts, **kw)


def _cumhaz(cph, times):
    # read lifelines' step function ourselves: predict_cumulative_hazard(times=...) interpolates
    # linearly between event times
    full = cph.predict_cumulative_hazard(PATIENT[COLS])
    j = np.searchsorted(full.index.to_numpy(float), np.asarray(times, float), side="right") - 1
    return np.where(j >= 0, full.to_numpy()[np.maximum(j, 0), 0], 0.0)


def _breslow_by_hand(ex, coef, times):
    """Breslow cumulative hazard of PATIENT on weighted counting-process rows (start, stop]."""
    Xe = ex[COLS].to_numpy(float)
    r = ex["w"].to_numpy() * np.exp(Xe @ coef)
    H, out = 0.0, []
    ev_times = np.unique(ex.loc[ex["E"] == 1, "stop"])
    steps = []
    for tk in ev_times:
        at_risk = (ex["start"].to_numpy() < tk) & (ex["stop"].to_numpy() >= tk)
        d = ex.loc[(ex["E"] == 1) & (ex["stop"] == tk), "w"].sum()
        H += d / r[at_risk].sum()
        steps.append(H)
    steps = np.array(steps) * np.exp(PATIENT[COLS].to_numpy(float)[0] @ coef)
    for s in np.asarray(times, float):
        k = np.searchsorted(ev_times, s, side="right") - 1
        out.append(steps[k] if k >= 0 else 0.0)
    return np.array(out)


def _incidence_by_hand(H):
    """Cumulative incidences from cause-specific cumulative hazards H (causes x grid), each step's
    leaving probability shared in proportion to the causes' increments."""
    dH = np.diff(np.hstack([np.zeros((H.shape[0], 1)), H]), axis=1)
    tot = dH.sum(axis=0)
    s_prev = np.exp(-np.r_[0.0, np.cumsum(tot)[:-1]])
    with np.errstate(invalid="ignore", divide="ignore"):
        share = np.where(tot > 0, dH / tot, 0.0)
    return np.cumsum(s_prev * -np.expm1(-tot) * share, axis=1)


def test_cause_specific_absolute_risks_match_lifelines_fits_combined_by_hand():
    D, t, c = _cgvhd()
    y = make_competing_outcome(t, c)
    ours = cause_specific_risks(fit_cause_specific(D, y, min_events_per_parameter=0, baseline_ties="breslow",
                                                   tol=1e-12), D, y, PATIENT, HORIZONS)
    grid = np.unique(t[c > 0])
    H = np.vstack([_cumhaz(_lifelines(D.assign(T=t, E=(c == k).astype(int)), duration_col="T", event_col="E",
                                      step_size=0.3), grid) for k in (1, 2, 3)])
    F = _incidence_by_hand(H)
    j = np.searchsorted(grid, HORIZONS, side="right") - 1
    np.testing.assert_allclose(ours.risk, F[:, j], rtol=0, atol=1e-6)
    np.testing.assert_allclose(ours.event_free, np.exp(-H.sum(axis=0))[j], rtol=0, atol=1e-6)


def test_fine_gray_absolute_risk_matches_weighted_lifelines_fit():
    D, t, c = _cgvhd()
    y = make_competing_outcome(t, c)
    fit = fit_fine_gray(D, y, cause=1, min_events_per_parameter=0, baseline_ties="breslow", tol=1e-12)
    ours = fine_gray_risk(fit, D, y, PATIENT, HORIZONS)
    ex = independent_expansion(D, t, c, 1, ids=True)
    ref = _lifelines(ex.drop(columns="id"), duration_col="stop", event_col="E", entry_col="start", weights_col="w")
    # lifelines' own baseline ignores delayed entry in its risk sets, so the baseline is
    # summed by hand (Breslow, risk sets start < t <= stop) at lifelines' coefficients
    F = 1 - np.exp(-_breslow_by_hand(ex, ref.params_[COLS].to_numpy(), HORIZONS))
    np.testing.assert_allclose(ours.risk[0], F, rtol=0, atol=1e-6)


def _derivative(refit, rows_of_i, w, eps=1e-3):
    up, down = w.copy(), w.copy()
    up[rows_of_i] *= 1 + eps
    down[rows_of_i] *= 1 - eps
    return (refit(up) - refit(down)) / (2 * eps)


@pytest.mark.parametrize("route", ["cause_specific", "fine_gray"])
def test_influence_equals_the_derivative_of_lifelines_refits_in_a_case_weight(route):
    D, t, c = _cgvhd(tie_free=True)
    y = make_competing_outcome(t, c)
    n = t.size
    x = PATIENT[COLS].to_numpy()[0]
    if route == "cause_specific":
        fit = fit_cause_specific(D, y, causes=[1], min_events_per_parameter=0, tol=1e-12).fit_for(1)
        df = D.assign(T=t, E=(c == 1).astype(int), start=-1.0, id=np.arange(n))
        tk, psi = cumhaz_influence(fit, D.to_numpy(), np.full(n, -np.inf), t, c == 1, np.ones(n), np.arange(n), n, x)
        kw = {"duration_col": "T", "event_col": "E"}
    else:
        fit = fit_fine_gray(D, y, cause=1, min_events_per_parameter=0, tol=1e-12).cox
        rows = expand_fine_gray(y, 1)
        start = rows.start.copy()
        start[:n] = -np.inf
        tk, psi = cumhaz_influence(fit, D.to_numpy()[rows.patient], start, rows.stop, rows.event, rows.weight,
                                   rows.patient, n, x)
        df = independent_expansion(D, t, c, 1, ids=True)
        kw = {"duration_col": "stop", "event_col": "E", "entry_col": "start"}
    j = np.searchsorted(tk, HORIZONS, side="right") - 1

    def refit(w):
        cols = [*COLS, *kw.values()]
        cph = _lifelines(df[cols].assign(w=w), weights_col="w", **kw)
        if route == "cause_specific":
            return _cumhaz(cph, HORIZONS)
        return _breslow_by_hand(df.assign(w=w), cph.params_[COLS].to_numpy(), HORIZONS)

    w0 = df["w"].to_numpy(float) if "w" in df else np.ones(len(df))
    # patients of every kind: cause 1, 2, 3, censored early and late
    for i in (0, 3, 5, 17, 42, 60, 93, 99):
        num = _derivative(refit, df["id"].to_numpy() == i, w0)
        # central differences: truncation O(eps^2) ~ 1e-6 relative, plus lifelines' stopping
        # error in the coefficients (~1e-7) divided by 2 eps; measured worst 8e-5 at eps = 1e-4
        np.testing.assert_allclose(psi[i, j], num, rtol=1e-3, atol=1e-8, err_msg=f"patient {i}")
