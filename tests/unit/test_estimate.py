"""Individual-patient estimates: plumbing, range flags, input errors, files and text.

Models are fitted on the demo study (demo_cohort/study.toml, invented data); the
numbers are checked against the fitted models' own prediction methods here and
against scikit-survival and known-truth simulations in
tests/reference/test_estimate_reference.py.
"""

from __future__ import annotations

from dataclasses import replace
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from workbench.cohort.summary import CAUTION
from workbench.errors import CohortError, ModelError, SpecError
from workbench.estimate import (
    check_patient,
    estimate_patient,
    format_estimate,
    ranges_from_bundle,
    ranges_from_model,
    read_patient_file,
    refit_bootstrap,
)
from workbench.models.registry import build_models
from workbench.prepare import prepare_cohort
from workbench.report.bundle import RISK_GROUPS, load_bundle, save_bundle
from workbench.report.bundle_training import summarise_training
from workbench.study import read_study

REPO = Path(__file__).resolve().parents[2]
# the small demo forest leaves a training patient without out-of-bag trees; not what is tested here
pytestmark = pytest.mark.filterwarnings("ignore:.*no out-of-bag prediction:workbench.errors.WorkbenchWarning")
H = (12.0, 24.0, 36.0)


@pytest.fixture(scope="module")
def demo():
    spec = read_study(REPO / "demo_cohort" / "study.toml")
    spec = replace(spec, models=replace(spec.models, fit=("clinical", "combined", "forest"),
                                        forest=replace(spec.models.forest, trees=15)))
    cohort = prepare_cohort(spec).cohort
    models = {k: m.fit(cohort) for k, m in build_models(spec).items()}
    training = summarise_training(cohort, models, spec.horizons)
    return spec, cohort, models, training


def _patient(demo, i: int = 3, imaging: bool = False) -> dict:
    spec, cohort, _, _ = demo
    row = {p.column: cohort.clinical[p.column].iloc[i] for p in spec.predictors}
    if imaging:
        row.update(cohort.features.iloc[i].to_dict())
        row["scanner"] = cohort.batch[i]
    return row


def _ranges(demo, name="clinical"):
    _, _, models, training = demo
    return ranges_from_model(models[name], training, batch_column="scanner")


# ------------------------------------------------------------------ numbers


def test_delta_estimate_is_the_models_interval(demo):
    _, cohort, models, training = demo
    m = models["clinical"]
    est = estimate_patient(m, _patient(demo), H, training_ranges=_ranges(demo))
    ci = m.predict_survival_with_ci(cohort.take([3]), H)
    np.testing.assert_allclose([h.survival for h in est.horizons], ci.survival[0], rtol=0, atol=1e-12)
    np.testing.assert_allclose([h.lower for h in est.horizons], ci.lower[0], rtol=0, atol=1e-12)
    np.testing.assert_allclose([h.upper for h in est.horizons], ci.upper[0], rtol=0, atol=1e-12)
    assert est.linear_predictor == pytest.approx(m.linear_predictor(cohort.take([3]))[0], abs=1e-12)
    assert est.interval_method == "delta" and est.conf_level == 0.95
    assert est.times[0] == 0.0 and est.survival[0] == 1.0
    assert np.all(np.diff(est.survival) <= 0)
    assert np.all(est.lower <= est.survival + 1e-15) and np.all(est.survival <= est.upper + 1e-15)
    c1, c2 = training.risk_cutpoints["clinical"]
    assert est.risk_group == RISK_GROUPS[(est.risk_score > c1) + (est.risk_score > c2)]
    assert est.caution == CAUTION and not est.out_of_range


def test_risk_groups_split_the_training_cohort_in_thirds(demo):
    _, cohort, models, training = demo
    risk = models["clinical"].predict_risk(cohort).values
    c1, c2 = training.risk_cutpoints["clinical"]
    share = np.bincount((risk > c1).astype(int) + (risk > c2), minlength=3) / cohort.n
    np.testing.assert_allclose(share, 1 / 3, atol=0.01)


def test_dict_and_one_row_table_agree(demo):
    m = demo[2]["clinical"]
    a = estimate_patient(m, _patient(demo), H, training_ranges=_ranges(demo))
    b = estimate_patient(m, pd.DataFrame([_patient(demo)]), H, training_ranges=_ranges(demo))
    np.testing.assert_array_equal(a.survival, b.survival)
    with pytest.raises(CohortError, match="exactly one patient"):
        estimate_patient(m, pd.DataFrame([_patient(demo)] * 2), H)


def test_combined_model_note_and_imaging_checks(demo):
    m = demo[2]["combined"]
    est = estimate_patient(m, _patient(demo, imaging=True), H, training_ranges=_ranges(demo, "combined"))
    assert est.interval_method == "delta"
    assert any("signature as fixed" in n for n in est.notes)
    assert est.checks.imaging_checked == len(demo[1].feature_names)


def test_forest_has_no_delta_interval(demo):
    est = estimate_patient(demo[2]["forest"], _patient(demo, imaging=True), H, training_ranges=_ranges(demo, "forest"))
    assert est.interval_method == "none" and np.isnan(est.horizons[0].lower)
    assert np.isnan(est.linear_predictor) and np.isfinite(est.risk_score)
    assert "no interval" in format_estimate(est)


def test_bootstrap_method_uses_the_refits(demo):
    _, cohort, models, _ = demo
    m = models["clinical"]
    refits = refit_bootstrap(m, cohort, 20, random_state=5)
    est = estimate_patient(m, _patient(demo), H, training_ranges=_ranges(demo), method="bootstrap",
                           bootstrap_models=refits)
    draws = np.array([r.predict_survival(cohort.take([3]), H).probs[0] for r in refits])
    np.testing.assert_allclose([h.lower for h in est.horizons], np.percentile(draws, 2.5, axis=0))
    np.testing.assert_allclose([h.upper for h in est.horizons], np.percentile(draws, 97.5, axis=0))
    assert est.n_bootstrap == 20 and "bootstrap, 20 refits" in format_estimate(est)
    with pytest.raises(ModelError, match="at least 20 refitted models"):
        estimate_patient(m, _patient(demo), H, method="bootstrap", bootstrap_models=refits[:5])


def test_bundle_gives_the_same_estimate(demo, tmp_path):
    spec, _, models, training = demo
    b = load_bundle(save_bundle(models, spec, training, tmp_path / "b"))
    row = {**_patient(demo, imaging=True), "patient_id": "NEW-1"}
    for name in ("clinical", "combined"):
        ours = estimate_patient(models[name], row, H, training_ranges=_ranges(demo, name), ignore=("patient_id",))
        back = estimate_patient(b.models[name], row, H, training_ranges=ranges_from_bundle(b, name))
        np.testing.assert_array_equal(ours.upper, back.upper)
        assert ours.risk_group == back.risk_group


# ------------------------------------------------------------------ range flags


def test_age_of_120_is_flagged(demo):
    est = estimate_patient(demo[2]["clinical"], {**_patient(demo), "age": 120}, H, training_ranges=_ranges(demo))
    (flag,) = est.checks.flags
    assert (flag.field, flag.kind, flag.value) == ("age", "continuous", "120")
    assert "above the training range" in flag.message and est.out_of_range
    text = format_estimate(est)
    assert flag.message in text and text.rstrip().endswith(CAUTION)


def test_unseen_stage_is_flagged_and_not_estimated(demo):
    row = {**_patient(demo), "stage": "IIIB"}
    checks = check_patient(row, _ranges(demo))
    (flag,) = checks.flags
    assert (flag.field, flag.kind, flag.value) == ("stage", "categorical", "IIIB")
    with pytest.raises(ModelError, match=r"field 'stage' \(Stage\) = 'IIIB' was not seen"):
        estimate_patient(demo[2]["clinical"], row, H, training_ranges=_ranges(demo))


def test_unseen_stage_is_imputed_when_the_model_says_so(demo):
    spec, cohort, _, training = demo
    preds = tuple(replace(p, unseen="missing", missing="impute") if p.column == "stage" else p
                  for p in spec.predictors)
    m = build_models(replace(spec, predictors=preds, models=replace(spec.models, fit=("clinical",))))["clinical"]
    m.fit(cohort)
    est = estimate_patient(m, {**_patient(demo), "stage": "IIIB"}, H,
                           training_ranges=ranges_from_model(m, training))
    assert [f.field for f in est.checks.flags] == ["stage"]
    assert any("unseen level 'IIIB'" in t for t in est.checks.imputed)


def test_detection_limit_values_and_high_cea(demo):
    r = _ranges(demo)
    assert check_patient({**_patient(demo), "cea_ng_ml": "<0.5"}, r).flags == ()
    assert check_patient({**_patient(demo), "cea_ng_ml": 0.2}, r).flags == ()
    (flag,) = check_patient({**_patient(demo), "cea_ng_ml": 500}, r).flags
    assert flag.field == "cea_ng_ml" and "above" in flag.message


def test_missing_imputed_field_is_reported(demo):
    est = estimate_patient(demo[2]["clinical"], {**_patient(demo), "ecog": ""}, H, training_ranges=_ranges(demo))
    assert len(est.checks.imputed) == 1 and est.checks.imputed[0].startswith("ecog: missing")
    assert "Imputed:" in format_estimate(est)


def test_imaging_beyond_percentiles_counted_with_the_worst_named(demo):
    _, cohort, _, training = demo
    f1, f2, f3 = cohort.feature_names[:3]
    row = _patient(demo, imaging=True)
    span = {f: training.imaging_p99[f] - training.imaging_p01[f] for f in (f1, f2, f3)}
    row[f1] = training.imaging_p99[f1] + 5 * span[f1]
    row[f2] = training.imaging_p01[f2] - 2 * span[f2]
    row[f3] = training.imaging_p99[f3] + 1 * span[f3]
    ch = check_patient(row, _ranges(demo, "combined"))
    base = check_patient(_patient(demo, imaging=True), _ranges(demo, "combined")).imaging_outside
    assert ch.imaging_outside == base + 3
    assert [w.field for w in ch.imaging_worst[:3]] == [f1, f2, f3]
    assert ch.imaging_worst[0].message.startswith(f"{f1} = ")


def test_unseen_batch_is_flagged(demo):
    ch = check_patient({**_patient(demo, imaging=True), "scanner": "scanner_Z"}, _ranges(demo, "combined"))
    assert [(f.field, f.kind) for f in ch.flags] == [("scanner", "batch")]


# ------------------------------------------------------------------ input errors


@pytest.mark.parametrize(
    ("change", "error", "pattern"),
    [
        ({"age": ""}, CohortError, r"field 'age' \(Age\) is empty"),
        ({"age": None}, CohortError, r"field 'age' \(Age\) is empty"),
        ({"age": "seventy"}, CohortError, r"field 'age' \(Age\) is 'seventy', which is not a number"),
        ({"age": "<40"}, CohortError, r"field 'age' \(Age\) is '<40', a value below a detection limit"),
        ({"sex": "NA"}, CohortError, r"field 'sex' \(Sex\) is empty"),
        ({"tumour_size": 3}, CohortError, r"does not know: 'tumour_size'"),
        ({"stag": "II"}, CohortError, r"'stag' \(did you mean 'stage'\?\)"),
    ],
)
def test_errors_name_the_field(demo, change, error, pattern):
    with pytest.raises(error, match=pattern):
        estimate_patient(demo[2]["clinical"], {**_patient(demo), **change}, H, training_ranges=_ranges(demo))


def test_absent_clinical_field_is_named(demo):
    row = _patient(demo)
    del row["stage"]
    with pytest.raises(CohortError, match=r"field 'stage' \(Stage\) is empty"):
        check_patient(row, _ranges(demo))


def test_imaging_errors_name_the_feature(demo):
    f = demo[1].feature_names[10]
    r = _ranges(demo, "combined")
    with pytest.raises(CohortError, match=rf"missing or empty for this patient \(first: '{f}'\)"):
        check_patient({**_patient(demo, imaging=True), f: ""}, r)
    with pytest.raises(CohortError, match=rf"not finite numbers: {f} = 'high'"):
        check_patient({**_patient(demo, imaging=True), f: "high"}, r)
    row = _patient(demo, imaging=True)
    del row["scanner"]
    with pytest.raises(CohortError, match="field 'scanner' .* is empty or absent"):
        check_patient(row, r)


def test_argument_errors(demo):
    m, row = demo[2]["clinical"], _patient(demo)
    with pytest.raises(SpecError, match="method 'jackknife'"):
        estimate_patient(m, row, H, method="jackknife")
    with pytest.raises(SpecError, match="conf_level"):
        estimate_patient(m, row, H, conf_level=95)
    with pytest.raises(SpecError, match="horizons must be positive"):
        estimate_patient(m, row, [0, 12])
    with pytest.raises(CohortError, match="dict or a one-row table"):
        estimate_patient(m, [1, 2, 3], H)


# ------------------------------------------------------------------ files


@pytest.mark.parametrize("suffix", [".csv", ".xlsx"])
def test_read_patient_file(demo, tmp_path, suffix):
    row = {**_patient(demo), "cea_ng_ml": "<0.5", "ecog": ""}
    df = pd.DataFrame([row])
    path = tmp_path / f"patient{suffix}"
    df.to_csv(path, index=False) if suffix == ".csv" else df.to_excel(path, index=False)
    got = read_patient_file(path)
    assert set(got) == set(row) and got["cea_ng_ml"] == "<0.5"
    a = estimate_patient(demo[2]["clinical"], got, H, training_ranges=_ranges(demo))
    b = estimate_patient(demo[2]["clinical"], row, H, training_ranges=_ranges(demo))
    np.testing.assert_allclose(a.survival, b.survival, rtol=0, atol=1e-12)


def test_read_patient_file_errors(demo, tmp_path):
    with pytest.raises(CohortError, match="patient file not found"):
        read_patient_file(tmp_path / "absent.csv")
    two = tmp_path / "two.csv"
    pd.DataFrame([_patient(demo)] * 2).to_csv(two, index=False)
    with pytest.raises(CohortError, match="has 2 data rows"):
        read_patient_file(two)
    odd = tmp_path / "patient.json"
    odd.write_text("{}")
    with pytest.raises(CohortError, match=r"must be \.csv, \.tsv or \.xlsx"):
        read_patient_file(odd)


# ------------------------------------------------------------------ alive at a follow-up visit


def test_conditional_survival_is_the_ratio_with_the_delta_interval_over_the_gap(demo):
    from workbench.competing.conditional import conditional_survival_cox

    _, cohort, models, _ = demo
    m = models["clinical"]
    est = estimate_patient(m, _patient(demo), H, training_ranges=_ranges(demo), alive_at=12.0)
    assert est.alive_at == 12.0 and [c.horizon for c in est.conditional] == [24.0, 36.0]
    s = m.predict_survival(cohort.take([3]), [12.0, 24.0, 36.0]).probs[0]
    # S(t | alive at 12) = S(t) / S(12) of the same model (Zabor et al. 2013)
    np.testing.assert_allclose([c.survival for c in est.conditional], s[1:] / s[0], rtol=0, atol=1e-12)
    ref = conditional_survival_cox(m.fit_, m._design(cohort.take([3])), [24.0, 36.0], 12.0)
    np.testing.assert_allclose([c.lower for c in est.conditional], ref.lower[0], rtol=0, atol=1e-12)
    np.testing.assert_allclose([c.upper for c in est.conditional], ref.upper[0], rtol=0, atol=1e-12)
    for c, h in zip(est.conditional, est.horizons[1:], strict=True):
        assert c.lower < c.survival < c.upper
        assert c.survival > h.survival  # having survived a year, the chance of reaching t is higher
    text = format_estimate(est)
    assert "Alive at 12 months: chance of being alive at" in text and "36 months:" in text


def test_conditional_survival_by_bootstrap_and_without_an_interval(demo):
    _, cohort, models, _ = demo
    m = models["clinical"]
    refits = refit_bootstrap(m, cohort, 20, random_state=5)
    est = estimate_patient(m, _patient(demo), H, training_ranges=_ranges(demo), method="bootstrap",
                           bootstrap_models=refits, alive_at=24.0)
    draws = np.array([r.predict_survival(cohort.take([3]), [24.0, 36.0]).probs[0] for r in refits])
    ratio = draws[:, 1] / draws[:, 0]
    assert est.conditional[0].lower == pytest.approx(np.percentile(ratio, 2.5), abs=1e-12)
    assert est.conditional[0].upper == pytest.approx(np.percentile(ratio, 97.5), abs=1e-12)
    forest = estimate_patient(models["forest"], _patient(demo, imaging=True), H,
                              training_ranges=_ranges(demo, "forest"), alive_at=12.0)
    f = models["forest"].predict_survival(cohort.take([3]), [12.0, 36.0]).probs[0]
    assert forest.conditional[-1].survival == pytest.approx(f[1] / f[0], abs=1e-12)
    assert np.isnan(forest.conditional[-1].lower)


@pytest.mark.parametrize("alive_at", [0.0, 36.0, 40.0, float("nan")])
def test_alive_at_must_lie_before_the_last_horizon(demo, alive_at):
    with pytest.raises(SpecError, match=r"known to be alive \(--alive-at\) must be after 0 and before the last horizon \(36 months\)"):
        estimate_patient(demo[2]["clinical"], _patient(demo), H, training_ranges=_ranges(demo), alive_at=alive_at)
