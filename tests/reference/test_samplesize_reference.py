"""Minimum sample size criteria of Riley et al. (Stat Med 2019;38:1276-96; BMJ 2020;368:m441)."""

from __future__ import annotations

import math

import pytest

from workbench.cohort.samplesize import (
    max_cox_snell_r2,
    minimum_sample_size,
    n_for_overall_risk,
    n_for_shrinkage,
)
from workbench.errors import CohortError


def test_criterion_i_worked_number():
    # n = p / ((S - 1) ln(1 - R2cs / S)), S = 0.9, p = 30, R2cs = 0.051 gives 5143
    # (arithmetic from the published formula; see REFERENCE_VALUES.md).
    assert n_for_shrinkage(30, 0.051, 0.9) == 5143


def test_criterion_ii_matches_formula_by_hand():
    e, n = 400, 1000
    lnl0 = e * math.log(e / n) - e
    r2max = 1 - math.exp(2 * lnl0 / n)
    assert max_cox_snell_r2(e, n) == pytest.approx(r2max, rel=1e-12)
    r2 = 0.10
    s = r2 / (r2 + 0.05 * r2max)
    by_hand = math.ceil(10 / ((s - 1) * math.log(1 - r2 / s)))
    res = minimum_sample_size(n_parameters=10, n=n, n_events=e, person_time=5000.0, r2_cs=r2)
    assert res.n_optimism == by_hand
    assert res.n_shrinkage == n_for_shrinkage(10, r2)
    assert res.n_required == max(res.n_shrinkage, res.n_optimism)


def test_criterion_iii_margin_is_met_exactly_at_returned_n():
    rate, fu, t = 0.05, 24.0, 12.0
    n = n_for_overall_risk(rate, fu, t, 0.05)
    risk = 1 - math.exp(-rate * t)

    def half_widths(m):
        ev = m * rate * fu
        lo = 1 - math.exp(-rate * math.exp(-1.96 / math.sqrt(ev)) * t)
        hi = 1 - math.exp(-rate * math.exp(1.96 / math.sqrt(ev)) * t)
        return risk - lo, hi - risk

    assert max(half_widths(n)) <= 0.05
    assert max(half_widths(n - 1)) > 0.05


def test_max_r2_does_not_depend_on_time_unit():
    a = minimum_sample_size(n_parameters=8, n=500, n_events=300, person_time=500 * 20.0, r2_cs=None)
    b = minimum_sample_size(n_parameters=8, n=500, n_events=300, person_time=500 * 20.0 * 30.4375, r2_cs=None)
    assert a.max_r2_cs == b.max_r2_cs and a.n_required == b.n_required


def test_impossible_r2_is_a_clear_error():
    with pytest.raises(CohortError, match="not below its maximum"):
        minimum_sample_size(n_parameters=5, n=100, n_events=10, person_time=1000.0, r2_cs=0.6)
