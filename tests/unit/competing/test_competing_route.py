"""The competing-risks route end to end: ``workbench competing`` on the demo and on a public dataset.

1. The demo competing study (invented data, demo_cohort/study_competing.toml) with 2
   bootstrap replicates through the command line: files, caution, provenance, counts
   against demo_cohort/truth.json, and the signature's added value. In the generating
   model (truth.json, ``competing``) imaging enters the hazard of cancer death only, not
   that of death from other causes, so the added value of the signature must be larger
   for cancer death than for all-cause death, where the other deaths dilute it.
2. scikit-survival's ``load_cgvhd`` (chronic graft-versus-host disease after transplant;
   Pintilie M. Competing Risks: A Practical Perspective. Wiley 2006), status 1 the event,
   2 (relapse) and 3 (death) competing, as a clinical table of its own: a clinical-only
   study (no imaging keys), so only the clinical model. Reference values: lifelines'
   AalenJohansenFitter for the incidence and lifelines' CoxPHFitter (competing events
   censored) for the cause-specific coefficients, fitted on the same data here.
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from workbench.cli import main
from workbench.cohort.summary import CAUTION
from workbench.competing.analysis import run_competing
from workbench.prepare import prepare_cohort
from workbench.study import read_study, study_from_dict

DEMO = Path(__file__).resolve().parents[3] / "demo_cohort"


@pytest.fixture(scope="module")
def demo_run(tmp_path_factory):
    out = tmp_path_factory.mktemp("competing") / "demo"
    assert main(["competing", str(DEMO / "study_competing.toml"), "--out", str(out), "--replicates", "2",
                 "--quiet"]) == 0
    return out, json.loads((out / "competing_results.json").read_text())


def _value(doc, target, model, metric, kind="corrected", method="cause_specific"):
    rows = [r for r in doc["results"] if (r["target"], r["model"], r["method"], r["metric"])
            == (target, model, method, metric)]
    return np.array([r[kind] for r in sorted(rows, key=lambda r: r["horizon"])], dtype=float)


def test_demo_writes_results_figures_and_provenance(demo_run, capsys):
    out, doc = demo_run
    assert doc["caution"] == CAUTION
    spec = read_study(DEMO / "study_competing.toml")
    assert doc["provenance"]["seed"] == spec.seed
    assert doc["provenance"]["data_hash"] == prepare_cohort(spec).cohort.source.data_hash
    counts = json.loads((DEMO / "truth.json").read_text())["competing"]["cohorts"]["training"]["counts"]
    assert doc["cohort"]["causes"] == {"censored": counts["alive"], "cancer": counts["cancer"],
                                       "other": counts["other"]}
    for stem in ("cumulative_incidence", "incidence_calibration", "incidence_nomogram", "incidence_decision_curve"):
        for width in ("single", "double"):
            assert (out / f"{stem}_{width}.png").stat().st_size > 1000
    for model in ("clinical", "combined"):  # the Fine-Gray nomograms' points tables (terms, then risk by total)
        assert (out / f"incidence_nomogram_points_{model}.csv").stat().st_size > 100
        assert (out / f"incidence_nomogram_points_{model}_risk.csv").read_text().startswith(
            "total_points,linear_predictor,risk_12,risk_24,risk_36")
    assert doc["validation"]["replicates"] == 2
    # the external hospital: the whole-cohort fits judged there (2 resamples: too few for intervals)
    ext = json.loads((DEMO / "truth.json").read_text())["competing"]["cohorts"]["external"]["counts"]
    assert doc["external"]["n"] == sum(ext.values())
    assert doc["external"]["causes"] == {"censored": ext["alive"], "cancer": ext["cancer"], "other": ext["other"]}
    auc = [r for r in doc["external"]["results"] if r["metric"] == "auc" and r["target"] == "cause"]
    assert {r["model"] for r in auc} == {"clinical", "combined", "combined_minus_clinical"}
    assert all(0.5 < r["estimate"] < 1 and r["lower"] is None for r in auc if r["model"] != "combined_minus_clinical")
    assert doc["provenance"]["external_data_hash"]
    # corrected = apparent - optimism, row by row
    for r in doc["results"]:
        if r["apparent"] is not None and r["optimism"] is not None:
            assert r["corrected"] == pytest.approx(r["apparent"] - r["optimism"], abs=2e-6)


def test_demo_signature_adds_more_for_cancer_death_than_for_all_cause_death(demo_run):
    _, doc = demo_run
    truth = json.loads((DEMO / "truth.json").read_text())["competing"]
    assert "none" in truth["cause_specific_hazards"]["other"]["imaging"]
    for kind in ("apparent", "corrected"):
        cancer = _value(doc, "cause", "combined_minus_clinical", "auc", kind)
        all_cause = _value(doc, "all_cause", "combined_minus_clinical", "auc", kind)
        assert np.all(cancer > 0) and np.all(cancer > all_cause), (kind, cancer, all_cause)
    # Fine-Gray tells the same story for the cause of interest
    assert np.all(_value(doc, "cause", "combined_minus_clinical", "auc", method="fine_gray") > 0)


# ------------------------------------------------------------------ public dataset


def test_clinical_only_public_dataset_runs_the_clinical_model(cgvhd_study, capsys):
    import tomli_w

    folder, doc, _ = cgvhd_study
    (folder / "study.toml").write_text(tomli_w.dumps(doc))
    out = folder / "out"
    assert main(["competing", str(folder / "study.toml"), "--out", str(out), "--replicates", "3", "--quiet"]) == 0
    res = json.loads((out / "competing_results.json").read_text())
    assert {r["model"] for r in res["results"]} == {"clinical"}
    assert res["cohort"]["causes"] == {"censored": 4, "1": 86, "2, 3": 10}  # load_cgvhd status counts
    printed = capsys.readouterr().out
    # the summary ends with the caution; the folder written is named after it, as in 'workbench run'
    summary, _, written = printed.partition("\nResults written to")
    assert summary.rstrip().endswith(f"Caution: {CAUTION}") and "competing_results.json" in written
    assert "event of interest (1) 86, competing (2, 3) 10, censored 4" in summary


def test_public_dataset_matches_reference_libraries(cgvhd_study):
    from lifelines import AalenJohansenFitter, CoxPHFitter

    folder, doc, clin = cgvhd_study
    result = run_competing(study_from_dict(doc, base=folder), replicates=0)
    cohort = result.cohort
    # Aalen-Johansen incidence of cause 1 at the horizons against lifelines; lifelines
    # separates tied times by a small random jitter (hence the tolerance of 0.01); the horizons
    # 0.45 and 0.65 lie at least 0.002 from every observed time, so the jitter cannot cross them
    ajf = AalenJohansenFitter(seed=1).fit(clin["years"], clin["status"].astype(int), event_of_interest=1)
    ref = ajf.cumulative_density_.iloc[:, 0]
    for t in result.horizons:
        j = np.searchsorted(result.incidence.times, t, side="right") - 1
        ours = result.incidence.incidence[result.incidence.row(1), j]
        theirs = float(ref[ref.index <= t].iloc[-1])
        assert ours == pytest.approx(theirs, abs=0.01), t
    # cause-specific Cox of cause 1: lifelines' Cox with relapse and death censored, same design (Efron ties),
    # its Newton steps run to precision 1e-12 (its default stops earlier on the flat likelihood of "extent")
    arm = result.arms[("cause", "clinical")]
    X = arm.transformer.transform(cohort).X
    frame = pd.DataFrame(X, columns=[f"x{j}" for j in range(X.shape[1])]).assign(
        T=cohort.time, E=(cohort.cause == 1).astype(int))
    ref_coef = CoxPHFitter().fit(frame, "T", "E", fit_options={"precision": 1e-12}).params_.to_numpy()
    np.testing.assert_allclose(arm.cause_specific.fit_for(1).coef, ref_coef, atol=1e-4)
    # without competing events in the all-cause target, the same arm is the ordinary Cox model
    all_arm = result.arms[("all_cause", "clinical")]
    frame["E"] = (cohort.cause > 0).astype(int)
    np.testing.assert_allclose(all_arm.cause_specific.fit_for(1).coef,
                               CoxPHFitter().fit(frame, "T", "E", fit_options={"precision": 1e-12}).params_.to_numpy(), atol=1e-4)


def test_replicates_give_the_same_numbers_on_one_or_two_workers(cgvhd_study):
    # the replicate plan is drawn before the replicates are sent out, so the worker
    # processes change the wall time, not the result (public data: load_cgvhd)
    folder, doc, _ = cgvhd_study
    spec = study_from_dict(doc, base=folder)
    one = run_competing(spec, replicates=4, workers=1)
    two = run_competing(spec, replicates=4, workers=2)
    assert one.provenance["workers"] == 1 and two.provenance["workers"] == 2
    assert one.failed == two.failed == 0
    for key, opt in one.optimism.items():
        for m, v in opt.items():
            np.testing.assert_array_equal(v, two.optimism[key][m], err_msg=str((key, m)))
    assert any(np.any(np.isfinite(v) & (v != 0)) for opt in one.optimism.values() for v in opt.values())


def test_validation_counts_each_targets_own_events(cgvhd_study):
    # the event floor of the intervals (estimates.INTERVAL_MIN_EVENTS) counts the target's own
    # events: load_cgvhd has 86 of status 1 and 10 of status 2 or 3 (its status counts)
    from workbench.competing.analysis import validate_competing

    folder, doc, _ = cgvhd_study
    spec = study_from_dict(doc, base=folder)
    v = validate_competing(prepare_cohort(spec).cohort, spec, replicates=0)
    assert v.events == {"cause": 86, "all_cause": 96}
