"""The Kaplan-Meier figure's time axis ends where the curves end, with ticks chosen for that range.

scikit-survival's ``load_veterans_lung_cancer`` (137 patients, days), three groups by the
Karnofsky score: the curves stop (fewer than 10 at risk) near a year, while follow-up runs to
999 days. The axis ran to 910 days with ticks every 182 (most of the panel empty, "364" beside a
365-day horizon); the numbers at risk under the new ticks are counted from the data here.
"""

from __future__ import annotations

import matplotlib.pyplot as plt
import numpy as np
from sksurv.datasets import load_veterans_lung_cancer

from workbench.cohort.outcome import make_outcome
from workbench.figures.grouping import risk_groups
from workbench.figures.km import _shown_ticks, km_by_group, plot_km_by_group


def _veterans():
    X, y = load_veterans_lung_cancer()
    time, event = y["Survival_in_days"].astype(float), y["Status"].astype(bool)
    risk = -X["Karnofsky_score"].to_numpy(float)
    groups = risk_groups(risk, risk, "tertiles")
    return time, event, groups, km_by_group(make_outcome(time, event), groups, time_unit="days")


def test_axis_ends_at_the_first_tick_after_the_longest_curve():
    time, event, groups, result = _veterans()
    ticks, at_risk = _shown_ticks(result, 10)
    end = max(float(km.times[km.at_risk >= 10].max()) for km in result.curves)
    assert end < time.max() * 0.6  # the case: the curves stop long before follow-up does
    assert ticks[-1] >= end > ticks[-2] and ticks.size >= 4 and ticks[-1] <= time.max()
    g = groups.groups
    present = np.unique(g)
    want = np.array([[int(np.sum(time[g == k] >= t)) for t in ticks] for k in present])
    np.testing.assert_array_equal(at_risk, want)
    fig = plot_km_by_group(result, width="double", min_at_risk=10)
    assert fig.axes[0].get_xlim()[1] == ticks[-1]
    plt.close(fig)


def test_with_every_patient_shown_the_axis_is_unchanged():
    _, _, _, result = _veterans()
    ticks, at_risk = _shown_ticks(result, 0)
    np.testing.assert_array_equal(ticks, result.tick_times)
    np.testing.assert_array_equal(at_risk, result.at_risk)


def test_given_ticks_are_kept_and_cut_at_the_curves_end():
    time, event, groups, _ = _veterans()
    given = [0.0, 100.0, 200.0, 300.0, 400.0, 500.0, 600.0]
    result = km_by_group(make_outcome(time, event), groups, time_unit="days", tick_times=given)
    ticks, at_risk = _shown_ticks(result, 10)
    end = max(float(km.times[km.at_risk >= 10].max()) for km in result.curves)
    assert set(ticks) <= set(given) and ticks[-1] >= end > ticks[-2]
    np.testing.assert_array_equal(at_risk, np.asarray(result.at_risk)[:, :ticks.size])
