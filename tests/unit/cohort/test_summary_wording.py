"""Wording of the cohort summary when the Kaplan-Meier median is not reached."""

from __future__ import annotations

import warnings

from lifelines import KaplanMeierFitter
from lifelines.datasets import load_rossi

from workbench.cohort.summary import format_summary, summarise_cohort
from workbench.prepare import prepare_cohort
from workbench.study import read_study


def test_median_not_reached_reads_without_a_unit(tmp_path, public_tables):
    # Rossi recidivism data (lifelines load_rossi): 114 arrests among 432 released prisoners in 52
    # weeks, so the Kaplan-Meier curve stays above 0.5 (lifelines' median_survival_time_ is inf).
    # The line once read "not reached weeks (95% CI not reached to not reached)".
    rossi = load_rossi()
    assert KaplanMeierFitter().fit(rossi.week, rossi.arrest).median_survival_time_ == float("inf")
    assert public_tables.main(["rossi", "--out", str(tmp_path)]) == 0
    spec = read_study(tmp_path / "study.toml")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        cohort = prepare_cohort(spec).cohort
        text = format_summary(summarise_cohort(cohort, spec.horizons))
    line = next(ln for ln in text.splitlines() if ln.startswith("Median survival"))
    assert line.startswith("Median survival: not reached within follow-up (95% CI ")
    assert "not reached weeks" not in text
    # the median follow-up is reached (52 weeks of administrative follow-up) and keeps its unit
    assert "Median follow-up (reverse Kaplan-Meier): 52 weeks" in text
    # 114 events over 2 imaging features: well above 10 per feature (common practice), so the summary
    # does not claim the signature needs penalisation
    assert "Events per imaging feature: 57.0\n" in text + "\n" and "needs penalisation" not in text


def test_a_horizon_of_one_year_reads_in_the_singular():
    # scikit-survival's GBSG2 (load_gbsg2, German Breast Cancer Study Group 2, 686 patients), follow-up
    # converted from days to years; the usual horizons 1, 3 and 5 years. The line once read "at 1 years:".
    import numpy as np
    import pandas as pd
    from sksurv.datasets import load_gbsg2

    from workbench.cohort import Cohort, make_outcome

    _, y = load_gbsg2()
    years = y["time"] / 365.25
    cohort = Cohort(ids=np.array([f"G{i}" for i in range(len(y))]), y=make_outcome(years, y["cens"]),
                    clinical=pd.DataFrame(index=range(len(y))), features=pd.DataFrame(index=range(len(y))),
                    time_unit="years")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        text = format_summary(summarise_cohort(cohort, (1, 3, 5)))
    lines = {ln.split(":")[0].strip(): ln for ln in text.splitlines() if ln.strip().startswith("at ")}
    assert set(lines) == {"at 1 year", "at 3 years", "at 5 years"}
    assert "1 years" not in text
    # the number beside the words is unchanged: lifelines' Kaplan-Meier survival at 1 year, in percent
    ref = KaplanMeierFitter().fit(years, y["cens"]).survival_function_at_times(1.0).iloc[0]
    assert f"{100 * ref:5.1f}%" in lines["at 1 year"]
