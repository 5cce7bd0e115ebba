"""``workbench competing-estimate`` and :func:`estimate_competing_patient` on a public dataset.

Data: scikit-survival's ``load_cgvhd`` as a clinical-only competing study (the
``cgvhd_study`` fixture: cause 1 = chronic GvHD, relapse and death competing). The point
estimates are checked against the study's own fitted arm (``run_competing``, the fit
``workbench competing`` reports); against lifelines in
tests/reference/test_competing_absolute_risk_reference.py.
"""

from __future__ import annotations

import numpy as np
import pytest

from workbench.cli import main
from workbench.cohort.summary import CAUTION
from workbench.competing.analysis import run_competing
from workbench.competing.fitting import fit_arm
from workbench.errors import CohortError, ModelError, SpecError
from workbench.estimate import patient_cohort
from workbench.estimate_competing import (
    competing_ranges,
    estimate_competing_patient,
    format_competing_estimate,
    risk_table,
)
from workbench.prepare import prepare_cohort
from workbench.study import study_from_dict

PATIENT = {"age": "40", "dx": "AML", "extent": "E"}


@pytest.fixture(scope="module")
def fitted(cgvhd_study):
    folder, doc, _ = cgvhd_study
    spec = study_from_dict(doc, base=folder)
    cohort = prepare_cohort(spec).cohort
    arm = fit_arm(cohort, spec, "cause", imaging=False, random_state=int(spec.seed))
    return spec, cohort, arm


@pytest.fixture(scope="module")
def study_file(cgvhd_study):
    import tomli_w

    folder, doc, _ = cgvhd_study
    path = folder / "study_estimate.toml"
    path.write_text(tomli_w.dumps(doc))
    return path


def test_estimate_equals_the_study_fit_and_adds_up(fitted):
    spec, cohort, arm = fitted
    est = estimate_competing_patient(arm, cohort, spec, PATIENT)
    study = run_competing(spec, replicates=0).arms[("cause", "clinical")]
    one = patient_cohort(PATIENT, competing_ranges(arm, cohort))[0]
    for method, got in (("fine_gray", est.fine_gray.risk[0]), ("cause_specific", est.cause_specific.of(1))):
        np.testing.assert_allclose(got, study.predict(one, spec.horizons, method).risks[0], rtol=0, atol=1e-12)
    cs = est.cause_specific
    np.testing.assert_allclose(cs.risk.sum(axis=0) + cs.event_free, 1.0, rtol=0, atol=1e-12)
    assert cs.causes == (1, 2) and est.cause_names == {1: "1", 2: "2, 3"}
    assert np.all((cs.lower < cs.risk) & (cs.risk < cs.upper))
    assert est.caution == CAUTION and not est.out_of_range
    table = risk_table(est)
    assert set(table["quantity"]) == {"risk of 1", "risk of 2, 3", "free of any event"}
    assert len(table) == 4 * len(spec.horizons)


def test_command_prints_both_routes_the_flags_and_the_caution(study_file, fitted, capsys):
    spec, cohort, arm = fitted
    assert main(["competing-estimate", str(study_file), "--value", "age=70", "--value", "dx=AML",
                 "--value", "extent=E"]) == 0
    out = capsys.readouterr().out
    assert "Fine-Gray model, risk of 1:" in out and "risk of 2, 3" in out and "free of any event" in out
    assert "age" in out and "above the training range" in out and "extrapolates" in out
    assert out.rstrip().endswith(f"Caution: {CAUTION}")
    est = estimate_competing_patient(arm, cohort, spec, {"age": "70", "dx": "AML", "extent": "E"})
    f = est.fine_gray
    assert f"by 0.45 years: {100 * f.risk[0, 0]:.1f}% (95% CI {100 * f.lower[0, 0]:.1f}% to " \
           f"{100 * f.upper[0, 0]:.1f}%)" in out
    assert format_competing_estimate(est) == out.rstrip("\n")


@pytest.mark.parametrize(("args", "message"), [
    (["--value", "age=40", "--value", "dx=AML"], "'extent'"),  # a predictor left out
    (["--value", "age=forty", "--value", "dx=AML", "--value", "extent=E"], "not a number"),
    (["--value", "age=40", "--value", "dx=AML", "--value", "extent=E", "--value", "sex=m"], "does not know"),
    (["--value", "age=40", "--value", "dx=XYZ", "--value", "extent=E"], "was not seen"),
    (["--value", "age=40", "--value", "dx=AML", "--value", "extent=E", "--signature-score", "0.3"],
     "--model combined"),
    (["--value", "age=40", "--model", "combined"], "no imaging table"),
    (["--value", "age=40", "--value", "dx=AML", "--value", "extent=E", "--conf-level", "95"], "conf_level"),
])
def test_bad_input_exits_with_a_message(study_file, capsys, args, message):
    assert main(["competing-estimate", str(study_file), *args]) == 2
    err = capsys.readouterr().err
    assert err.startswith("error:") and message in err, err


def test_python_errors(fitted):
    spec, cohort, arm = fitted
    with pytest.raises(SpecError, match="no imaging signature"):
        estimate_competing_patient(arm, cohort, spec, PATIENT, signature_score=0.1)
    with pytest.raises(SpecError, match="horizons"):
        estimate_competing_patient(arm, cohort, spec, PATIENT, horizons=[0, 1])
    with pytest.raises(CohortError, match="exactly one patient"):
        import pandas as pd

        estimate_competing_patient(arm, cohort, spec, pd.DataFrame([PATIENT, PATIENT]))
    with pytest.raises(ModelError, match="never saw"):
        estimate_competing_patient(arm, cohort, spec, {**PATIENT, "dx": "XYZ"})


def test_late_horizon_is_noted(fitted):
    spec, cohort, arm = fitted
    est = estimate_competing_patient(arm, cohort, spec, PATIENT, horizons=[0.5, 50.0])
    assert any("beyond the last training event" in n for n in est.notes)
