"""Refit-bootstrap limits of a patient's absolute risks: the functions, the command line and its JSON.

Data: the demo competing study (invented data) cut down so that 50 refits of the whole arm take
a few seconds (``small_competing_study``, tests/conftest.py). The interval forms are
checked against numpy's percentiles and the normal quantile of the standard library
(statistics.NormalDist); coverage is measured in bench/bench_competing_patient.py.
"""

from __future__ import annotations

import json
from pathlib import Path
from statistics import NormalDist

import numpy as np
import pandas as pd
import pytest

from workbench.cli import main
from workbench.cohort.summary import CAUTION
from workbench.competing.fitting import fit_arm
from workbench.competing.refit_limits import (
    MIN_REFITS,
    REFIT_FORM,
    RefitBootstrap,
    _draw,
    _plan,
    refit_arms,
    refit_limits,
    refit_withheld,
    replicate_risks,
    with_refit_limits,
)
from workbench.errors import SpecError
from workbench.estimate import patient_cohort
from workbench.estimate_competing import competing_ranges, estimate_competing_patient
from workbench.prepare import prepare_cohort
from workbench.study import read_study

DEMO = Path(__file__).resolve().parents[3] / "demo_cohort"
CLINICAL = ("age", "sex", "ecog", "stage", "cea_ng_ml")


@pytest.fixture(scope="module")
def small(small_competing_study):
    return small_competing_study


def test_command_for_several_patients_and_json(small, capsys):
    path, tmp = small
    out = tmp / "est.json"
    assert main(["competing-estimate", str(path), "--model", "combined", "--patient", str(tmp / "two.csv"),
                 "--refits", str(MIN_REFITS), "--workers", "1", "--json", str(out)]) == 0
    text = capsys.readouterr().out
    assert "Patient 1 of 2" in text and "Patient 2 of 2" in text and text.rstrip().endswith(f"Caution: {CAUTION}")
    got = json.loads(out.read_text())
    assert len(got["patients"]) == 2 and got["seed"] == read_study(path).seed
    assert got["patients"][0]["risks"][0]["estimate"] != got["patients"][1]["risks"][0]["estimate"]
    for p in got["patients"]:
        assert p["model"] == "combined" and p["caution"] == CAUTION
        # one set of refits for both patients, the method named
        assert got["refits"]["replicates"] == MIN_REFITS
        assert p["limits_method"] == "refit bootstrap"
        assert any("bootstrap refitting the whole model" in n for n in p["notes"])
        assert all(r["lower"] <= r["estimate"] <= r["upper"] for r in p["risks"])


def test_refits_make_the_limits_of_the_library_call(small):
    path, tmp = small
    spec = read_study(path)
    cohort = prepare_cohort(spec).cohort
    arm = fit_arm(cohort, spec, "cause", imaging=True, random_state=int(spec.seed))
    rb = refit_arms(cohort, spec, imaging=True, replicates=MIN_REFITS, workers=1)
    assert len(rb.arms) + rb.failed == MIN_REFITS and rb.ok
    patient = pd.read_csv(tmp / "two.csv", dtype=str, keep_default_na=False).iloc[1].to_dict()
    est = estimate_competing_patient(arm, cohort, spec, patient, refits=rb)
    one = patient_cohort(patient, competing_ranges(arm, cohort, batch_column="scanner"))[0]
    draws = replicate_risks(rb, one, spec.horizons)
    cs, fg = with_refit_limits(est.cause_specific, est.fine_gray, draws)
    lo, hi, se = refit_limits(est.fine_gray.risk, draws.fine_gray[:, None, 0], form=REFIT_FORM)
    np.testing.assert_array_equal(fg.lower, lo) and np.testing.assert_array_equal(fg.upper, hi)
    np.testing.assert_array_equal(fg.se, se)
    assert np.all((cs.lower <= cs.risk) & (cs.risk <= cs.upper))
    assert np.all((cs.event_free_lower <= cs.event_free) & (cs.event_free <= cs.event_free_upper))
    assert est.limits_method == "refit bootstrap"
    np.testing.assert_array_equal(est.fine_gray.lower, lo)
    # a signature score cannot stand in for the imaging values of the refits
    scored = estimate_competing_patient(arm, cohort, spec, {c: patient[c] for c in CLINICAL},
                                        signature_score=est.signature_score, refits=rb)
    assert np.all(np.isnan(scored.fine_gray.lower)) and scored.limits_method == "none"
    assert refit_withheld(rb, from_score=True) in scored.notes


@pytest.mark.parametrize(("args", "message"), [
    (["--model", "combined", "--refits", "10"], "at least 50 refits"),
    (["--model", "combined", "--refits", "-1"], "--refits -1"),
    (["--model", "clinical", "--refits", "50"], "--refits is for --model combined"),
    (["--model", "combined", "--refits", "50", "--signature-score", "0.2"], "not --signature-score"),
    (["--model", "combined", "--json", "est.txt"], "ending in .json"),
    (["--model", "combined", "--workers", "0"], "--workers 0"),
])
def test_bad_refit_options_exit_with_a_message(small, capsys, args, message):
    path, _ = small
    assert main(["competing-estimate", str(path), "--value", "age=60", *args]) == 2
    err = capsys.readouterr().err
    assert err.startswith("error:") and message in err, err


def test_interval_forms_against_numpy_and_the_normal_quantile():
    rng = np.random.default_rng(4)
    draws = rng.uniform(0.1, 0.5, size=(400, 2, 3))
    est = np.full((2, 3), 0.3)
    lo, hi, se = refit_limits(est, draws, form="percentile")
    np.testing.assert_allclose(lo, np.percentile(draws, 2.5, axis=0))
    np.testing.assert_allclose(hi, np.percentile(draws, 97.5, axis=0))
    np.testing.assert_allclose(se, draws.std(axis=0, ddof=1))
    lo, hi, _ = refit_limits(est, draws, form="cloglog", conf_level=0.9)
    z = NormalDist().inv_cdf(0.95)
    s = np.log(-np.log(1 - draws)).std(axis=0, ddof=1)
    c = np.log(-np.log(0.7))
    np.testing.assert_allclose(lo, 1 - np.exp(-np.exp(c - z * s)))
    np.testing.assert_allclose(hi, 1 - np.exp(-np.exp(c + z * s)))
    # an event-free probability: the same scale on S itself, so its limits mirror those of 1 - S
    lo_s, hi_s, _ = refit_limits(1 - est, 1 - draws, form="cloglog", conf_level=0.9, survival=True)
    np.testing.assert_allclose(lo_s, 1 - hi) and np.testing.assert_allclose(hi_s, 1 - lo)
    with pytest.raises(SpecError, match="unknown interval form"):
        refit_limits(est, draws, form="basic")
    with pytest.raises(SpecError, match="at least 2 replicates"):
        refit_limits(est, draws[:, 0])


def test_draws_resample_patients_with_all_their_rows():
    ids = np.array(["a", "a", "b", "c", "c", "c"])
    rows = _draw(ids, np.random.default_rng(1))
    for pid in np.unique(ids[rows]):  # a drawn patient comes with all its rows, a whole number of times
        assert np.sum(ids[rows] == pid) % np.sum(ids == pid) == 0
    a, b = _plan(np.arange(30), 7, 5), _plan(np.arange(30), 7, 8)
    for (i, s), (j, t) in zip(a, b[:5], strict=True):  # replicate b does not depend on how many are asked
        assert s == t and np.array_equal(i, j)


def test_refits_asked_wrongly(small):
    path, _ = small
    spec = read_study(path)
    cohort = prepare_cohort(spec).cohort
    with pytest.raises(SpecError, match="at least 50 replicates"):
        refit_arms(cohort, spec, imaging=True, replicates=20)
    arm = fit_arm(cohort, spec, "cause", imaging=False, random_state=1)
    fake = RefitBootstrap((), 50, 50, 0, True, 1, 0.0)
    with pytest.raises(SpecError, match="clinical model's limits come from influence functions"):
        estimate_competing_patient(arm, cohort, spec, {c: cohort.clinical.iloc[0][c] for c in CLINICAL}, refits=fake)
    assert "only 0 of 50 refits succeeded" in refit_withheld(fake)
    assert "need the patient's imaging values" in refit_withheld(fake, from_score=True)


def test_arm_with_a_signature_empty_in_every_fold_is_the_clinical_arm(small, monkeypatch):
    # The ordinary combined model once failed on the Rossi data (lifelines load_rossi) when the
    # signature kept a feature on all rows and none in any pre-validation fold (a constant
    # cross-fitted score); a refit of this arm meets the same case in some resamples.
    import warnings

    from workbench.competing import fitting
    from workbench.errors import EmptySignatureWarning

    path, _ = small
    spec = read_study(path)
    cohort = prepare_cohort(spec).cohort
    real = fitting._signature_fit

    def all_rows_only(rows, spec_, y_cause, protect, random_state):
        sig, med = real(rows, spec_, y_cause, protect, random_state)
        if rows.n < cohort.n:  # a pre-validation fold: as if its signature kept nothing
            sig.selected_features_ = ()
        return sig, med

    monkeypatch.setattr(fitting, "_signature_fit", all_rows_only)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        assert real(cohort, spec, fitting.target_outcome(cohort, "cause")["cause"], None, 5)[0].selected_features_
    with pytest.warns(EmptySignatureWarning, match="none in any pre-validation fold"):
        arm = fit_arm(cohort, spec, "cause", imaging=True, random_state=5)
    clin = fit_arm(cohort, spec, "cause", imaging=False, random_state=5)
    assert arm.n_selected == 0
    times = (12.0, 24.0)
    for how in ("cause_specific", "fine_gray"):
        np.testing.assert_allclose(arm.predict(cohort, times, how).risks, clin.predict(cohort, times, how).risks,
                                   atol=1e-10)


def test_bad_patient_values_stop_the_command_before_any_refit(small, capsys, monkeypatch):
    # A patient file with a field the model does not know once cost all the refits (minutes with
    # the default 200) before its error was shown.
    from workbench.competing import refit_limits

    path, tmp = small
    bad = pd.read_csv(tmp / "two.csv").assign(unknown_field=1)
    bad.to_csv(tmp / "bad.csv", index=False)

    def no_refits(*a, **k):
        raise AssertionError("refits started before the patient's values were checked")

    monkeypatch.setattr(refit_limits, "refit_arms", no_refits)
    assert main(["competing-estimate", str(path), "--model", "combined", "--patient", str(tmp / "bad.csv"),
                 "--refits", str(MIN_REFITS), "--workers", "1"]) == 2
    assert "unknown_field" in capsys.readouterr().err


def test_command_line_refit_defaults_are_the_library_ones():
    # cli_competing keeps copies so that building the parser imports nothing heavy; they must not drift
    from workbench import cli_competing
    from workbench.competing import refit_limits

    assert (cli_competing.DEFAULT_REFITS, cli_competing.MIN_REFITS) == (refit_limits.DEFAULT_REFITS, MIN_REFITS)
