"""Unit tests of the restricted cubic spline basis and Harrell's knots.

Expected basis values are worked by hand from the formula in Harrell,
Regression Modeling Strategies (2nd ed., Springer 2015), Section 2.4.5:
X_{j+1}(x) = [(x-t_j)_+^3 - (x-t_{k-1})_+^3 (t_k-t_j)/(t_k-t_{k-1})
             + (x-t_k)_+^3 (t_{k-1}-t_j)/(t_k-t_{k-1})] / (t_k-t_1)^2.
"""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from workbench.errors import SpecError
from workbench.preprocess.splines import HARRELL_QUANTILES, harrell_knots, rcs_basis


def test_three_knot_basis_by_hand():
    # knots (0, 1, 2), one nonlinear column, divisor (2 - 0)^2 = 4:
    #   x = -1 : every (.)_+ is 0                         -> 0
    #   x = 0.5: 0.5^3 = 0.125                            -> 0.125 / 4 = 0.03125
    #   x = 1.5: 1.5^3 - 0.5^3 * (2-0)/(2-1) = 3.375-0.25 -> 3.125 / 4 = 0.78125
    #   x = 3  : 27 - 8*2 + 1*(1-0)/(2-1) = 12            -> 12 / 4 = 3
    #   x = 4  : 64 - 27*2 + 8 = 18                       -> 18 / 4 = 4.5
    x = np.array([-1.0, 0.5, 1.5, 3.0, 4.0])
    b = rcs_basis(x, [0.0, 1.0, 2.0])
    assert b.shape == (5, 2)
    np.testing.assert_allclose(b[:, 0], x, rtol=0, atol=0)
    np.testing.assert_allclose(b[:, 1], [0.0, 0.03125, 0.78125, 3.0, 4.5], rtol=0, atol=1e-14)


def test_four_knot_basis_by_hand():
    # knots (0, 1, 3, 4): t_{k-1} = 3, t_k = 4, divisor (4 - 0)^2 = 16.
    #   x = 2: X2 = 2^3 = 8 -> 0.5 ;  X3 = 1^3 = 1 -> 0.0625
    #   x = 5: X2 = 125 - 8*(4-0)/1 + 1*(3-0)/1 = 96 -> 6 ;
    #          X3 = 64 - 8*(4-1)/1 + 1*(3-1)/1 = 42 -> 2.625
    b = rcs_basis([2.0, 5.0], [0.0, 1.0, 3.0, 4.0])
    np.testing.assert_allclose(b, [[2.0, 0.5, 0.0625], [5.0, 6.0, 2.625]], rtol=0, atol=1e-13)


def test_nan_propagates_to_the_whole_row():
    b = rcs_basis([np.nan, 1.0], [0.0, 1.0, 2.0, 3.0])
    assert np.all(np.isnan(b[0])) and np.all(np.isfinite(b[1]))


def test_second_derivative_is_continuous_at_the_knots():
    # A cubic spline is C2: one-sided second differences on either side of a knot
    # differ by O(h) (the third derivative is at most about 2 here), whereas a
    # jump J in the second derivative would leave a difference near J.
    knots = np.array([1.0, 2.0, 4.0, 7.0, 8.0])
    h = 1e-3
    for t in knots:
        f = rcs_basis(t + h * np.arange(-2, 3), knots)
        left = (f[2] - 2 * f[1] + f[0]) / h**2
        right = (f[4] - 2 * f[3] + f[2]) / h**2
        assert np.all(np.abs(left - right) < 20 * h), t
    # the check has teeth: a truncated square, whose f'' jumps by 2 at 4, fails it
    g = np.maximum(4 + h * np.arange(-2, 3) - 4, 0) ** 2
    assert abs((g[2] - 2 * g[1] + g[0]) / h**2 - (g[4] - 2 * g[3] + g[2]) / h**2) > 1.0


@settings(max_examples=50, deadline=None)
@given(
    a=st.floats(0.01, 100.0),
    c=st.floats(-1e3, 1e3),
    knots=st.lists(st.floats(-10, 10), min_size=3, max_size=7, unique=True).map(sorted),
)
def test_unit_change_scales_nonlinear_columns_by_the_same_factor(a, c, knots):
    # With the (t_k - t_1)^2 normalisation, moving to x' = a x + c (new unit and
    # origin) multiplies every nonlinear column by a, exactly like the linear one:
    # (a u)^3 / (a^2 r^2) = a u^3 / r^2.
    knots = np.asarray(knots)
    if np.min(np.diff(knots)) < 1e-3:
        return
    x = np.linspace(knots[0] - 2, knots[-1] + 2, 41)
    b = rcs_basis(x, knots)
    b2 = rcs_basis(a * x + c, a * knots + c)
    np.testing.assert_allclose(b2[:, 1:], a * b[:, 1:], rtol=1e-7, atol=1e-7 * a * np.abs(b[:, 1:]).max())
    np.testing.assert_allclose(b2[:, 0], a * x + c, rtol=1e-12)


@pytest.mark.parametrize("k", [3, 4, 5, 6, 7])
def test_knots_are_increasing_and_inside_the_data(k):
    x = np.random.default_rng(1).gamma(2.0, 3.0, size=300)
    t = harrell_knots(x, k)
    assert t.shape == (k,)
    assert np.all(np.diff(t) > 0) and x.min() < t[0] and t[-1] < x.max()
    assert len(HARRELL_QUANTILES[k]) == k


def test_knots_ignore_missing_values():
    x = np.arange(100.0)
    with_nan = np.concatenate([x, [np.nan] * 7])
    np.testing.assert_array_equal(harrell_knots(with_nan, 4), harrell_knots(x, 4))


@pytest.mark.parametrize("k", [2, 8, 4.0, True])
def test_number_of_knots_out_of_range(k):
    with pytest.raises(SpecError, match="knots"):
        harrell_knots(np.arange(50.0), k)


def test_too_few_distinct_values_is_explained():
    with pytest.raises(SpecError, match="only 3 distinct"):
        harrell_knots([1, 1, 2, 2, 3, 3] * 10, 4, name="ecog")


def test_coinciding_knots_are_explained():
    x = np.r_[np.zeros(80), np.arange(1.0, 21.0)]  # 80% tied at zero
    with pytest.raises(SpecError, match="coincide"):
        harrell_knots(x, 5, name="nodes")


@pytest.mark.parametrize("knots", [[0.0, 1.0], [0.0, 2.0, 1.0], [0.0, 1.0, 1.0], [0.0, np.inf, 3.0]])
def test_bad_knots_rejected(knots):
    with pytest.raises(SpecError, match="strictly increasing"):
        rcs_basis([0.5], knots)
