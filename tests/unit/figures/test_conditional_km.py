"""Conditional survival by risk group as a figure (figures.km.conditional_km_by_group).

Reference: lifelines' KaplanMeierFitter on each whole group; the curve of the patients still
followed at s, with time counted from s, is S(s + u) / S(s) of the whole group (Zabor et al.,
Cancer 2013;119:3589-92), on scikit-survival's copy of the GBSG2 trial data.
"""

from __future__ import annotations

import numpy as np
import pytest
from lifelines import KaplanMeierFitter
from sksurv.datasets import load_gbsg2

from workbench.cohort.outcome import make_outcome
from workbench.figures import conditional_km_by_group, plot_km_by_group, risk_groups


@pytest.fixture(scope="module")
def gbsg2():
    X, y = load_gbsg2()
    time, event = y["time"].astype(float), y["cens"].astype(bool)
    risk = X["pnodes"].to_numpy(float) + 0.01 * X["age"].to_numpy(float)
    return make_outcome(time, event), risk_groups(risk, risk, 3)


def test_each_curve_is_the_groups_survival_divided_by_its_value_at_the_visit(gbsg2):
    y, groups = gbsg2
    s = 365.0
    res = conditional_km_by_group(y, groups, s, time_unit="days")
    for k, km in enumerate(res.curves):
        sel = np.asarray(groups.groups) == k
        ref = KaplanMeierFitter().fit(y["time"][sel], y["event"][sel])
        u = km.times[km.times > 0][:25]
        whole = ref.survival_function_at_times(np.r_[s, s + u]).to_numpy()
        got = np.array([km.survival[km.times <= v][-1] for v in u])
        np.testing.assert_allclose(got, whole[1:] / whole[0], rtol=0, atol=1e-10)
    # the at-risk strip counts patients followed beyond the visit only
    assert res.at_risk[:, 0].sum() == int(np.sum(y["time"] > s))


def test_the_axes_say_the_curves_start_at_the_visit(gbsg2):
    y, groups = gbsg2
    fig = plot_km_by_group(conditional_km_by_group(y, groups, 365.0, time_unit="days"), since=365.0,
                           width="single")
    main = fig.axes[0]
    assert main.get_ylabel() == "Survival, given alive at 365 days"
    assert fig.axes[1].get_xlabel() == "Time since the visit at 365 days (days)"


def test_a_visit_at_one_year_reads_in_the_singular(gbsg2):
    # the same GBSG2 data with follow-up in years (days / 365.25): a visit at 1 year once read
    # "Time since 1 (years)"
    y, groups = gbsg2
    y_years = make_outcome(y["time"] / 365.25, y["event"])
    res = conditional_km_by_group(y_years, groups, 1.0, time_unit="years")
    # the patients counted are those followed beyond 1 year (365.25 days) in the data as shipped
    assert res.at_risk[:, 0].sum() == int(np.sum(y["time"] > 365.25))
    fig = plot_km_by_group(res, since=1.0, width="single")
    assert fig.axes[0].get_ylabel() == "Survival, given alive at 1 year"
    assert fig.axes[1].get_xlabel() == "Time since the visit at 1 year (years)"


def test_no_figure_when_nobody_is_followed_beyond_the_visit(gbsg2):
    y, groups = gbsg2
    with pytest.raises(Exception, match="fewer than two patients are followed beyond"):
        conditional_km_by_group(y, groups, float(y["time"].max()), time_unit="days")
