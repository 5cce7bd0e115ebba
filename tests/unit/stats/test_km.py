"""Unit tests for workbench.stats.km.

Hand-worked values below are arithmetic from the Kaplan-Meier product-limit
and Greenwood formulas (Kaplan & Meier 1958; Greenwood 1926) on a toy sample.
"""

import numpy as np
import pytest

from workbench.errors import MetricError
from workbench.stats.km import (
    kaplan_meier,
    km_ci_at,
    median_survival,
    reverse_kaplan_meier_median_followup,
    survival_at,
)

# Toy sample: times 1, 2+, 3, 3, 4+, 5 (+ = censored).
TIME = np.array([1.0, 2.0, 3.0, 3.0, 4.0, 5.0])
EVENT = np.array([1, 0, 1, 1, 0, 1], dtype=bool)


def test_product_limit_by_hand():
    r = kaplan_meier(TIME, EVENT)
    np.testing.assert_array_equal(r.times, [1, 2, 3, 4, 5])
    np.testing.assert_array_equal(r.at_risk, [6, 5, 4, 2, 1])
    np.testing.assert_array_equal(r.events, [1, 0, 2, 0, 1])
    np.testing.assert_array_equal(r.censored, [0, 1, 0, 1, 0])
    # S = 5/6, 5/6, 5/6 * 2/4, same, 0 (arithmetic).
    expected = np.array([5 / 6, 5 / 6, 5 / 12, 5 / 12, 0.0])
    np.testing.assert_allclose(r.survival, expected, rtol=1e-12)
    # Greenwood at t=3: S^2 * (1/(6*5) + 2/(4*2)) (arithmetic).
    var3 = (5 / 12) ** 2 * (1 / 30 + 2 / 8)
    np.testing.assert_allclose(r.std_err[2], np.sqrt(var3), rtol=1e-12)
    # S = 0 at the end: degenerate standard error and interval, as documented.
    assert r.std_err[-1] == 0.0 and r.ci_lower[-1] == 0.0 and r.ci_upper[-1] == 0.0


def test_loglog_interval_brackets_estimate_and_stays_in_unit_interval():
    r = kaplan_meier(TIME, EVENT)
    assert np.all(r.ci_lower <= r.survival + 1e-15)
    assert np.all(r.ci_upper >= r.survival - 1e-15)
    assert np.all((r.ci_lower >= 0) & (r.ci_upper <= 1))
    # Wider level gives a wider interval where the interval is not degenerate.
    r99 = kaplan_meier(TIME, EVENT, conf_level=0.99)
    assert r99.ci_lower[0] < r.ci_lower[0] and r99.ci_upper[0] > r.ci_upper[0]


def test_step_lookup_is_right_continuous_and_vectorised():
    r = kaplan_meier(TIME, EVENT)
    assert survival_at(r, 0.5) == 1.0
    assert survival_at(r, 1.0) == pytest.approx(5 / 6)
    assert survival_at(r, 2.999) == pytest.approx(5 / 6)
    assert survival_at(r, 3.0) == pytest.approx(5 / 12)
    out = survival_at(r, np.array([[0.0, 3.5], [5.0, 10.0]]))
    assert out.shape == (2, 2)
    np.testing.assert_allclose(out, [[1.0, 5 / 12], [0.0, 0.0]])
    lo, hi = km_ci_at(r, [0.1, 3.2])
    assert lo[0] == hi[0] == 1.0
    assert lo[1] < 5 / 12 < hi[1]
    assert r.survival_at(3.2) == survival_at(r, 3.2)


def test_integer_weights_equal_duplicated_rows():
    w = np.array([2, 1, 3, 1, 1, 2])
    rw = kaplan_meier(TIME, EVENT, weights=w)
    rd = kaplan_meier(np.repeat(TIME, w), np.repeat(EVENT, w))
    np.testing.assert_allclose(rw.survival, rd.survival, rtol=1e-12)
    np.testing.assert_allclose(rw.std_err, rd.std_err, rtol=1e-12)
    np.testing.assert_allclose(rw.at_risk, rd.at_risk)


def test_zero_weight_drops_patient():
    w = np.array([1, 1, 1, 1, 0, 1.0])
    rw = kaplan_meier(TIME, EVENT, weights=w)
    keep = w > 0
    rk = kaplan_meier(TIME[keep], EVENT[keep])
    np.testing.assert_allclose(survival_at(rw, rk.times), rk.survival, rtol=1e-12)


def test_median_and_not_reached():
    r = kaplan_meier(TIME, EVENT)
    assert median_survival(r).median == 3.0
    # Only one event among ten patients: the curve stays at 0.9, median not reached.
    t = np.arange(1.0, 11.0)
    e = np.zeros(10, dtype=bool)
    e[0] = True
    m = median_survival(kaplan_meier(t, e))
    assert np.isinf(m.median) and np.isinf(m.ci_upper)


def test_median_exactly_half_takes_first_time():
    # 4 patients, events at 1 and 2, censored at 3 and 4: S(2) = 0.5 exactly.
    r = kaplan_meier([1, 2, 3, 4], [1, 1, 0, 0])
    assert median_survival(r).median == 2.0


def test_reverse_km_flips_roles():
    # Reverse KM: censorings at 2 and 4 are the "events" here (arithmetic).
    m = reverse_kaplan_meier_median_followup(TIME, EVENT)
    r = kaplan_meier(TIME, ~EVENT)
    assert m.median == median_survival(r).median == 4.0


@pytest.mark.parametrize(
    "time, event, weights",
    [
        ([], [], None),
        ([1.0, 2.0], [1], None),
        ([1.0, np.nan], [1, 0], None),
        ([1.0, -2.0], [1, 0], None),
        ([1.0, 2.0], [1, 2], None),
        ([1.0, 2.0], [1, 0], [1.0, -1.0]),
    ],
)
def test_bad_inputs_raise_metric_error(time, event, weights):
    with pytest.raises(MetricError):
        kaplan_meier(time, event, weights=weights)


def test_bad_conf_level():
    with pytest.raises(MetricError, match="conf_level"):
        kaplan_meier(TIME, EVENT, conf_level=1.5)
