"""Behaviour of the Cox engine: errors, warnings, shapes, invariances.

Data are public datasets shipped with lifelines (6-MP leukaemia, Freireich et al.
1963; Rossi recidivism), sometimes with a column derived from them to provoke a
particular failure.
"""

from __future__ import annotations

import dataclasses
import warnings

import numpy as np
import pandas as pd
import pytest
from lifelines.datasets import load_leukemia, load_rossi

from workbench.errors import (
    ConvergenceWarning,
    LowEventsWarning,
    ModelError,
    ProportionalHazardsWarning,
    SeparationWarning,
)
from workbench.stats.coxph import (
    baseline_survival_at,
    fit_coxph,
    linear_predictor,
    predict_survival,
    predict_survival_with_ci,
)
from workbench.stats.schoenfeld import (
    proportional_hazards_test,
    schoenfeld_residuals,
    warn_if_nonproportional,
)

COLS = ["fin", "age", "race", "wexp", "mar", "paro", "prio"]


@pytest.fixture(scope="module")
def rossi():
    return load_rossi()


@pytest.fixture(scope="module")
def leuk():
    return load_leukemia()


@pytest.fixture(scope="module")
def rfit(rossi):
    return fit_coxph(rossi[COLS], rossi["week"], rossi["arrest"])


def _quiet_fit(*args, **kwargs):
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        fit = fit_coxph(*args, **kwargs)
    return fit, caught


# ------------------------------------------------------------------ errors


def test_missing_value_names_column_and_row(rossi):
    X = rossi[COLS].copy()
    X.loc[3, "age"] = np.nan
    with pytest.raises(ModelError, match=r"'age' has missing or infinite values .*row 5 \(spreadsheet numbering"):
        fit_coxph(X, rossi["week"], rossi["arrest"])


def test_missing_time_and_bad_event_codes(rossi):
    t = rossi["week"].astype(float).copy()
    t.iloc[0] = np.nan
    with pytest.raises(ModelError, match="follow-up time contains missing"):
        fit_coxph(rossi[COLS], t, rossi["arrest"])
    with pytest.raises(ModelError, match="follow-up time is negative"):
        fit_coxph(rossi[COLS], -rossi["week"], rossi["arrest"])
    with pytest.raises(ModelError, match=r"1 \(event\) or 0 \(censored\)"):
        fit_coxph(rossi[COLS], rossi["week"], rossi["arrest"] * 2)


def test_zero_events(rossi):
    with pytest.raises(ModelError, match="No events are recorded among the 432 patients"):
        fit_coxph(rossi[COLS], rossi["week"], np.zeros(len(rossi)))


def test_constant_column(rossi):
    X = rossi[COLS].assign(site=1.0)
    with pytest.raises(ModelError, match=r"'site' has the same value \(1 for 'site'\) for every patient"):
        fit_coxph(X, rossi["week"], rossi["arrest"])


def test_collinear_columns_are_named(rossi):
    X = rossi[COLS].assign(prio_twice=2 * rossi["prio"] + 1)
    with pytest.raises(ModelError, match=r"Predictors 'prio' and 'prio_twice' are collinear"):
        fit_coxph(X, rossi["week"], rossi["arrest"])
    # A combination of three columns: fin + no_fin is constant, so total - race is too.
    X2 = rossi[COLS].assign(no_fin=1 - rossi["fin"], total=1 + rossi["race"])
    with pytest.raises(ModelError, match=r"'fin', 'race', 'no_fin' and 'total' are collinear"):
        fit_coxph(X2, rossi["week"], rossi["arrest"])


def test_column_without_information_at_event_times(leuk):
    # Move one censored patient's follow-up before the first event and mark only that
    # patient: the column never varies within a risk set at an event time.
    t = leuk["t"].to_numpy(float).copy()
    row = int(np.flatnonzero(leuk["status"].to_numpy() == 0)[0])
    t[row] = 0.5 * leuk.loc[leuk["status"] == 1, "t"].min()
    X = leuk[["Rx"]].assign(early=(np.arange(len(leuk)) == row).astype(float))
    with pytest.raises(ModelError, match="'early' does not vary among the patients still at risk"):
        fit_coxph(X, t, leuk["status"], min_events_per_parameter=0)


def test_shape_and_option_errors(rossi):
    with pytest.raises(ModelError, match="time has 10 values but there are 432 patients"):
        fit_coxph(rossi[COLS], rossi["week"][:10], rossi["arrest"])
    with pytest.raises(ModelError, match="ties must be 'efron' or 'breslow'"):
        fit_coxph(rossi[COLS], rossi["week"], rossi["arrest"], ties="exact")
    with pytest.raises(ModelError, match="weights must not be negative"):
        fit_coxph(rossi[COLS], rossi["week"], rossi["arrest"], weights=-np.ones(len(rossi)))
    with pytest.raises(ModelError, match="3 names were given for 7 predictor columns"):
        fit_coxph(rossi[COLS], rossi["week"], rossi["arrest"], names=["a", "b", "c"])
    with pytest.raises(ModelError, match="not numeric"):
        fit_coxph(rossi[COLS].assign(fin=rossi["fin"].map({0: "no", 1: "yes"})), rossi["week"], rossi["arrest"])


def test_prediction_with_wrong_columns(rfit, rossi):
    with pytest.raises(ModelError, match="new data have 3 predictor columns but the model was fitted with 7"):
        predict_survival(rfit, rossi[COLS[:3]].to_numpy(), [10.0])
    X = rossi[COLS].iloc[:3].copy()
    X.iloc[1, 0] = np.nan
    with pytest.raises(ModelError, match="'fin' has missing or infinite values in row 3"):
        linear_predictor(rfit, X)


# ---------------------------------------------------------------- warnings


def test_low_events_warning(leuk):
    X = leuk[["Rx", "logWBC", "sex"]]
    with pytest.warns(LowEventsWarning, match=r"Only 30 events for 3 model parameters \(10.0 per") as rec:
        fit_coxph(X, leuk["t"], leuk["status"], min_events_per_parameter=11)
    assert len(rec) == 1
    _, caught = _quiet_fit(X, leuk["t"], leuk["status"])
    assert not caught  # 10 per parameter meets the default threshold
    _, caught = _quiet_fit(X, leuk["t"], leuk["status"], min_events_per_parameter=0)
    assert not caught


def test_non_convergence_warning(rossi):
    with pytest.warns(ConvergenceWarning, match=r"did not converge after 1 Newton-Raphson iterations \(maximum 1\)"):
        fit = fit_coxph(rossi[COLS], rossi["week"], rossi["arrest"], max_iter=1)
    assert not fit.converged and fit.n_iter == 1


def test_separation_warning_names_column(leuk):
    # The event indicator as a predictor: every patient with an event has the highest
    # value in their risk set, so the likelihood keeps rising with its coefficient.
    X = leuk[["logWBC"]].assign(relapsed=leuk["status"].astype(float))
    fit, caught = _quiet_fit(X, leuk["t"], leuk["status"], min_events_per_parameter=0)
    sep = [w for w in caught if issubclass(w.category, SeparationWarning)]
    assert len(sep) == 1
    assert "'relapsed' runs off towards zero or infinity" in str(sep[0].message)
    assert fit.separated == ("relapsed",)
    assert abs(fit.coef[1]) > 10 and fit.se[1] > 100


def test_separation_by_combination_of_columns(leuk):
    # Two columns whose sum orders all times exactly; neither does alone.
    a = leuk["logWBC"].to_numpy()
    b = -leuk["t"].to_numpy() / 10.0 - a
    X = np.column_stack([a, b, leuk["Rx"]])
    fit, caught = _quiet_fit(X, leuk["t"], leuk["status"], names=["a", "b", "Rx"], min_events_per_parameter=0)
    assert any(issubclass(w.category, SeparationWarning) for w in caught)
    assert set(fit.separated) >= {"a", "b"}
    assert np.all(np.isfinite(fit.coef))


def test_no_spurious_warnings_on_a_regular_fit(rossi):
    _, caught = _quiet_fit(rossi[COLS], rossi["week"], rossi["arrest"])
    assert not caught


def test_warn_if_nonproportional(rfit, rossi):
    res = proportional_hazards_test(rfit, rossi[COLS], rossi["week"], rossi["arrest"])
    with pytest.warns(ProportionalHazardsWarning, match=r"effect of 'age' and 'wexp' seems to change over follow-up"):
        flagged = warn_if_nonproportional(res)
    assert flagged == ("age", "wexp")
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        assert warn_if_nonproportional(res, alpha=1e-4) == ()


def test_ph_test_itself_does_not_warn(rfit, rossi):
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        res = proportional_hazards_test(rfit, rossi[COLS], rossi["week"], rossi["arrest"])
    assert np.isfinite(res.to_frame().to_numpy(dtype=float, na_value=np.nan)[:, 0]).all()


# ------------------------------------------------------- results and shapes


def test_fit_is_frozen_and_arrays_read_only(rfit):
    with pytest.raises(dataclasses.FrozenInstanceError):
        rfit.coef = np.zeros(7)
    with pytest.raises(ValueError):
        rfit.coef[0] = 0.0
    assert rfit.names == tuple(COLS)
    assert rfit.to_frame().index.tolist() == COLS
    np.testing.assert_allclose(rfit.hazard_ratio, np.exp(rfit.coef))
    np.testing.assert_allclose(rfit.hr_ci_lower, np.exp(rfit.coef - 1.959963985 * rfit.se))


def test_ndarray_input_gets_default_names(rossi):
    fit = fit_coxph(rossi[COLS].to_numpy(), rossi["week"].to_numpy(), rossi["arrest"].to_numpy())
    assert fit.names == tuple(f"x{j}" for j in range(1, 8))
    one = fit_coxph(rossi["prio"].to_numpy(), rossi["week"], rossi["arrest"])
    assert one.n_params == 1


def test_linear_predictor_centred_and_column_order(rfit, rossi):
    lp = linear_predictor(rfit, rossi[COLS])
    assert lp.mean() == pytest.approx(0.0, abs=1e-10)
    shuffled = rossi[COLS[::-1]]
    np.testing.assert_allclose(linear_predictor(rfit, shuffled), lp)
    np.testing.assert_allclose(linear_predictor(rfit, rossi[COLS], offset=np.ones(len(rossi))), lp + 1)


def test_survival_prediction_shapes_and_steps(rfit, rossi):
    times = [0.5, 1.0, 10.0, 52.0, 80.0]
    S = predict_survival(rfit, rossi[COLS].iloc[:4], times)
    assert S.shape == (4, 5)
    np.testing.assert_allclose(S[:, 0], 1.0)  # before the first event time
    assert np.all(np.diff(S, axis=1) <= 0)
    np.testing.assert_allclose(S[:, 3], S[:, 4])  # carried forward after the last event time
    s0 = baseline_survival_at(rfit, times)
    np.testing.assert_allclose(predict_survival(rfit, np.asarray(rfit.x_mean)[None, :], times)[0], s0)


def test_survival_ci_brackets_estimate(rfit, rossi):
    times = np.array([0.5, 5.0, 20.0, 52.0])
    ci = predict_survival_with_ci(rfit, rossi[COLS].iloc[:6], times)
    assert ci.survival.shape == ci.lower.shape == ci.upper.shape == (6, 4)
    np.testing.assert_allclose(ci.lower[:, 0], 1.0)
    assert np.all(ci.lower[:, 1:] < ci.survival[:, 1:]) and np.all(ci.survival[:, 1:] < ci.upper[:, 1:])
    wide = predict_survival_with_ci(rfit, rossi[COLS].iloc[:6], times, conf_level=0.99)
    assert np.all(wide.lower[:, 1:] < ci.lower[:, 1:])
    with pytest.raises(ModelError, match="conf_level must lie between 0 and 1"):
        predict_survival_with_ci(rfit, rossi[COLS].iloc[:6], times, conf_level=95)


def test_null_model(rossi):
    fit = fit_coxph(np.zeros((len(rossi), 0)), rossi["week"], rossi["arrest"])
    assert fit.n_params == 0 and fit.converged
    assert fit.loglik == fit.loglik_null and fit.lr_statistic == 0.0 and fit.lr_p_value == 1.0
    assert predict_survival(fit, np.zeros((2, 0)), [10.0]).shape == (2, 1)


def test_breslow_and_efron_agree_without_ties(leuk):
    t = leuk["t"].to_numpy(float) + np.arange(len(leuk)) * 1e-4
    e = fit_coxph(leuk[["Rx", "logWBC"]], t, leuk["status"])
    b = fit_coxph(leuk[["Rx", "logWBC"]], t, leuk["status"], ties="breslow")
    np.testing.assert_allclose(e.coef, b.coef, atol=1e-12)
    np.testing.assert_allclose(e.baseline_cumhaz, b.baseline_cumhaz, atol=1e-12)


def test_row_order_and_rescaling_invariance(rossi, rfit):
    perm = np.random.default_rng(5).permutation(len(rossi))
    shuffled = rossi.iloc[perm]
    f2 = fit_coxph(shuffled[COLS], shuffled["week"], shuffled["arrest"])
    np.testing.assert_allclose(f2.coef, rfit.coef, atol=1e-10)
    np.testing.assert_allclose(f2.baseline_cumhaz, rfit.baseline_cumhaz, atol=1e-12)
    # Age in months instead of years divides its coefficient by 12 and changes nothing else.
    f3 = fit_coxph(rossi[COLS].assign(age=rossi["age"] * 12), rossi["week"], rossi["arrest"])
    np.testing.assert_allclose(f3.coef[1] * 12, rfit.coef[1], rtol=1e-8)
    assert f3.loglik == pytest.approx(rfit.loglik, abs=1e-9)
    # Rescaling time leaves the partial likelihood unchanged.
    f4 = fit_coxph(rossi[COLS], rossi["week"] / 52.0, rossi["arrest"])
    np.testing.assert_allclose(f4.coef, rfit.coef, atol=1e-10)
    # Rank-based PH test is invariant to row order (tied events share their average rank).
    r1 = proportional_hazards_test(rfit, rossi[COLS], rossi["week"], rossi["arrest"], time_transform="rank")
    r2 = proportional_hazards_test(f2, shuffled[COLS], shuffled["week"], shuffled["arrest"], time_transform="rank")
    np.testing.assert_allclose(r1.statistic, r2.statistic, rtol=1e-8)


def test_zero_weight_rows_are_dropped(rossi, rfit):
    extra = rossi.iloc[:20]
    X = pd.concat([rossi[COLS], extra[COLS]])
    w = np.r_[np.ones(len(rossi)), np.zeros(20)]
    fit = fit_coxph(X, pd.concat([rossi["week"], extra["week"] * 0 + 1]), pd.concat([rossi["arrest"], extra["arrest"]]), weights=w)
    np.testing.assert_allclose(fit.coef, rfit.coef, atol=1e-10)
    assert fit.n == len(rossi)


def test_penalty_shrinks_towards_zero(rossi, rfit):
    pen = fit_coxph(rossi[COLS], rossi["week"], rossi["arrest"], penalty=50.0)
    assert np.sum((pen.coef * pen.x_scale) ** 2) < np.sum((rfit.coef * rfit.x_scale) ** 2)
    with pytest.raises(ModelError, match="penalty must be zero or positive"):
        fit_coxph(rossi[COLS], rossi["week"], rossi["arrest"], penalty=-1.0)


# ------------------------------------------------ residuals and the PH test


def test_schoenfeld_residuals_sum_to_zero(rfit, rossi):
    res = schoenfeld_residuals(rfit, rossi[COLS], rossi["week"], rossi["arrest"])
    assert res.residuals.shape == (int(rossi["arrest"].sum()), 7)
    # They sum to the score, zero at the maximum (checked in the covariance metric).
    total = np.asarray(res.residuals).sum(axis=0)
    assert total @ rfit.cov @ total < 1e-12
    assert np.all(np.diff(res.event_times) >= 0)
    np.testing.assert_array_equal(rossi["week"].to_numpy()[res.rows], res.event_times)


def test_residuals_refuse_other_data(rfit, rossi):
    with pytest.raises(ModelError, match="do not match the fitted model"):
        schoenfeld_residuals(rfit, rossi[COLS], rossi["week"][::-1].to_numpy(), rossi["arrest"])
    with pytest.raises(ModelError, match="data have 2 predictor columns but the model has 7"):
        proportional_hazards_test(rfit, rossi[COLS[:2]].to_numpy(), rossi["week"], rossi["arrest"])


def test_ph_global_equals_term_test_with_one_predictor(leuk):
    fit = fit_coxph(leuk[["logWBC"]], leuk["t"], leuk["status"], min_events_per_parameter=0)
    for transform in ("km", "rank", "identity", "log"):
        res = proportional_hazards_test(fit, leuk[["logWBC"]], leuk["t"], leuk["status"], time_transform=transform)
        assert res.global_statistic == pytest.approx(res.statistic[0], rel=1e-10)
        assert res.global_df == 1 and res.df.tolist() == [1]
        assert res.to_frame().index.tolist() == ["logWBC", "GLOBAL"]
    with pytest.raises(ModelError, match="time_transform must be one of km, rank, identity, log"):
        proportional_hazards_test(fit, leuk[["logWBC"]], leuk["t"], leuk["status"], time_transform="sqrt")


def test_ph_test_weighted_equals_duplicated(rossi):
    counts = np.random.default_rng(11).integers(0, 3, len(rossi))
    idx = np.repeat(np.arange(len(rossi)), counts)
    wf = fit_coxph(rossi[COLS], rossi["week"], rossi["arrest"], weights=counts)
    df = fit_coxph(rossi[COLS].iloc[idx], rossi["week"].iloc[idx], rossi["arrest"].iloc[idx])
    for transform in ("km", "rank"):
        a = proportional_hazards_test(wf, rossi[COLS], rossi["week"], rossi["arrest"], weights=counts, time_transform=transform)
        b = proportional_hazards_test(
            df, rossi[COLS].iloc[idx], rossi["week"].iloc[idx], rossi["arrest"].iloc[idx], time_transform=transform
        )
        np.testing.assert_allclose(a.statistic, b.statistic, rtol=1e-8)
        assert a.global_statistic == pytest.approx(b.global_statistic, rel=1e-8)
