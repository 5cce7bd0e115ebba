"""Intervals of fixed predictions on an external cohort (workbench.competing.external).

Public data: scikit-survival's ``load_cgvhd`` (cause 1 against causes 2 and 3). The two
sets of predictions are lifelines' Aalen-Johansen incidence within groups of patients
(by disease extent; by extent and diagnosis), so they do not come from the code under test. Coverage of
the interval is measured in bench/bench_competing_external.py and its reduced form in
tests/properties/test_competing_external_simulation.py.
"""

from __future__ import annotations

import numpy as np
import pytest

from workbench.competing.external import DIFFERENCE, external_block, score_curves
from workbench.competing.outcome import IncidenceCurves, make_competing_outcome
from workbench.validation.intervals import metric_range

H = np.array([0.45, 0.65])


@pytest.fixture(scope="module")
def cgvhd():
    from lifelines import AalenJohansenFitter
    from sksurv.datasets import load_cgvhd

    X, y = load_cgvhd()
    t, c = y["ftime"].astype(float), y["status"].astype(int)
    c = np.where(c >= 2, 2, c)
    yc = make_competing_outcome(t, c)

    def by_group(groups):
        risk = np.zeros((t.size, H.size))
        for g in np.unique(groups):
            rows = groups == g
            ajf = AalenJohansenFitter(seed=1).fit(t[rows], c[rows], event_of_interest=1)
            cd = ajf.cumulative_density_.iloc[:, 0]
            risk[rows] = [float(cd[cd.index <= h].iloc[-1]) if (cd.index <= h).any() else 0.0 for h in H]
        return IncidenceCurves(H, np.clip(risk, 0, 1), 1)

    curves = {("cause", "clinical", "cause_specific"): by_group(X["extent"].astype(str).to_numpy()),
              ("cause", "combined", "cause_specific"): by_group(
                  (X["extent"].astype(str) + X["dx"].astype(str)).to_numpy())}
    return yc, curves


def test_estimates_are_the_metrics_of_the_fixed_predictions_and_intervals_hold_them(cgvhd):
    yc, curves = cgvhd
    block = external_block(curves, {"cause": yc}, H, replicates=40, seed=3)
    for key, c in curves.items():
        direct = score_curves(yc, c, H)
        for m, v in block[key].items():
            np.testing.assert_allclose(v["estimate"], direct[m], rtol=0, atol=1e-12, equal_nan=True)
    diff = block[("cause", DIFFERENCE, "cause_specific")]["auc"]
    np.testing.assert_allclose(diff["estimate"], block[("cause", "combined", "cause_specific")]["auc"]["estimate"]
                               - block[("cause", "clinical", "cause_specific")]["auc"]["estimate"], atol=1e-12)
    n_finite = 0
    for key, metrics in block.items():
        for m, v in metrics.items():
            a, b = metric_range(m, difference=key[1] == DIFFERENCE)
            for j in range(H.size):
                if np.isfinite(v["lower"][j]):
                    n_finite += 1
                    assert a <= v["lower"][j] <= v["estimate"][j] <= v["upper"][j] <= b, (key, m, j, v)
                    assert v["note"][j] == ""
    assert n_finite >= 15


def test_same_seed_same_intervals_and_too_few_resamples_give_none(cgvhd):
    yc, curves = cgvhd
    one = external_block(curves, {"cause": yc}, H, replicates=12, seed=7)
    two = external_block(curves, {"cause": yc}, H, replicates=12, seed=7)
    for key in one:
        for m in one[key]:
            np.testing.assert_array_equal(one[key][m]["lower"], two[key][m]["lower"])
    few = external_block(curves, {"cause": yc}, H, replicates=5, seed=7)
    assert all(np.all(np.isnan(v["lower"])) for blk in few.values() for v in blk.values())
