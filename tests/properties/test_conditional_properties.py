"""Conditional survival (workbench.competing.conditional): equals the ratio S(t)/S(s),
is 1 at t = s, and with s = 0 reduces to the project's survival intervals.
Data: the Rossi recidivism study shipped with lifelines (``load_rossi``)."""

import numpy as np
import pytest
from lifelines.datasets import load_rossi

from workbench.competing.conditional import (
    conditional_from_curves,
    conditional_survival_cox,
    conditional_survival_km,
)
from workbench.errors import MetricError
from workbench.predictions import SurvivalCurves
from workbench.stats.coxph import fit_coxph, predict_survival, predict_survival_with_ci
from workbench.stats.km import kaplan_meier, km_ci_at, survival_at

COLS = ["fin", "age", "race", "wexp", "mar", "paro", "prio"]


@pytest.fixture(scope="module")
def rossi():
    d = load_rossi()
    return d, fit_coxph(d[COLS], d["week"], d["arrest"])


@pytest.mark.parametrize("since", [0.0, 10.0, 26.0, 40.5])
def test_cox_conditional_is_the_ratio_and_one_at_the_landmark(rossi, since):
    d, fit = rossi
    X = d[COLS].iloc[:20]
    times = np.r_[since, since + np.array([1.0, 5.5, 8.0])]
    res = conditional_survival_cox(fit, X, times, since)
    ratio = predict_survival(fit, X, times) / predict_survival(fit, X, [since])
    np.testing.assert_allclose(res.survival, ratio, rtol=0, atol=1e-12)
    np.testing.assert_allclose(res.survival[:, 0], 1.0, rtol=0, atol=0)
    np.testing.assert_allclose(res.lower[:, 0], 1.0, rtol=0, atol=0)
    np.testing.assert_allclose(res.upper[:, 0], 1.0, rtol=0, atol=0)
    assert np.all((res.lower <= res.survival + 1e-15) & (res.survival <= res.upper + 1e-15))


def test_cox_conditional_from_zero_is_the_survival_interval(rossi):
    d, fit = rossi
    X = d[COLS].iloc[:20]
    times = [5.0, 20.0, 40.0, 52.0]
    res = conditional_survival_cox(fit, X, times, 0.0)
    ref = predict_survival_with_ci(fit, X, times)
    np.testing.assert_allclose(res.lower, ref.lower, rtol=0, atol=1e-12)
    np.testing.assert_allclose(res.upper, ref.upper, rtol=0, atol=1e-12)


@pytest.mark.parametrize("since", [0.0, 12.0, 30.0])
def test_km_conditional_per_group(rossi, since):
    d, _ = rossi
    groups = np.where(d["prio"] > 2, "high", "low")
    times = np.r_[since, since + np.array([2.0, 10.0, 20.0])]
    res = conditional_survival_km(d["week"], d["arrest"], times, since, groups=groups)
    assert res.labels == ("high", "low")
    for row, lab in enumerate(res.labels):
        m = groups == lab
        km = kaplan_meier(d["week"][m], d["arrest"][m])
        ratio = survival_at(km, times) / survival_at(km, since)
        np.testing.assert_allclose(res.survival[row], ratio, rtol=0, atol=1e-12)
        assert res.survival[row, 0] == 1.0
        if since == 0.0:
            lo, hi = km_ci_at(km, times)
            np.testing.assert_allclose(res.lower[row], lo, rtol=0, atol=1e-12)
            np.testing.assert_allclose(res.upper[row], hi, rtol=0, atol=1e-12)


def test_ratio_of_any_curves_and_refusals(rossi):
    d, fit = rossi
    grid = np.arange(1.0, 53.0)
    curves = SurvivalCurves(grid, predict_survival(fit, d[COLS].iloc[:5], grid))
    res = conditional_from_curves(curves, 10.0)
    np.testing.assert_allclose(res.survival, curves.probs[:, 9:] / curves.probs[:, [9]], rtol=0, atol=1e-12)
    with pytest.raises(MetricError, match="at or after"):
        conditional_survival_cox(fit, d[COLS].iloc[:2], [5.0], 10.0)


def test_group_curves_are_ratios_of_group_means(rossi):
    d, fit = rossi
    grid = np.arange(1.0, 53.0)
    probs = predict_survival(fit, d[COLS], grid)
    groups = np.where(d["prio"] > 2, "high", "low")
    res = conditional_from_curves(SurvivalCurves(grid, probs), 20.0, [20.0, 30.0, 52.0], groups=groups)
    assert res.labels == ("high", "low")
    for row, lab in enumerate(res.labels):
        m = groups == lab
        want = probs[m][:, [19, 29, 51]].mean(axis=0) / probs[m][:, 19].mean()
        np.testing.assert_allclose(res.survival[row], want, rtol=0, atol=1e-12)
    assert np.all(res.survival[:, 0] == 1.0)
