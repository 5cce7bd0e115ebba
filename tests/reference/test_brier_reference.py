"""Brier score, integrated Brier score and IPA against scikit-survival.

Sources: scikit-survival 0.28 ``sksurv.metrics.brier_score`` and
``integrated_brier_score`` on the datasets it ships (German Breast Cancer Study
Group 2, Schumacher et al. 1994, ``load_gbsg2``; veterans' lung cancer trial,
Kalbfleisch & Prentice 1980, ``load_veterans_lung_cancer``), with predictions
from scikit-survival's own Cox model (``CoxPHSurvivalAnalysis``, Efron ties).

The estimators coincide except at one detail: for an event at T the library
weights by G(T) while we use the left limit G(T-) (Gerds & Schumacher 2006).
The two differ only where a training patient was censored at exactly an event
time, so exact agreement is checked after moving such censorings by half a day,
and the raw data are checked with a looser, stated tolerance.
"""

from __future__ import annotations

import numpy as np
import pytest
from sksurv.datasets import load_gbsg2, load_veterans_lung_cancer
from sksurv.linear_model import CoxPHSurvivalAnalysis
from sksurv.metrics import brier_score as sk_brier
from sksurv.metrics import integrated_brier_score as sk_ibs
from sksurv.nonparametric import kaplan_meier_estimator
from sksurv.preprocessing import OneHotEncoder

from workbench.cohort import make_outcome
from workbench.metrics.brier import brier_score, integrated_brier_score
from workbench.predictions import SurvivalCurves


def _untie(y, event_field, time_field):
    """Move censorings that share a time with an event by half a day."""
    y = y.copy()
    ev_times = np.unique(y[time_field][y[event_field]])
    clash = ~y[event_field] & np.isin(y[time_field], ev_times)
    y[time_field] = np.where(clash, y[time_field] + 0.5, y[time_field])
    return y


def _cox_curves(X, y, times):
    model = CoxPHSurvivalAnalysis(ties="efron").fit(X, y)
    return np.vstack([f(times) for f in model.predict_survival_function(X)])


def _ours(y, event_field, time_field):
    return make_outcome(y[time_field], y[event_field])


def _km_null(y, event_field, time_field, times, n):
    t, s = kaplan_meier_estimator(y[event_field], y[time_field])
    s_t = np.where(times < t[0], 1.0, s[np.maximum(np.searchsorted(t, times, side="right") - 1, 0)])
    return np.tile(s_t, (n, 1))


@pytest.fixture(scope="module")
def gbsg2():
    X, y = load_gbsg2()
    X = OneHotEncoder().fit_transform(X)
    times = np.arange(365.0, 1826.0, 15.0)
    times = times[times <= 1825.0]
    return X, y, times, _cox_curves(X, y, times)


@pytest.fixture(scope="module")
def veterans():
    X, y = load_veterans_lung_cancer()
    X = OneHotEncoder().fit_transform(X)
    times = np.arange(10.0, 500.0, 10.0)
    return X, y, times, _cox_curves(X, y, times)


def test_gbsg2_brier_matches_sksurv_exactly_without_event_censoring_ties(gbsg2):
    # Source: sksurv.metrics.brier_score / integrated_brier_score, scikit-survival 0.28.
    X, y, times, P = gbsg2
    y = _untie(y, "cens", "time")
    yy = _ours(y, "cens", "time")
    res = brier_score(yy, yy, SurvivalCurves(times, P), times)
    _, ref = sk_brier(y, y, P, times)
    np.testing.assert_allclose(res.brier, ref, rtol=0, atol=1e-12)
    null_ref = sk_brier(y, y, _km_null(y, "cens", "time", times, len(y)), times)[1]
    np.testing.assert_allclose(res.null_brier, null_ref, rtol=0, atol=1e-12)
    np.testing.assert_allclose(res.ipa, 1.0 - ref / null_ref, rtol=0, atol=1e-10)
    ibs = integrated_brier_score(yy, yy, SurvivalCurves(times, P), times)
    assert ibs.ibs == pytest.approx(sk_ibs(y, y, P, times), abs=1e-12)


def test_gbsg2_integrated_brier_library_values(gbsg2):
    # Source: REFERENCE_VALUES.md (library, scikit-survival 0.28): integrated Brier
    # 365-1825 days about 0.181 for the Cox model and 0.211 for the Kaplan-Meier null.
    X, y, times, P = gbsg2
    yy = _ours(y, "cens", "time")
    res = integrated_brier_score(yy, yy, SurvivalCurves(times, P), times)
    assert res.ibs == pytest.approx(sk_ibs(y, y, P, times), abs=2e-4)  # G(T-) vs G(T), see module doc
    null_ref = sk_ibs(y, y, _km_null(y, "cens", "time", times, len(y)), times)
    assert res.null_ibs == pytest.approx(null_ref, abs=2e-4)
    assert res.ibs == pytest.approx(0.181, abs=1.5e-3)
    assert res.null_ibs == pytest.approx(0.211, abs=1.5e-3)
    assert res.ipa == pytest.approx(1 - res.ibs / res.null_ibs, abs=1e-14)
    assert 0.10 < res.ipa < 0.20


def test_gbsg2_censoring_weights_come_from_training_rows(gbsg2):
    # Source: sksurv.metrics.brier_score(survival_train, survival_test, ...) with a
    # seeded half split; the censoring distribution and null model use y_train only.
    X, y, times, P = gbsg2
    y = _untie(y, "cens", "time")
    rng = np.random.default_rng(7)
    idx = rng.permutation(len(y))
    tr, te = idx[:340], idx[340:]
    keep = times < y["time"][te].max()
    t = times[keep]
    res = brier_score(_ours(y[tr], "cens", "time"), _ours(y[te], "cens", "time"),
                      SurvivalCurves(times, P[te]), t)
    _, ref = sk_brier(y[tr], y[te], P[te][:, keep], t)
    np.testing.assert_allclose(res.brier, ref, rtol=0, atol=1e-12)
    null_ref = sk_brier(y[tr], y[te], _km_null(y[tr], "cens", "time", t, te.size), t)[1]
    np.testing.assert_allclose(res.null_brier, null_ref, rtol=0, atol=1e-12)


def test_veterans_brier_matches_sksurv(veterans):
    # Source: sksurv.metrics.brier_score / integrated_brier_score on
    # load_veterans_lung_cancer, Cox on all covariates (one-hot).
    X, y, times, P = veterans
    ev, tm = "Status", "Survival_in_days"
    yy = _ours(y, ev, tm)
    res = brier_score(yy, yy, SurvivalCurves(times, P), times)
    _, ref = sk_brier(y, y, P, times)
    # Few censorings here; ties between events and censorings give small differences.
    np.testing.assert_allclose(res.brier, ref, rtol=0, atol=5e-4)
    yu = _untie(y, ev, tm)
    yyu = _ours(yu, ev, tm)
    res_u = brier_score(yyu, yyu, SurvivalCurves(times, P), times)
    np.testing.assert_allclose(res_u.brier, sk_brier(yu, yu, P, times)[1], rtol=0, atol=1e-12)
    ibs = integrated_brier_score(yyu, yyu, SurvivalCurves(times, P), times)
    assert ibs.ibs == pytest.approx(sk_ibs(yu, yu, P, times), abs=1e-12)
    assert ibs.null_ibs == pytest.approx(
        sk_ibs(yu, yu, _km_null(yu, ev, tm, times, len(yu)), times), abs=1e-12
    )


def test_step_lookup_between_grid_times_matches_library_on_the_same_values(gbsg2):
    # Source: sksurv.metrics.brier_score given the step-function values we read off.
    # Curves on a coarse yearly grid are read as a right-continuous step function.
    X, y, times, P = gbsg2
    y = _untie(y, "cens", "time")
    grid = np.array([300.0, 700.0, 1100.0, 1500.0])
    P_grid = P[:, np.searchsorted(times, [365.0, 710.0, 1100.0, 1505.0])]
    eval_t = np.array([400.0, 800.0, 1200.0, 1600.0])  # each falls in the next grid step
    expected_cols = P_grid
    yy = _ours(y, "cens", "time")
    res = brier_score(yy, yy, SurvivalCurves(grid, P_grid), eval_t)
    np.testing.assert_allclose(res.brier, sk_brier(y, y, expected_cols, eval_t)[1], atol=1e-12)
