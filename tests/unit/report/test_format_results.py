"""The console summary says why a validation has no intervals (instead of bare numbers)."""

from __future__ import annotations

from dataclasses import replace

import numpy as np

from workbench.report.digest import format_results

WHY = "interval not computable: too few usable outer bootstrap samples"


def _without_intervals(result):
    v = result.validation
    est = {m: {k: replace(e, ci_lower=np.nan, ci_upper=np.nan, note=WHY) for k, e in per.items()}
           for m, per in v.estimates.items()}
    return replace(result, validation=replace(v, estimates=est))


def test_summary_says_why_there_are_no_intervals(small_study_result):
    with_ci = format_results(small_study_result)
    assert "No intervals" not in with_ci and " to " in with_ci.split("AUC and calibration")[0]
    text = format_results(_without_intervals(small_study_result))
    line = next(ln for ln in text.splitlines() if ln.startswith("No intervals"))
    assert WHY in line and "outer_replicates" in line
