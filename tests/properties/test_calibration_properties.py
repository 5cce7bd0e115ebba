"""Invariance and known-truth properties of the horizon metrics.

Simulated data come from a Weibull proportional-hazards model whose survival
function S(t | x) = exp(-lam t^rho exp(x'b)) is known exactly, so the true
probabilities can be used as predictions (seeded inside the helper). Real data:
German Breast Cancer Study Group 2 as shipped with scikit-survival (``load_gbsg2``).
"""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from workbench.cohort import make_outcome
from workbench.metrics.brier import brier_score, integrated_brier_score
from workbench.metrics.calibration import calibration_at, smoothed_calibration
from workbench.metrics.decision import net_benefit
from workbench.metrics.reclassification import reclassification_at
from workbench.predictions import SurvivalCurves
from workbench.stats.km import kaplan_meier, survival_at

DAYS_PER_YEAR = 365.25


def simulate(n, seed, *, lam=0.1, rho=1.3, beta=(0.8, -0.5, 0.3), cens_max=15.0):
    """Weibull PH data (time in years), uniform censoring; returns y, true curves, lp."""
    rng = np.random.default_rng(seed)
    X = rng.normal(size=(n, len(beta)))
    lp = X @ np.asarray(beta)
    t_event = (-np.log(rng.uniform(size=n)) / (lam * np.exp(lp))) ** (1.0 / rho)
    t_cens = rng.uniform(0.0, cens_max, size=n)
    grid = np.linspace(0.0, cens_max, 301)  # contains 5.0 exactly (step 0.05)
    S = np.exp(-lam * grid[None, :] ** rho * np.exp(lp)[:, None])
    y = make_outcome(np.minimum(t_event, t_cens), t_event <= t_cens)
    return y, SurvivalCurves(grid, S, "truth"), lp


def rescale(y, curves, factor):
    return (
        make_outcome(y["time"] * factor, y["event"]),
        SurvivalCurves(curves.times * factor, curves.probs, curves.model),
    )


@pytest.fixture(scope="module")
def truth_large():
    return simulate(4000, seed=20240611)


def _calibration_numbers(res):
    return np.array(
        [
            res.smoothed.ici, res.smoothed.e50, res.smoothed.e90, res.smoothed.emax,
            res.slope.slope, res.slope.std_err, res.observed_expected.ratio,
            res.observed_expected.ci_lower, *res.grouped.observed, *res.grouped.observed_upper,
            *res.smoothed.grid_observed, *res.smoothed.grid_upper,
        ]
    )


# ------------------------------------------------------------- time unit


@pytest.fixture(scope="module")
def gbsg2_cox():
    from sksurv.datasets import load_gbsg2
    from sksurv.linear_model import CoxPHSurvivalAnalysis
    from sksurv.preprocessing import OneHotEncoder

    X, y = load_gbsg2()
    X = OneHotEncoder().fit_transform(X)
    times = np.arange(30.0, 2500.0, 5.0)
    model = CoxPHSurvivalAnalysis(ties="efron").fit(X, y)
    P = np.vstack([f(times) for f in model.predict_survival_function(X)])
    return make_outcome(y["time"], y["cens"]), SurvivalCurves(times, P, "cox")


@pytest.mark.parametrize("censor_at_horizon", [False, True])
def test_gbsg2_calibration_is_the_same_in_days_and_years(gbsg2_cox, censor_at_horizon):
    # A known trap: an implementation that evaluates or smooths the baseline hazard in
    # absolute time units gives an ICI of ~0.02 in years but ~0.52 in days for this model.
    y, curves = gbsg2_cox
    days = calibration_at(y, curves, 1825.0, censor_at_horizon=censor_at_horizon)
    y_yr, c_yr = rescale(y, curves, 1.0 / DAYS_PER_YEAR)
    years = calibration_at(y_yr, c_yr, 1825.0 / DAYS_PER_YEAR, censor_at_horizon=censor_at_horizon)
    np.testing.assert_allclose(_calibration_numbers(years), _calibration_numbers(days), rtol=1e-8, atol=1e-10)
    assert 0.0 < days.smoothed.ici < 0.06


@settings(max_examples=8, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(
    seed=st.integers(0, 2**31 - 1),
    factor=st.sampled_from([DAYS_PER_YEAR, 12.0, DAYS_PER_YEAR / 7.0, 1.0 / 10.0, 8766.0]),
    t0=st.sampled_from([2.0, 5.0, 7.5]),
)
def test_every_horizon_metric_is_invariant_to_the_time_unit(seed, factor, t0):
    y, curves, _ = simulate(300, seed)
    # A deliberately miscalibrated model so that the numbers compared are not near zero.
    off = SurvivalCurves(curves.times, curves.probs**1.4, "off")
    y2, c2 = rescale(y, off, factor)
    a = calibration_at(y, off, t0)
    b = calibration_at(y2, c2, t0 * factor)
    np.testing.assert_allclose(_calibration_numbers(b), _calibration_numbers(a), rtol=1e-8, atol=1e-10)

    nb_a = net_benefit(y, off, t0, [0.1, 0.3, 0.5])
    nb_b = net_benefit(y2, c2, t0 * factor, [0.1, 0.3, 0.5])
    np.testing.assert_allclose(nb_b.net_benefit, nb_a.net_benefit, rtol=1e-10, atol=1e-12)

    _, c_true2 = rescale(y, curves, factor)
    r_a = reclassification_at(y, off, curves, t0)
    r_b = reclassification_at(y2, c2, c_true2, t0 * factor)
    assert r_b.nri.nri == pytest.approx(r_a.nri.nri, abs=1e-12)
    assert r_b.idi.idi == pytest.approx(r_a.idi.idi, abs=1e-12)

    times = np.array([1.0, 2.0, t0])
    times = np.unique(times[times < y["time"].max()])
    br_a = brier_score(y, y, off, times)
    br_b = brier_score(y2, y2, c2, times * factor)
    np.testing.assert_allclose(br_b.brier, br_a.brier, rtol=1e-10, atol=1e-14)


# ------------------------------------------------------------ known truth


def test_true_survival_is_well_calibrated(truth_large):
    # Tolerances from the sampling spread at n = 4000, about 4 standard deviations
    # (O/E sd about 0.014 and slope SE about 0.025 here; ICI of the truth about 0.01).
    y, curves, _ = truth_large
    res = calibration_at(y, curves, 5.0)
    assert res.smoothed.ici < 0.03
    assert res.smoothed.e50 <= res.smoothed.e90 <= res.smoothed.emax
    assert res.slope.slope == pytest.approx(1.0, abs=0.1)
    assert res.observed_expected.ratio == pytest.approx(1.0, abs=0.06)
    covered = (res.grouped.observed_lower <= res.grouped.mean_predicted) & (
        res.grouped.mean_predicted <= res.grouped.observed_upper
    )
    assert covered.sum() >= 4


def test_overfitted_predictions_are_flagged(truth_large):
    # Doubling the linear predictor makes predicted risks too extreme: the calibration
    # slope should be near 1/2 and the ICI clearly larger than for the truth.
    y, curves, lp = truth_large
    lam, rho = 0.1, 1.3
    S = np.exp(-lam * curves.times[None, :] ** rho * np.exp(2.0 * lp)[:, None])
    res = calibration_at(y, SurvivalCurves(curves.times, S, "too extreme"), 5.0)
    truth = smoothed_calibration(y, curves, 5.0)
    assert res.slope.slope == pytest.approx(0.5, abs=0.06)
    assert res.slope.ci_upper < 1.0
    assert res.smoothed.ici > truth.ici + 0.05


def test_systematically_high_predictions_give_low_observed_expected(truth_large):
    y, curves, _ = truth_large
    high = SurvivalCurves(curves.times, curves.probs**1.5, "too high")
    res = calibration_at(y, high, 5.0)
    assert res.observed_expected.ci_upper < 1.0
    assert np.all(res.grouped.observed < res.grouped.mean_predicted)


def test_truth_dominates_treat_all_at_moderate_thresholds(truth_large):
    # Vickers et al. 2008: a model equal to the truth cannot do worse than treating
    # everyone; allowance 0.003 for sampling error where the two nearly coincide.
    y, curves, _ = truth_large
    pts = np.arange(0.10, 0.51, 0.05)
    res = net_benefit(y, curves, 5.0, pts)
    assert np.all(res.net_benefit >= res.treat_all - 0.003)
    assert np.all(res.net_benefit[pts >= 0.3] > res.treat_all[pts >= 0.3] + 0.02)
    assert np.all(res.net_benefit >= res.treat_none - 0.003)
    low = net_benefit(y, curves, 5.0, [0.0])
    assert low.net_benefit[0] == pytest.approx(low.treat_all[0], abs=1e-12)


def test_smoothed_band_covers_the_truth_about_95_percent():
    # For true predictions the calibration curve is the identity; over 60 seeded
    # replicates of 400 patients the pointwise 95% band should cover it at roughly
    # 95% of interior grid points (allowance 0.87 to 0.995 for replicate noise).
    hits = []
    for seed in range(60):
        y, curves, _ = simulate(400, 1000 + seed)
        res = smoothed_calibration(y, curves, 5.0, grid_size=21)
        inner = slice(2, -2)
        g = res.grid_predicted[inner]
        hits.append((res.grid_lower[inner] <= g) & (g <= res.grid_upper[inner]))
    coverage = np.mean(hits)
    assert 0.87 <= coverage <= 0.995


# ------------------------------------------------------- reclassification


@settings(max_examples=15, deadline=None)
@given(seed=st.integers(0, 2**31 - 1), power=st.floats(0.5, 2.0))
def test_nri_idi_of_a_model_against_itself_is_zero_and_swapping_flips_sign(seed, power):
    y, curves, _ = simulate(200, seed)
    other = SurvivalCurves(curves.times, curves.probs**power, "other")
    same = reclassification_at(y, other, other, 5.0)
    assert same.nri.nri == 0.0 and same.nri.nri_events == 0.0 and same.nri.nri_nonevents == 0.0
    assert same.nri.n_unchanged == y.size
    assert same.idi.idi == pytest.approx(0.0, abs=1e-15)
    ab = reclassification_at(y, other, curves, 5.0)
    ba = reclassification_at(y, curves, other, 5.0)
    assert ab.nri.nri == pytest.approx(-ba.nri.nri, abs=1e-12)
    assert ab.idi.idi == pytest.approx(-ba.idi.idi, abs=1e-12)
    assert -2.0 <= ab.nri.nri <= 2.0


# ------------------------------------------------------------------ Brier


@settings(max_examples=15, deadline=None)
@given(seed=st.integers(0, 2**31 - 1))
def test_training_kaplan_meier_as_prediction_has_zero_ipa(seed):
    # Index of prediction accuracy (Kattan & Gerds 2018) is 0 for the null model itself.
    y, curves, _ = simulate(200, seed)
    km = kaplan_meier(y["time"], y["event"])
    grid = curves.times
    S = np.tile(survival_at(km, grid), (y.size, 1))
    times = np.array([1.0, 3.0, 5.0])
    res = brier_score(y, y, SurvivalCurves(grid, S), times)
    np.testing.assert_allclose(res.ipa, 0.0, atol=1e-12)


def test_truth_beats_the_null_model_on_brier(truth_large):
    y, curves, _ = truth_large
    res = integrated_brier_score(y, y, curves, np.linspace(1.0, 8.0, 29))
    assert res.ibs < res.null_ibs
    assert 0.1 < res.ipa < 0.6
