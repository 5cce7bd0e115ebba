"""One check per claim of the generated methods text, against what the run did.

``methods_claims`` tags every sentence of the methods text with a key. Each key has one
check below, run on the small simulated study of tests/conftest.py (invented data from the
demo generator), on the same study with an external cohort applied, and with the wide
imaging models (penalised with all features, forest) fitted beside it. A check reads the
run's spec, its fitted objects or its results and asserts the sentence says the same; when
a claim is absent, it asserts that the run had nothing to claim. A key without a check
fails ``test_every_claim_has_a_check``, so a new sentence cannot enter the report untested.
Where a general-purpose library can recompute a number (lifelines), the check names it.
"""

from __future__ import annotations

import re
import warnings
from dataclasses import replace
from importlib import metadata

import numpy as np
import pytest

from workbench.errors import WorkbenchWarning
from workbench.models.registry import MODEL_LABELS
from workbench.report.methods import methods_paragraph
from workbench.report.methods_text import _imaging_claims, harmonised_models, methods_claims
from workbench.report.results import results_dict
from workbench.validation.intervals import CV_RULE, RESAMPLE_RULE, TWO_STAGE_RULE


@pytest.fixture(scope="module")
def external_result(small_study_result, tmp_path_factory):
    """The small study's fitted models applied to a second simulated cohort (no refits)."""
    from workbench.cohort.io import read_cohort
    from workbench.prepare import PreparedCohort
    from workbench.simulate import simulate_cohort
    from workbench.validation.external import validate_external

    r = small_study_result
    sim = simulate_cohort(150, random_state=41, n_features=50)
    d = tmp_path_factory.mktemp("claims_ext")
    sim.imaging.to_csv(d / "imaging.csv", index=False)
    sim.clinical.to_csv(d / "clinical.csv", index=False)
    cohort = read_cohort(d / "imaging.csv", d / "clinical.csv", r.spec.data.column_map())
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", WorkbenchWarning)
        ext = validate_external(r.models, cohort, r.spec.horizons, replicates=3, random_state=1)
    prep = PreparedCohort(cohort, cohort.n, (), {}, tuple(cohort.feature_names), ())
    return replace(r, external=ext, external_prepared=prep, external_comparisons={})


@pytest.fixture(scope="module")
def wide_models(small_study_result):
    """The penalised all-features model and a small forest, fitted on the small study's rows."""
    from workbench.models.registry import build_models

    r = small_study_result
    spec = replace(r.spec, models=replace(r.spec.models, fit=("clinical", "penalised_all", "forest"),
                                          forest=replace(r.spec.models.forest, trees=10)))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", WorkbenchWarning)
        return {k: m.fit(r.cohort) for k, m in build_models(spec).items() if k in ("penalised_all", "forest")}


def _claims(result):
    d = results_dict(result)
    return d, {c.key: c.text for para in methods_claims(result, d) for c in para}


# ------------------------------------------------------------------ one check per claim key


def _imaging_reproducibility(r, d, c):
    table = r.prepared.reproducibility
    if table is None:
        assert "imaging.reproducibility" not in c and d["reproducibility"] is None
        return
    t = c["imaging.reproducibility"]
    kept = table["icc"] >= r.spec.imaging.reproducibility.min_icc
    assert 0 < (~kept).sum() < len(table)  # the fixture removes some features, not all
    assert f"{int((~kept).sum())} of {len(table)} candidate features were removed" in t
    assert f"their ICC(3,1) between the first and a repeat measurement of {int(table['n'].max())} patients" in t
    assert f"below {r.spec.imaging.reproducibility.min_icc:g}" in t


def _cohort_patients(r, d, c):
    t = c["cohort.patients"]
    assert f"Of {r.prepared.n_read} patients read" in t and f"{r.cohort.n} entered the analysis" in t
    assert f"from {len(set(r.cohort.centre))} centres" in t and f"on {len(set(r.cohort.batch))} scanners" in t


def _cohort_excluded(r, d, c):
    k = len(r.prepared.incomplete_ids)
    if k:
        assert c["cohort.excluded"].startswith(f"{k} patients missing")
    else:
        assert "cohort.excluded" not in c


def _outcome_definition(r, d, c):
    t = c["outcome.definition"]
    assert "coded 'dead'" in t and f"time to event in {r.spec.data.time_unit}" in t
    assert f"{r.cohort.n_events} events were observed and {r.cohort.n - r.cohort.n_events} patients" in t


def _outcome_followup(r, d, c):
    # reference: reverse Kaplan-Meier (Schemper & Smith 1996) with lifelines, censoring as the event
    from lifelines import KaplanMeierFitter

    km = KaplanMeierFitter().fit(r.cohort.time, ~r.cohort.event)
    assert f"reverse Kaplan-Meier method was {km.median_survival_time_:.1f} months" in c["outcome.followup"]


def _outcome_horizons(r, d, c):
    assert c["outcome.horizons"] == "Predictions were made at 12 and 24 months."
    assert tuple(r.spec.horizons) == (12.0, 24.0)


def _predictors(r, d, c):
    t = c["predictors"]
    for p in r.spec.predictors:
        assert (p.label or p.column) in t
    ecog = next(p for p in r.spec.predictors if p.column == "ecog")
    assert ecog.missing == "impute" and "imputed with the most frequent training level" in t


def _sample_size_epp(r, d, c):
    s = r.summary
    assert f"{s.events_per_clinical_parameter:.1f} events per candidate clinical parameter" in c["sample_size.epp"]
    assert f"({s.n_events} events, {s.n_clinical_parameters} parameters)" in c["sample_size.epp"]


def _sample_size_riley(r, d, c):
    ss = r.summary.sample_size
    assert f"at least {ss.n_required} patients ({ss.events_required} events)" in c["sample_size.riley"]


def _sample_size_imaging(r, d, c):
    si = d["cohort"]["summary"].get("sample_size_imaging")
    if si:
        assert f"{si['n_required']} patients would be required" in c["sample_size.imaging"]
    else:
        assert "sample_size.imaging" not in c


def _imaging_pool(r, d, c):
    assert f"The imaging pool held {len(r.cohort.feature_names)} features" in c["imaging.pool"]


def _imaging_harmonisation(r, d, c):
    # which fits hold a learned ComBat step, read from the objects themselves
    harm = [k for k, m in r.models.items()
            if getattr(getattr(m, "signature_", None), "combat_", None) is not None or getattr(m, "combat_", None)]
    t = c["imaging.harmonisation"]
    assert harm == ["combined"] and "harmonised across scanners by ComBat" in t
    assert f"each fit of the {MODEL_LABELS['combined']} model." in t and MODEL_LABELS["clinical"] not in t
    assert r.spec.imaging.harmonise.empirical_bayes in t and "preserving the effects of age" in t
    # the checks are claimed exactly when the run made them (workbench.preprocess.harmonisation_checks)
    assert ("checked before and after harmonisation" in t) == bool(d.get("harmonisation"))
    if d.get("harmonisation"):
        assert d["harmonisation"]["development"]["before"]["n"] == r.cohort.n


def _imaging_steps(r, d, c):
    sig = r.models["combined"].signature_
    t = c["imaging.steps"]
    pos = [t.index(f"{s.n_in} -> {s.n_out}") for s in sig.steps_]
    assert pos == sorted(pos), "steps in the order they were applied"


def _imaging_penalty(r, d, c):
    t = c["imaging.penalty"]
    st = getattr(r.models["combined"].signature_, "stability_", None)
    if st is not None:  # stability selection: the numbers of the fitted StabilityResult
        assert f"{st.pairs} random splits" in t and f"first {st.q} features" in t
        assert f"at least {st.threshold:.0%} of the {2 * st.pairs} halves" in t and f"by {st.bound:.2f}." in t
        assert "unpenalised Cox coefficients" in c["imaging.signature"]
        return
    path = r.models["combined"].signature_.path_
    assert path.rule == "1se" and "one-standard-error rule" in t and f"alpha {path.alpha:.4g}" in t
    assert f"{r.spec.imaging.penalty.folds}-fold cross-validation" in t


def test_stability_selection_is_described_with_its_own_numbers(small_study_result):
    # the combined model's signature refitted with stability selection (models/stability.py)
    from workbench.models.stability import StabilityResult

    r = small_study_result
    m = r.models["combined"]
    names = tuple(m.signature_.feature_names_in_[:5])
    st = StabilityResult(names, np.array([0.9, 0.8, 0.2, 0.1, 0.0]), names[:2], 3, 0.75, 1.0, 20, 0.9 / 5 * 2)
    sig = replace_attr(m.signature_, stability_=st, path_=None)
    run = replace(r, models={**r.models, "combined": replace_attr(m, signature_=sig)})
    d = results_dict(run)
    claims = {x.key: x.text for x in _imaging_claims(run, d)}
    _imaging_penalty(run, d, claims)
    assert "cross-validation" not in claims["imaging.penalty"]


def _imaging_signature(r, d, c):
    assert f"The {len(r.models['combined'].signature_.selected_features_)} kept features" in c["imaging.signature"]


def _imaging_volume(r, d, c):
    v = r.volume["combined"]
    assert f"Pearson {v.pearson:.2f}, Spearman {v.spearman:.2f}" in c["imaging.volume"]


def _imaging_collinearity(r, d, c):
    assert d["models"]["combined"]["collinearity"]["rows"] and "variance inflation factor" in c["imaging.collinearity"]


def _models_volume(r, d, c):
    vm = r.models["clinical_volume"]
    t = c["models.volume"]
    assert f"the volume feature {vm.volume_feature} (" in t and vm.volume_feature == r.spec.imaging.volume_feature
    assert ("on the log2 scale" in t) == (vm.volume_transform_ == "log2")
    assert t.endswith("by paired differences.") == bool(d.get("volume_comparison"))


def _imaging_empty(r, d, c):
    assert r.models["combined"].signature_.selected_features_ and "imaging.empty" not in c


def _models_fitted(r, d, c):
    t = c["models.fitted"]
    for k, m in r.models.items():
        assert f"{MODEL_LABELS[k]} (Cox, efron ties, {len(m.fit_.names)} parameters)" in t


def _validation_method(r, d, c):
    v = r.validation
    assert set(v.estimator.values()) == {"optimism"}
    assert c["validation.method"] == (f"Internal validation used bootstrap optimism correction (Harrell et al. "
                                      f"1996) with {v.n_replicates['combined']} replicates per model (seed 5).")


def _validation_refit(r, d, c):
    t = c["validation.refit"]
    assert ("ComBat" in t) == bool(harmonised_models(r))
    assert f"inner {r.spec.imaging.penalty.folds}-fold cross-validation" in t


def _validation_estimator(r, d, c):
    assert "corrected estimate = apparent - optimism" in c["validation.estimator"]


def _validation_interval(r, d, c):
    v = r.validation
    t = c["validation.interval"]
    if v.interval == "corrected-t":  # a cross-validated run: the rule of intervals.cv_interval, no outer stage
        assert CV_RULE in t and f"J = {v.settings['folds']} x {v.settings['repeats']}" in t
        assert "two-stage" not in t
        return
    assert v.interval == "two-stage" and "two-stage bootstrap" in t
    assert f"in {v.settings['outer_replicates']} bootstrap samples" in t
    # the rule the engine used (intervals.TWO_STAGE_RULE), named in the text
    assert TWO_STAGE_RULE in t
    # a two-stage interval is not an optimism-shifted percentile interval
    assert not re.search(r"shift|moved so that", t)


def _metrics_discrimination(r, d, c):
    # reference: lifelines' concordance_index counts every comparable pair (no truncation time)
    from lifelines.utils import concordance_index

    risk = r.models["combined"].predict_risk(r.cohort).values
    c_ll = concordance_index(r.cohort.time, -risk, r.cohort.event)
    assert d["models"]["combined"]["performance"]["harrell_c"]["apparent"] == pytest.approx(c_ll, abs=1e-9)
    t = c["metrics.discrimination"]
    assert "Harrell's C over all comparable pairs (not truncated)" in t
    assert r.spec.validation.uno_tau is None and "Uno's C truncated at 24 months" in t


def _metrics_censoring(r, d, c):
    assert r.validation.method == "bootstrap"
    assert "censoring distribution on the rows each model was fitted on" in c["metrics.censoring_weights"]


def _metrics_accuracy(r, d, c):
    perf = d["models"]["combined"]["performance"]
    for k in ("brier@12", "ibs", "ipa@12", "ici@12", "e50@12", "e90@12", "cal_slope@12", "oe_ratio@12"):
        assert k in perf
    assert "ICI, E50, E90" in c["metrics.accuracy_calibration"]


def _comparison(r, d, c):
    # every fitted model but the baseline is compared with it (the clinical + volume model when the
    # study names its volume feature)
    assert set(r.comparisons) == set(r.models) - {r.spec.models.baseline}
    assert f"compared with the {MODEL_LABELS[r.spec.models.baseline]} model" in c["comparison"]


def _added_value(r, d, c):
    av = r.added_value["combined"]
    t = c["added_value"]
    assert f"With {av.permutations} permutations" in t and f"{av.folds} folds split by patient" in t


def _external_applied(r, d, c):
    if r.external is None:
        assert not any(k.startswith("external") for k in c)
        return
    e = r.external_prepared.cohort
    assert f"external cohort of {e.n} patients ({e.n_events} events)" in c["external.applied"]
    # the rule the engine used for the external intervals, named in the text
    labels = {m.interval for est in r.external.estimates.values() for m in est.values() if m.interval}
    assert labels <= {"normal"} and RESAMPLE_RULE in c["external.applied"]


def _external_censoring(r, d, c):
    if r.external is None:
        return
    ch = r.external.censoring
    assert ch.reason in c["external.censoring"]
    word = {"km": "one Kaplan-Meier curve", "km_by_centre": "stratified by centre", "cox": "a Cox model"}[ch.method]
    assert word in c["external.censoring"]


def _external_pooling(r, d, c):
    groups = getattr(r.external, "groups", None) if r.external is not None else None
    if not groups:
        assert "external.pooling" not in c
        return
    t = c["external.pooling"]
    assert all(g in t for g in groups) and "DerSimonian-Laird" in t and r.spec.validation.pooling == "dl"
    # the prediction interval the text names is the one every pooled result was computed with
    methods = {p.pi_method for g in groups.values() for per_model in g.pooled.values() for p in per_model.values()}
    assert methods == {"bayes"} and "half-normal prior" in t


def _software(r, d, c):
    # reference: the installed distributions, read with importlib.metadata
    for pkg in ("numpy", "scikit-survival", "lifelines"):
        assert f"{pkg} {metadata.version(pkg)}" in c["software"]
    assert c["software"].endswith(f"random seed {r.spec.seed}.")


CHECKS = {
    "cohort.patients": _cohort_patients, "cohort.excluded": _cohort_excluded,
    "outcome.definition": _outcome_definition, "outcome.followup": _outcome_followup,
    "outcome.horizons": _outcome_horizons, "predictors": _predictors, "sample_size.epp": _sample_size_epp,
    "sample_size.riley": _sample_size_riley, "sample_size.imaging": _sample_size_imaging,
    "imaging.pool": _imaging_pool, "imaging.harmonisation": _imaging_harmonisation,
    "imaging.steps": _imaging_steps, "imaging.penalty": _imaging_penalty, "imaging.signature": _imaging_signature,
    "imaging.volume": _imaging_volume, "imaging.empty": _imaging_empty, "models.fitted": _models_fitted,
    "imaging.collinearity": _imaging_collinearity, "models.volume": _models_volume,
    "validation.method": _validation_method, "validation.refit": _validation_refit,
    "validation.estimator": _validation_estimator, "validation.interval": _validation_interval,
    "metrics.discrimination": _metrics_discrimination, "metrics.censoring_weights": _metrics_censoring,
    "metrics.accuracy_calibration": _metrics_accuracy, "comparison": _comparison, "added_value": _added_value,
    "imaging.reproducibility": _imaging_reproducibility, "external.applied": _external_applied, "external.censoring": _external_censoring,
    "external.pooling": _external_pooling, "software": _software,
}


# claims the test runs do not make (no patient excluded, a non-empty signature): their checks
# assert the absence
ABSENT_CLAIMS = {"cohort.excluded", "imaging.empty"}


@pytest.fixture(scope="module")
def repeats_result(small_study_result):
    """The small study as if a repeat table had been given: the ICC table of preprocess/reproducibility.py
    from a second measurement of 30 patients (first values plus noise that grows along the pool)."""
    from workbench.preprocess.reproducibility import feature_icc, reproducible_features

    r = small_study_result
    c = r.prepared.cohort
    first = c.features.set_axis(c.ids.astype(str), axis=0).iloc[:30]
    rng = np.random.default_rng(2)
    scale = np.linspace(0.05, 2.0, first.shape[1]) * first.std().to_numpy()
    repeat = first + rng.normal(0, 1, first.shape) * scale
    table = feature_icc(first, repeat, "ICC(3,1)")
    _, removed = reproducible_features(table, r.spec.imaging.reproducibility.min_icc)
    return replace(r, prepared=replace(r.prepared, reproducibility=table, unreproducible=tuple(removed)))


@pytest.fixture(scope="module")
def claimed(small_study_result, external_result, repeats_result):
    return {"internal": (small_study_result, *_claims(small_study_result)),
            "external": (external_result, *_claims(external_result)),
            "repeats": (repeats_result, *_claims(repeats_result))}


def test_every_claim_has_a_check(claimed):
    for _, (_, _, c) in claimed.items():
        assert set(c) <= set(CHECKS), f"claims without a check: {sorted(set(c) - set(CHECKS))}"
    seen = set().union(*(set(c) for _, _, c in claimed.values()))
    # every checked key is made by at least one of the runs (the absent-claim cases are checked too)
    assert set(CHECKS) - seen <= ABSENT_CLAIMS


@pytest.mark.parametrize("key", sorted(CHECKS))
def test_claim(key, claimed):
    # each check asserts on the claim's text against the run's own records (see CHECKS); the claim
    # itself must be made by a run, except the two whose check is that it is absent
    made = []
    for run, (r, d, c) in claimed.items():
        if key.startswith("external") and run == "internal":
            continue
        CHECKS[key](r, d, c)
        made += [run] if key in c else []
    assert made or key in ABSENT_CLAIMS, f"no run made the claim {key!r}"


def test_methods_paragraph_is_the_claims_in_order(small_study_result):
    d, c = _claims(small_study_result)
    text = methods_paragraph(small_study_result, d)
    pos = [text.index(t) for t in c.values()]
    assert pos == sorted(pos)
    assert "truncated at" not in text.split("Harrell's C")[1].split(",")[0]


def test_wide_models_are_named_as_harmonised(small_study_result, wide_models):
    # the penalised all-features model and the forest learn their own ComBat step (workbench/models/wide.py)
    r = replace(small_study_result, models={**small_study_result.models, **wide_models})
    assert harmonised_models(r) == ("combined", "penalised_all", "forest")
    assert all(m.combat_ is not None for m in wide_models.values())
    d = results_dict(small_study_result)
    t = next(x.text for x in _imaging_claims(r, d) if x.key == "imaging.harmonisation")
    assert (f"inside each fit of these models: {MODEL_LABELS['combined']}; "
            f"{MODEL_LABELS['penalised_all']}; {MODEL_LABELS['forest']}.") in t


def test_no_harmonisation_is_said_when_none_was_learned(small_study_result):
    spec = small_study_result.spec
    off = replace(spec, imaging=replace(spec.imaging, harmonise=replace(spec.imaging.harmonise, method="none")))
    m = small_study_result.models["combined"]
    sig = replace_attr(m.signature_, combat_=None)
    r = replace(small_study_result, spec=off, models={**small_study_result.models,
                                                      "combined": replace_attr(m, signature_=sig)})
    d = results_dict(small_study_result)
    t = next(x.text for x in _imaging_claims(r, d) if x.key == "imaging.harmonisation")
    assert t.startswith("Imaging features were not harmonised") and "method = 'none'" in t
    assert harmonised_models(r) == ()


def replace_attr(obj, **kw):
    """A shallow copy of a fitted object with some learned attributes replaced."""
    import copy

    new = copy.copy(obj)
    for k, v in kw.items():
        setattr(new, k, v)
    return new


def test_interval_claims_follow_the_interval_computed(small_study_result):
    from workbench.report.methods_text import validation_claims

    d = results_dict(small_study_result)
    d["validation"] = {**d["validation"], "interval": "shifted-percentile"}
    t = next(x.text for x in validation_claims(small_study_result, d) if x.key == "validation.interval")
    assert "moved so that their centre maps to the corrected estimate" in t and "two-stage" not in t
    assert np.isfinite(small_study_result.validation.conf_level)


def test_report_states_the_reproducibility_filter(repeats_result):
    from workbench.report.html import render_report

    d = results_dict(repeats_result)["reproducibility"]
    page = render_report(repeats_result, figures=False)
    assert (f"{d['n_removed']} of {d['n_features']} features with an ICC below {d['min_icc']} were removed "
            "before any modelling") in page
    for fam, counts in d["by_family"].items():
        assert f"{fam} {counts['removed']} of {counts['features']}" in page


def test_results_folder_keeps_every_icc(repeats_result, tmp_path):
    import json

    import pandas as pd

    from workbench.report.results import write_results

    write_results(repeats_result, tmp_path)
    table = pd.read_csv(tmp_path / "feature_icc.csv", index_col=0)
    stored = repeats_result.prepared.reproducibility
    np.testing.assert_allclose(table["icc"], stored["icc"], atol=1e-12)
    assert table.index[~table["kept"]].tolist() == list(repeats_result.prepared.unreproducible)
    block = json.loads((tmp_path / "results.json").read_text())["reproducibility"]
    assert block["removed"] == list(repeats_result.prepared.unreproducible) and block["form"] == "ICC(3,1)"


def test_console_digest_names_the_reproducibility_filter(repeats_result, small_study_result):
    from workbench.report.digest import format_results

    r = repeats_result.prepared
    line = next(s for s in format_results(repeats_result).splitlines() if s.startswith("Reproducibility:"))
    assert line.startswith(f"Reproducibility: {len(r.unreproducible)} of {len(r.reproducibility)} imaging features "
                           "removed (ICC(3,1) below 0.75 on 30 repeat measurements")
    assert "Reproducibility:" not in format_results(small_study_result)
