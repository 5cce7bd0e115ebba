"""The generated methods paragraph and limitations state what the run did, with its numbers.

Small simulated study (invented data from the demo generator); where a general-purpose
library can recompute a number (pandas, lifelines), the test does so and names it.
"""

from __future__ import annotations

import re
from importlib import metadata

import numpy as np
import pytest

from workbench.report.methods import (
    limitations,
    methods_paragraph,
    predictor_handling,
    validation_text,
)


@pytest.fixture(scope="module")
def result(small_study_result):
    return small_study_result


@pytest.fixture(scope="module")
def text(result):
    return methods_paragraph(result)


def test_patients_events_and_censoring(text, result):
    c = result.cohort
    assert f"{result.prepared.n_read} patients read" in text
    assert f"{c.n} entered the analysis" in text
    assert f"{c.n_events} events were observed and {c.n - c.n_events} patients were censored" in text
    assert "from 3 centres" in text and "3 scanners" in text


def test_reverse_km_follow_up_agrees_with_lifelines(text, result):
    # reference: reverse Kaplan-Meier median follow-up (Schemper & Smith 1996) with lifelines,
    # censoring treated as the event
    from lifelines import KaplanMeierFitter

    km = KaplanMeierFitter().fit(result.cohort.time, ~result.cohort.event)
    assert f"reverse Kaplan-Meier method was {km.median_survival_time_:.1f} months" in text


def test_reduction_steps_penalty_and_signature(text, result):
    sig = result.models["combined"].signature_
    counts = [f"{s.n_in} -> {s.n_out}" for s in sig.steps_]
    assert len(counts) == 4
    positions = [text.index(c) for c in counts]
    assert positions == sorted(positions), "steps in the order they were applied"
    assert "ComBat harmonisation 50 -> 50" in text
    assert f"The {len(sig.selected_features_)} kept features" in text
    assert "5-fold cross-validation with folds split by patient" in text
    assert "one-standard-error rule" in text
    assert f"alpha {sig.path_.alpha:.4g}" in text


def test_replicates_seed_and_versions(text, result):
    assert "bootstrap optimism correction" in text
    assert f"with {result.validation.n_replicates['combined']} replicates per model (seed 5)" in text
    # reference: the installed distributions, read with importlib.metadata
    for pkg in ("numpy", "scikit-survival", "lifelines"):
        assert f"{pkg} {metadata.version(pkg)}" in text
    assert "random seed 5" in text


def test_sample_size_numbers(text, result):
    ss = result.summary.sample_size
    assert f"at least {ss.n_required} patients ({ss.events_required} events) were required" in text
    assert f"{result.summary.events_per_clinical_parameter:.1f} events per candidate clinical parameter" in text


def test_imputation_value_is_the_training_mode(result):
    # reference: pandas' mode of the raw column (most frequent level), the documented imputation rule
    rows = {r["column"]: r for r in predictor_handling(result)}
    raw = result.cohort.clinical["ecog"].dropna().astype(str).str.replace(r"\.0$", "", regex=True)
    mode = raw.mode().iloc[0]
    n_missing = int(result.cohort.clinical["ecog"].isna().sum())
    assert f"{n_missing} missing, imputed with the most frequent training level (all rows: {mode})" in rows["ecog"]["missing"]
    assert rows["age"]["missing"].startswith("complete cases only")
    assert "reference I" in rows["stage"]["kind"]


def test_validation_text_says_what_is_refitted(result):
    t = validation_text(result)
    for phrase in ("ComBat harmonisation", "feature filters", "split by original patient identifier",
                   "imputation values"):
        assert phrase in t


def test_no_invented_numbers(text, result):
    # every integer in the paragraph is one the run knows
    known = {result.prepared.n_read, result.cohort.n, result.cohort.n_events, result.cohort.n - result.cohort.n_events,
             len(result.summary.centres), len(result.summary.batches), result.spec.seed,
             result.summary.n_clinical_parameters, result.summary.sample_size.n_required,
             result.summary.sample_size.events_required, result.summary.sample_size.n_available,
             result.spec.imaging.penalty.folds, result.validation.n_replicates["combined"], 1996, 2019, 2007, 1993,
             1981, 1983, 1997, 2021, result.spec.validation.outer_replicates,
             result.spec.validation.inner_replicates,
             2020, *[int(h) for h in result.spec.horizons],
             *[s.n_in for s in result.models["combined"].signature_.steps_],
             *[s.n_out for s in result.models["combined"].signature_.steps_],
             *result.summary.feature_families.values(), len(result.models["combined"].coefficient_rows()),
             len(result.models["clinical"].coefficient_rows()), round(100 * result.validation.conf_level),
             *[int(x) for x in re.findall(r"\d+", result.summary.sample_size.r2_cs_source)], 4, 1, 0, 2, 3,
             # added-value test, pre-validation and the imaging sample size (publication years and settings)
             1990, 2002, 2010, result.spec.added_value.permutations, result.spec.added_value.folds,
             # the coverage target and the bootstrap calibration coverages the methods text quotes from the
             # simulation benchmark (bench/bench_cv_metrics.py --method bootstrap; intervals.two_stage_interval)
             92, 98, 94, 96, 83, 87,
             *([result.summary.sample_size_imaging.n_required, result.summary.sample_size_imaging.n_parameters,
                result.summary.n_imaging_candidates] if result.summary.sample_size_imaging else [])}
    ints = {int(x) for x in re.findall(r"(?<![\w.])(\d+)(?![\w.])", text)}
    versions = " ".join(metadata.version(p) for p in ("numpy", "scipy", "pandas", "scikit-learn", "scikit-survival",
                                                      "lifelines"))
    extra = {i for i in ints - known if str(i) not in versions}
    assert extra == set(), extra


def test_limitations_reflect_the_run(result):
    lim = limitations(result)
    assert lim[0].startswith("The data are existing (retrospective) records")
    assert any("Only 3 bootstrap replicates" in x for x in lim)
    assert any("no external validation" in x for x in lim)
    assert any(x.startswith("The cohort (260 patients) is smaller") for x in lim) == (
        not result.summary.sample_size.adequate)
    vol = any(c == "VolumeDominanceWarning" for c, _ in result.warnings)
    assert any(x.startswith("Volume dominance") for x in lim) == vol
    assert np.isfinite(result.summary.events_per_feature)
