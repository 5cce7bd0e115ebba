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


def test_columns_stay_aligned_with_a_long_model_label(small_study_result, monkeypatch):
    # "Clinical + imaging signature (equal to the clinical model)" (58 characters, an empty signature on
    # scikit-survival's cgvhd data) once pushed its row's numbers out of the header's columns
    from workbench.models.labels import model_labels
    from workbench.report import digest

    def long_labels(models):
        return {k: v + " (equal to the clinical model)" for k, v in model_labels(models).items()}

    monkeypatch.setattr(digest, "model_labels", long_labels)
    lines = format_results(small_study_result).splitlines()
    head = next(i for i, ln in enumerate(lines) if ln.startswith("model ") and "Harrell C" in ln)
    end = lines[head].index("Harrell C") + len("Harrell C")
    rows = lines[head + 1: head + 1 + len(small_study_result.models)]
    assert all("(equal to the clinical model)" in r for r in rows)
    assert {r.rindex(")", 0, end + 1) for r in rows} == {end - 1}  # each Harrell C cell ends under its header
