"""Wording of the median follow-up when the reverse Kaplan-Meier median is not reached.

scikit-survival's ``load_veterans_lung_cancer``: 128 deaths among 137 patients, only 9 censored,
so the reverse Kaplan-Meier curve (censoring as the event) stays above one half and its median is
not reached (lifelines' KaplanMeierFitter on the reversed flag agrees: median inf). The report
once read "n/a days (95% CI n/a to n/a)", the console "not reached days (95% CI not reached to
not reached)".
"""

from __future__ import annotations

import math

import numpy as np
from lifelines import KaplanMeierFitter
from sksurv.datasets import load_veterans_lung_cancer

from workbench.cohort.summary import followup_text
from workbench.report.characteristics import reverse_km_median


def test_not_reached_says_what_it_means():
    _, y = load_veterans_lung_cancer()
    time, event = y["Survival_in_days"].astype(float), y["Status"].astype(bool)
    assert KaplanMeierFitter().fit(time, ~event).median_survival_time_ == math.inf  # reference: lifelines
    median = reverse_km_median(time, event)
    assert not np.isfinite(median)
    text = followup_text(median, (float("nan"), float("nan")), "days", float(time.max()))
    assert text.startswith("not reached: more than half of the patients were still under follow-up")
    assert "999 days" in text and "n/a" not in text and "not reached days" not in text


def test_reached_and_open_limits():
    assert followup_text(25.6, (23.1, 28.0), "months", 60.0) == "25.6 months (95% CI 23.1 to 28)"
    assert followup_text(25.0, (23.1, None), "months", 60.0) == "25 months (95% CI from 23.1)"
    assert followup_text(25.0, None, "months", 60.0) == "25 months"


def test_characteristics_cell_and_note():
    from workbench.report.characteristics import NOT_REACHED, _followup, followup_notes

    _, y = load_veterans_lung_cancer()
    time, event = y["Survival_in_days"].astype(float), y["Status"].astype(bool)
    cell = _followup(reverse_km_median(time, event))
    assert cell == NOT_REACHED and "n/a" not in cell
    assert followup_notes(["25.6", cell]) and "never fell to one half" in followup_notes([cell])[0]
    assert followup_notes(["25.6", "30.1"]) == []
