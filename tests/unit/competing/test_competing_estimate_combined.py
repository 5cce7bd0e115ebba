"""The clinical + signature model in ``competing-estimate``: imaging values or a signature score.

The demo competing study (invented data, demo_cohort/study_competing.toml) cut down to the
24 shape features (``morph_*``) so that the signature, with its cross-fitted scores, fits in
seconds; no external cohort.
"""

from __future__ import annotations

import tomllib
from pathlib import Path

import numpy as np
import pytest

from workbench.cli import main
from workbench.cohort.summary import CAUTION
from workbench.competing.fitting import fit_arm
from workbench.errors import CohortError, ModelError
from workbench.estimate import patient_cohort
from workbench.estimate_competing import (
    SIGNATURE_LIMITS_WITHHELD,
    arm_training_design,
    competing_ranges,
    estimate_competing_patient,
)
from workbench.prepare import prepare_cohort
from workbench.study import read_study

DEMO = Path(__file__).resolve().parents[3] / "demo_cohort"
CLINICAL = ("age", "sex", "ecog", "stage", "cea_ng_ml")


@pytest.fixture(scope="module")
def small(tmp_path_factory):
    import tomli_w

    doc = tomllib.loads((DEMO / "study_competing.toml").read_text())
    doc.pop("external", None)
    doc["imaging"]["include"] = ["morph_*"]
    doc["data"]["features"] = str(DEMO / "imaging.csv")
    doc["data"]["clinical"] = str(DEMO / "clinical.csv")
    path = tmp_path_factory.mktemp("small") / "study.toml"
    path.write_text(tomli_w.dumps(doc))
    spec = read_study(path)
    cohort = prepare_cohort(spec).cohort
    arm = fit_arm(cohort, spec, "cause", imaging=True, random_state=int(spec.seed))
    assert arm.n_selected > 0
    row = {c: cohort.clinical.iloc[3][c] for c in CLINICAL}
    imaging = {f: cohort.features.iloc[3][f] for f in cohort.features.columns}
    X = arm_training_design(arm, cohort, spec, random_state=int(spec.seed))
    return path, spec, cohort, arm, row, {**imaging, "scanner": cohort.batch[3]}, X


def test_imaging_values_and_their_score_give_the_same_estimate(small):
    _, spec, cohort, arm, row, imaging, X = small
    a = estimate_competing_patient(arm, cohort, spec, {**row, **imaging}, training_design=X)
    b = estimate_competing_patient(arm, cohort, spec, row, signature_score=a.signature_score, training_design=X)
    assert a.model == b.model == "combined"
    for x, y in ((a.fine_gray, b.fine_gray), (a.cause_specific, b.cause_specific)):
        np.testing.assert_allclose(x.risk, y.risk, rtol=0, atol=1e-12)
        np.testing.assert_allclose(x.upper, y.upper, rtol=0, atol=1e-12)
    # the point estimate is the arm's own prediction (the fit 'workbench competing' reports)
    one = patient_cohort({**row, **imaging}, competing_ranges(arm, cohort, batch_column="scanner"))[0]
    np.testing.assert_allclose(a.fine_gray.risk[0], arm.predict(one, spec.horizons, "fine_gray").risks[0],
                               rtol=0, atol=1e-12)
    assert any("signature as fixed" in n for n in a.notes)
    # limits withheld (bench_competing_patient.py --pipeline measured them too narrow), estimate kept
    for r in (a.fine_gray, a.cause_specific):
        assert np.all(np.isnan(r.lower)) and np.all(np.isnan(r.upper)) and np.all(np.isfinite(r.risk))
    assert np.all(np.isnan(a.cause_specific.event_free_lower)) and SIGNATURE_LIMITS_WITHHELD in a.notes


def test_training_design_is_the_one_the_arm_was_fitted_on(small):
    # the limits need the design the regressions saw: with prevalidated coefficients its last
    # column holds the cross-fitted scores, recomputed here with the arm's seed
    from workbench.competing.fitting import target_outcome
    from workbench.competing.regression import fit_cause_specific
    _, spec, cohort, arm, _, _, X = small
    assert spec.models.combined.coefficient == "prevalidated"
    refit = fit_cause_specific(X, target_outcome(cohort, "cause"), min_events_per_parameter=0)
    for a, b in zip(refit.fits, arm.cause_specific.fits, strict=True):
        np.testing.assert_allclose(a.coef, b.coef, rtol=0, atol=1e-12)


def test_imaging_outside_training_and_scores_outside_are_flagged(small):
    _, spec, cohort, arm, row, imaging, X = small
    far = {**imaging, "morph_volume_cc": 50 * float(cohort.features["morph_volume_cc"].max())}
    est = estimate_competing_patient(arm, cohort, spec, {**row, **far}, training_design=X)
    assert est.checks.imaging_outside >= 1 and est.out_of_range
    est = estimate_competing_patient(arm, cohort, spec, row, signature_score=5.0, training_design=X)
    assert any(f.field == "signature score" and "extrapolates" in f.message for f in est.checks.flags)
    with pytest.raises(ModelError, match="linear predictor"):
        estimate_competing_patient(arm, cohort, spec, row, signature_score=1e4, training_design=X)
    missing = {k: v for k, v in imaging.items() if k != "morph_volume_cc"}
    with pytest.raises(CohortError, match="imaging feature"):
        estimate_competing_patient(arm, cohort, spec, {**row, **missing}, training_design=X)


def test_command_with_a_signature_score(small, capsys):
    path, _, _, _, row, _, _ = small
    args = [a for k, v in row.items() for a in ("--value", f"{k}={v}")]
    assert main(["competing-estimate", str(path), "--model", "combined", "--signature-score", "0.2", *args]) == 0
    out = capsys.readouterr().out
    assert "combined model" in out and "Signature score: 0.2" in out
    assert "(no limits)" in out and "CI" not in out and "nan" not in out
    assert out.rstrip().endswith(f"Caution: {CAUTION}")
