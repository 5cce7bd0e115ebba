"""The permutation p-value against the exact permutation distribution, enumerated by hand.

Source: the definition of the exact permutation test (Good P. Permutation, Parametric
and Bootstrap Tests of Hypotheses, 3rd ed. Springer 2005, ch. 3) and the
(1 + b) / (1 + K) form of Phipson & Smyth (Stat Appl Genet Mol Biol 2010;9:39), which
equals the exact p-value when the K permutations are all the non-identity ones.
"""

from __future__ import annotations

import itertools

import numpy as np
import pytest

from workbench.validation.permutation import permutation_p_value, residualise, within_permutation


def test_p_value_equals_the_exact_permutation_distribution_of_a_tiny_case():
    # x = (1, 2, 3, 4), y = (0, 0, 1, 1), T = sum x_pi(i) y_i = x_pi(3) + x_pi(4).
    # By hand: the two values landing on the y = 1 rows form one of six pairs, each
    # reached by 2! * 2! = 4 of the 24 permutations:
    #   {1,2} -> 3, {1,3} -> 4, {1,4} -> 5, {2,3} -> 5, {2,4} -> 6, {3,4} -> 7.
    # Observed (identity) T = 7; T >= 7 only for {3,4}: exact p = 4 / 24 = 1 / 6.
    x = np.array([1.0, 2.0, 3.0, 4.0])
    y = np.array([0.0, 0.0, 1.0, 1.0])
    perms = [np.array(p) for p in itertools.permutations(range(4))]
    stats = np.array([x[p] @ y for p in perms])
    assert sorted(stats.tolist()) == sorted([3, 4, 5, 5, 6, 7] * 4)  # the table above
    observed = x @ y
    others = np.array([x[p] @ y for p in perms if not np.array_equal(p, np.arange(4))])
    p, se = permutation_p_value(observed, others)
    assert p == pytest.approx(1 / 6, abs=1e-15)
    assert se == pytest.approx(np.sqrt((1 / 6) * (5 / 6) / 23), abs=1e-15)
    # a less extreme observation: T = 5 is reached or exceeded by 16 of 24 permutations
    p5, _ = permutation_p_value(5.0, stats[stats != 5.0].tolist() + [5.0] * 7)  # 23 others, 7 ties
    assert p5 == pytest.approx(16 / 24, abs=1e-15)


def test_p_value_is_never_zero_and_counts_ties_against_the_model():
    p, se = permutation_p_value(10.0, np.zeros(19))
    assert p == pytest.approx(1 / 20) and se == pytest.approx(np.sqrt(0.05 * 0.95 / 19))
    assert permutation_p_value(0.0, np.zeros(19))[0] == 1.0


def test_intercept_only_residual_permutation_is_plain_permutation():
    rng = np.random.default_rng(0)
    X = rng.standard_normal((12, 3))
    fitted, resid = residualise(X, np.ones((12, 1)))
    np.testing.assert_allclose(fitted, np.tile(X.mean(axis=0), (12, 1)), atol=1e-12)
    perm = within_permutation(np.zeros(12, dtype=int), rng)
    np.testing.assert_allclose(fitted + resid[perm], X[perm], atol=1e-12)


def test_within_permutation_moves_rows_only_inside_their_stratum():
    strata = np.array(["a", "b", "a", "b", "b", "a", "c"])
    for seed in range(20):
        perm = within_permutation(strata, np.random.default_rng(seed))
        assert sorted(perm.tolist()) == list(range(7))
        assert (strata[perm] == strata).all()
