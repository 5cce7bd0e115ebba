"""Wording of the cohort summary when the Kaplan-Meier median is not reached."""

from __future__ import annotations

import importlib.util
import warnings
from pathlib import Path

from lifelines import KaplanMeierFitter
from lifelines.datasets import load_rossi

from workbench.cohort.summary import format_summary, summarise_cohort
from workbench.prepare import prepare_cohort
from workbench.study import read_study


def test_median_not_reached_reads_without_a_unit(tmp_path):
    # Rossi recidivism data (lifelines load_rossi): 114 arrests among 432 released prisoners in 52
    # weeks, so the Kaplan-Meier curve stays above 0.5 (lifelines' median_survival_time_ is inf).
    # The line once read "not reached weeks (95% CI not reached to not reached)".
    rossi = load_rossi()
    assert KaplanMeierFitter().fit(rossi.week, rossi.arrest).median_survival_time_ == float("inf")
    script = Path(__file__).parents[3] / "examples" / "public_tables.py"
    spec_ = importlib.util.spec_from_file_location("public_tables", script)
    mod = importlib.util.module_from_spec(spec_)
    spec_.loader.exec_module(mod)
    assert mod.main(["rossi", "--out", str(tmp_path)]) == 0
    spec = read_study(tmp_path / "study.toml")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        cohort = prepare_cohort(spec).cohort
        text = format_summary(summarise_cohort(cohort, spec.horizons))
    line = next(ln for ln in text.splitlines() if ln.startswith("Median survival"))
    assert line.startswith("Median survival: not reached within follow-up (95% CI ")
    assert "not reached weeks" not in text
    # the median follow-up is reached (52 weeks of administrative follow-up) and keeps its unit
    assert "Median follow-up (reverse Kaplan-Meier): 52.0 weeks" in text
    # 114 events over 2 imaging features: well above 10 per feature (common practice), so the summary
    # does not claim the signature needs penalisation
    assert "Events per imaging feature: 57.0\n" in text + "\n" and "needs penalisation" not in text
