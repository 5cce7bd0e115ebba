"""Concordance, time-dependent AUC and censoring weights vs general-purpose libraries.

Sources
-------
- GBSG2 (Schumacher et al. 1994) and veterans' lung cancer trial (Kalbfleisch &
  Prentice 1980), as shipped in ``sksurv.datasets``; Rossi recidivism in
  ``lifelines.datasets``. Risk scores come from scikit-survival's Cox model
  (Efron ties) on all covariates, refitted here.
- Comparators: ``lifelines.utils.concordance_index`` (expects predicted times,
  so it gets -risk), ``sksurv.metrics.concordance_index_censored``,
  ``concordance_index_ipcw``, ``cumulative_dynamic_auc`` and
  ``sksurv.nonparametric.CensoringDistributionEstimator`` (scikit-survival 0.28).
- GBSG2 library values recorded in the project's reference list
  (scikit-survival 0.28): Harrell C 0.692, Uno C (tau 1825) 0.682, AUC at
  1-5 years 0.766, 0.739, 0.743, 0.738, 0.750.

Ties between an event and a censoring at the same time: we weight an event at T
by 1/G(T-) (left limit), scikit-survival by 1/G(T). With censoring after events
at tied times these differ only when a censoring coincides with an event time.
Where such ties exist the libraries agree to ~1e-4; with those censorings moved
half a time unit later (keeping their order relative to events) the estimators
coincide and agree to 1e-10.
"""

import numpy as np
import pytest
from lifelines.datasets import load_rossi
from lifelines.utils import concordance_index as lifelines_cindex
from sksurv.datasets import load_gbsg2, load_veterans_lung_cancer
from sksurv.linear_model import CoxPHSurvivalAnalysis
from sksurv.metrics import (
    concordance_index_censored,
    concordance_index_ipcw,
    cumulative_dynamic_auc,
)
from sksurv.nonparametric import CensoringDistributionEstimator
from sksurv.preprocessing import OneHotEncoder

from workbench.cohort.outcome import make_outcome
from workbench.errors import MetricError
from workbench.metrics._ipcw import fit_censoring
from workbench.metrics.concordance import harrell_c, uno_c
from workbench.metrics.td_auc import time_dependent_auc
from workbench.predictions import RiskScores

GBSG2_HORIZONS = np.array([365.0, 730.0, 1095.0, 1460.0, 1825.0])
VETERANS_HORIZONS = np.array([30.0, 60.0, 90.0, 180.0, 365.0])


def _cox_risk(X, y_sk):
    Xe = OneHotEncoder().fit_transform(X)
    return CoxPHSurvivalAnalysis(ties="efron").fit(Xe, y_sk).predict(Xe)


def _sk(time, event):
    y = np.empty(len(time), dtype=[("event", "?"), ("time", "<f8")])
    y["event"], y["time"] = event, time
    return y


def _untie(time, event):
    """Move censorings that coincide with an event time half a unit later."""
    t = time.copy()
    clash = ~event & np.isin(t, t[event])
    t[clash] += 0.5
    return t


@pytest.fixture(scope="module")
def gbsg2():
    X, y = load_gbsg2()
    time, event = y["time"].astype(float), y["cens"].astype(bool)
    return time, event, _cox_risk(X, _sk(time, event))


@pytest.fixture(scope="module")
def veterans():
    X, y = load_veterans_lung_cancer()
    time, event = y["Survival_in_days"].astype(float), y["Status"].astype(bool)
    return time, event, _cox_risk(X, _sk(time, event))


@pytest.fixture(scope="module", params=["gbsg2", "veterans"])
def data(request, gbsg2, veterans):
    if request.param == "gbsg2":
        return (*gbsg2, GBSG2_HORIZONS, 1825.0)
    return (*veterans, VETERANS_HORIZONS, 365.0)


# ------------------------------------------------------------ censoring distribution


def test_censoring_distribution_vs_scikit_survival(gbsg2):
    # CensoringDistributionEstimator (right-continuous G), tolerance 1e-12.
    time, event, _ = gbsg2
    cens = fit_censoring(make_outcome(time, event))
    ref = CensoringDistributionEstimator().fit(_sk(time, event))
    grid = np.linspace(0.0, time.max(), 997)
    ours = cens.survival_at(grid, left_limit=False, check_positive=False)
    np.testing.assert_allclose(ours, ref.predict_proba(grid), atol=1e-12)
    # Left limit: G(t-) equals G just before t.
    np.testing.assert_allclose(
        cens.survival_at(time, left_limit=True), ref.predict_proba(time - 1e-6), atol=1e-12
    )


def test_censoring_zero_raises_with_time():
    # Last patient censored: G drops to 0 there, and a weight at or after it is undefined.
    y = make_outcome([1.0, 2.0, 3.0, 4.0], [1, 0, 1, 0])
    cens = fit_censoring(y)
    assert cens.survival_at(4.0, left_limit=True) > 0
    with pytest.raises(MetricError, match="dropped to 0 at time 4"):
        cens.survival_at([2.5, 4.0], left_limit=False)


# ------------------------------------------------------------ Harrell's C


def test_harrell_vs_lifelines_and_scikit_survival(data):
    # lifelines (predicted times = -risk) and scikit-survival (risk), tolerance 1e-12;
    # pair counts exactly equal to scikit-survival's.
    time, event, risk = data[:3]
    res = harrell_c(make_outcome(time, event), RiskScores(risk))
    ref = concordance_index_censored(event, time, risk)
    assert res.c_index == pytest.approx(ref[0], abs=1e-12)
    assert (res.concordant, res.discordant, res.tied_risk, res.tied_time) == tuple(ref[1:])
    assert res.c_index == pytest.approx(lifelines_cindex(time, -risk, event), abs=1e-12)
    assert res.comparable == res.concordant + res.discordant + res.tied_risk


def test_harrell_with_tied_scores_vs_scikit_survival():
    # Rossi data, a coarse integer score (many ties) and tied weekly times.
    rossi = load_rossi()
    time, event = rossi.week.to_numpy(float), rossi.arrest.to_numpy(bool)
    risk = rossi.prio.to_numpy(float)
    res = harrell_c(make_outcome(time, event), RiskScores(risk))
    ref = concordance_index_censored(event, time, risk)
    assert res.c_index == pytest.approx(ref[0], abs=1e-12)
    assert (res.concordant, res.discordant, res.tied_risk, res.tied_time) == tuple(ref[1:])
    assert res.c_index == pytest.approx(lifelines_cindex(time, -risk, event), abs=1e-12)


def test_gbsg2_recorded_values(gbsg2):
    # Library values recorded for GBSG2 (3 decimals): tolerance 5e-4.
    time, event, risk = gbsg2
    y = make_outcome(time, event)
    assert harrell_c(y, RiskScores(risk)).c_index == pytest.approx(0.692, abs=5e-4)
    assert uno_c(y, y, RiskScores(risk), tau=1825.0).c_index == pytest.approx(0.682, abs=5e-4)
    auc = time_dependent_auc(y, y, RiskScores(risk), GBSG2_HORIZONS).auc
    np.testing.assert_allclose(auc, [0.766, 0.739, 0.743, 0.738, 0.750], atol=5e-4)


# ------------------------------------------------------------ Uno's C and AUC(t)


@pytest.mark.parametrize("untie", [False, True])
def test_uno_c_vs_scikit_survival(data, untie):
    time, event, risk, _, tau = data
    if untie:
        time = _untie(time, event)
    y = make_outcome(time, event)
    # Without truncation the last events carry huge weights, so the tie convention
    # moves C by up to ~3e-3 on the raw data; compare that case only once untied.
    for t in (None, tau) if untie else (tau,):
        ours = uno_c(y, y, RiskScores(risk), tau=t).c_index
        ref = concordance_index_ipcw(_sk(time, event), _sk(time, event), risk, tau=t)[0]
        assert ours == pytest.approx(ref, abs=1e-10 if untie else 2e-4)


@pytest.mark.parametrize("untie", [False, True])
def test_td_auc_vs_scikit_survival(data, untie):
    time, event, risk, horizons, _ = data
    if untie:
        time = _untie(time, event)
    y = make_outcome(time, event)
    res = time_dependent_auc(y, y, RiskScores(risk), horizons)
    ref_auc, ref_mean = cumulative_dynamic_auc(_sk(time, event), _sk(time, event), risk, horizons)
    tol = 1e-10 if untie else 2e-4
    np.testing.assert_allclose(res.auc, ref_auc, atol=tol)
    assert res.mean_auc == pytest.approx(ref_mean, abs=tol)
    assert np.all(res.std_err > 0) and np.all(res.std_err < 0.1)
    assert np.all((res.ci_lower <= res.auc) & (res.auc <= res.ci_upper))


def test_train_test_split_vs_scikit_survival(gbsg2):
    # Censoring distribution from one half, metrics on the other; ties removed so
    # that the estimators coincide, tolerance 1e-10.
    time, event, risk = gbsg2
    time = _untie(time, event)
    rng = np.random.default_rng(7)
    train = rng.permutation(time.size) < time.size // 2
    test = ~train
    y_tr, y_te = make_outcome(time[train], event[train]), make_outcome(time[test], event[test])
    s_tr, s_te = _sk(time[train], event[train]), _sk(time[test], event[test])
    r = RiskScores(risk[test])
    assert uno_c(y_tr, y_te, r, tau=1460.0).c_index == pytest.approx(
        concordance_index_ipcw(s_tr, s_te, risk[test], tau=1460.0)[0], abs=1e-10
    )
    h = np.array([365.0, 730.0, 1095.0, 1460.0])
    ours = time_dependent_auc(y_tr, y_te, r, h)
    ref_auc, ref_mean = cumulative_dynamic_auc(s_tr, s_te, risk[test], h)
    np.testing.assert_allclose(ours.auc, ref_auc, atol=1e-10)
    assert ours.mean_auc == pytest.approx(ref_mean, abs=1e-10)


def test_per_horizon_scores_vs_scikit_survival_2d(veterans):
    # scikit-survival accepts one score column per horizon; we take one RiskScores each.
    time, event, risk = veterans
    time = _untie(time, event)
    y = make_outcome(time, event)
    scores = np.column_stack([risk * (1 + 0.1 * k) + np.sin(k * risk) for k in range(3)])
    h = VETERANS_HORIZONS[:3]
    ours = time_dependent_auc(y, y, [RiskScores(scores[:, k]) for k in range(3)], h)
    ref_auc, _ = cumulative_dynamic_auc(_sk(time, event), _sk(time, event), scores, h)
    np.testing.assert_allclose(ours.auc, ref_auc, atol=1e-10)
