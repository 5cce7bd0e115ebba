"""run_study and the results folder, on a small cohort from the demo generator (invented data)."""

from __future__ import annotations

import json

import pytest

from workbench.cli import main
from workbench.report.results import results_dict, write_results
from workbench.study import read_study
from workbench.workflow import RunCancelled, run_study

pytestmark = pytest.mark.slow  # runs the small study (session fixture) and the command line on it


@pytest.fixture(scope="module")
def study_file(small_study_file):
    return small_study_file


@pytest.fixture(scope="module")
def result(small_study_result):
    return small_study_result


def test_result_holds_every_block(result, tmp_path):
    path = write_results(result, tmp_path / "out")
    data = json.loads(path.read_text())
    assert data["format"] == "workbench-results/1"
    assert "Research use only" in data["caution"]
    assert set(data["models"]) == {"clinical", "combined", "clinical_volume"}  # volume_feature is named
    perf = data["models"]["combined"]["performance"]
    for key in ("harrell_c", "uno_c", "ibs", "auc@12", "auc@24", "brier@12", "ici@24", "e50@12", "e90@12", "cal_slope@24"):
        assert key in perf, key
    c = perf["harrell_c"]
    assert c["estimate"] == pytest.approx(c["apparent"] - c["optimism"])
    assert c["n_used"] == 3
    assert data["comparison"]["combined"]["likelihood_ratio_test"]["nested"] is True
    assert data["models"]["clinical"]["baseline_survival"]["survival"][0] > data["models"]["clinical"]["baseline_survival"]["survival"][1]
    assert data["provenance"]["data_hash"] == result.cohort.source.data_hash
    assert data["provenance"]["versions"]["numpy"]
    for f in ("performance.csv", "comparison.csv", "hazard_ratios_clinical.csv", "run.log", "study.toml"):
        assert (tmp_path / "out" / f).exists(), f
    assert "HB-" not in path.read_text(), "patient identifiers must not be written"
    # the copied study file runs from the results folder and gives the same study
    assert read_study(tmp_path / "out" / "study.toml") == result.spec


def test_same_seed_same_numbers(study_file, result):
    again = results_dict(run_study(read_study(study_file)))
    first = results_dict(result)
    for d in (again, first):
        d["provenance"].pop("started")
        d["provenance"].pop("seconds")
    assert again == first


def test_overrides_are_recorded(study_file):
    r = run_study(read_study(study_file), replicates=2)
    assert r.provenance["overrides"]["replicates"] == 2
    assert r.validation.n_replicates["clinical"] == 2


def test_cancel_stops_the_run(study_file):
    with pytest.raises(RunCancelled, match="stopped during internal validation"):
        run_study(read_study(study_file), cancel=lambda: True)


def test_cli_run_and_bad_study(study_file, tmp_path, capsys):
    # the figure files are checked on run_folder below; here the report and its PDF are written
    assert main(["run", str(study_file), "--out", str(tmp_path / "r"), "--replicates", "2", "--quiet",
                 "--no-figures"]) == 0
    out = capsys.readouterr().out
    assert "Harrell C" in out and "Caution:" in out
    assert (tmp_path / "r" / "results.json").exists()
    assert (tmp_path / "r" / "report.html").exists()
    bad = tmp_path / "bad.toml"
    bad.write_text(study_file.read_text().replace("replicates = 3", "replicate = 3"))
    assert main(["run", str(bad)]) == 2
    assert "Did you mean 'replicates'" in capsys.readouterr().err


@pytest.fixture(scope="module")
def run_folder(study_file, tmp_path_factory):
    out = tmp_path_factory.mktemp("run")
    assert main(["run", str(study_file), "--out", str(out), "--quiet", "--no-report"]) == 0
    return out


def test_run_writes_figures_and_bundle(run_folder):
    assert (run_folder / "bundle" / "manifest.json").exists()
    for name in ("nomogram", "km_risk_groups", "calibration", "decision_curve", "td_auc"):
        for ext in ("png", "svg", "pdf"):
            assert (run_folder / "figures" / f"{name}.{ext}").exists(), (name, ext)


def test_bundle_applied_to_training_cohort_reproduces_apparent_metrics(run_folder, study_file, tmp_path, capsys):
    d = study_file.parent
    code = main(["apply", str(run_folder / "bundle"), "--features", str(d / "imaging.csv"),
                 "--clinical", str(d / "clinical.csv"), "--out", str(tmp_path / "ext"), "--replicates", "5"])
    assert code == 0
    ext = json.loads((tmp_path / "ext" / "external_results.json").read_text())
    res = json.loads((run_folder / "results.json").read_text())
    for model in ("clinical", "combined"):
        for metric in ("harrell_c", "uno_c", "auc@12", "brier@24", "ibs"):
            assert ext["performance"][model][metric]["estimate"] == pytest.approx(
                res["models"][model]["performance"][metric]["apparent"], abs=1e-10
            ), (model, metric)
    assert "Caution:" in capsys.readouterr().out


def test_estimate_from_the_command_line(run_folder, capsys):
    code = main(["estimate", str(run_folder / "bundle"), "--model", "clinical",
                 "--value", "age=120", "--value", "stage=III", "--value", "ecog=1"])
    out = capsys.readouterr().out
    assert code == 0
    assert "Survival at 12 months" in out and "95% CI" in out
    assert "age" in out and "outside" in out.lower()
    assert "Caution:" in out
    assert main(["estimate", str(run_folder / "bundle"), "--value", "age"]) == 2
    assert "FIELD=VALUE" in capsys.readouterr().err


def test_estimate_patient_file_with_unused_columns_says_how_to_skip_them(run_folder, tmp_path, capsys):
    patient = tmp_path / "one.csv"
    patient.write_text("age,stage,ecog,ward_note\n64,III,1,seen\n")
    bundle = str(run_folder / "bundle")
    code = main(["estimate", bundle, "--model", "clinical", "--patient", str(patient)])
    err = capsys.readouterr().err
    assert code == 2
    assert "'ward_note'" in err and "--ignore ward_note" in err
    assert "ignore=." not in err and "Traceback" not in err
    code = main(["estimate", bundle, "--model", "clinical", "--patient", str(patient), "--ignore", "ward_note"])
    out = capsys.readouterr().out
    assert code == 0 and "Survival at 12 months" in out and "Caution:" in out


def test_recalibrated_models_saved_as_a_bundle_predict_as_recalibrated(run_folder, study_file, tmp_path, capsys):
    # Reference: validation.recalibrate.recalibrate, itself checked against lifelines
    # (tests/reference/test_recalibrate_reference.py).
    import numpy as np

    from workbench.external import read_new_cohort
    from workbench.report.bundle import load_bundle
    from workbench.validation.recalibrate import recalibrate

    d = study_file.parent
    out = tmp_path / "ext"
    assert main(["apply", str(run_folder / "bundle"), "--features", str(d / "imaging.csv"),
                 "--clinical", str(d / "clinical.csv"), "--out", str(out), "--replicates", "2",
                 "--save-recalibrated", "slope"]) == 0
    assert "saved as a bundle" in capsys.readouterr().out
    original = load_bundle(run_folder / "bundle")
    rec = load_bundle(out / "bundle_recalibrated_slope")
    assert set(rec.models) == {"clinical", "combined"}
    assert rec.manifest["extra"]["recalibrated"]["method"] == "slope"
    cohort = read_new_cohort(original, d / "imaging.csv", d / "clinical.csv").cohort
    for name in ("clinical", "combined"):
        want = recalibrate(original.models[name].predict_risk(cohort), cohort.y, [12, 24], "slope")
        got = rec.models[name].predict_survival(cohort, [12, 24])
        np.testing.assert_allclose(got.probs, want.curves.probs, rtol=0, atol=1e-10)
        assert rec.models[name].slope_ == pytest.approx(want.slope, abs=1e-12)


def test_added_value_test_replaces_the_in_sample_likelihood_ratio_p_value(result):
    data = results_dict(result)
    av = data["added_value"]["combined"]
    k = result.spec.added_value.permutations
    assert av["permutations"] == k and av["baseline"] == "clinical"
    # (1 + b) / (1 + K) with b in 0..K, and its Monte Carlo SE
    b = round(av["p_value"] * (k + 1)) - 1
    assert 0 <= b <= k and av["p_value"] == pytest.approx((1 + b) / (1 + k))
    assert av["mc_se"] == pytest.approx((av["p_value"] * (1 - av["p_value"]) / k) ** 0.5)
    assert av["observed"] == pytest.approx(av["model_cvpl"] - av["baseline_cvpl"])
    assert data["comparison"]["combined"]["likelihood_ratio_test"]["p_value"] is None
    assert data["models"]["combined"]["details"]["lr_p_value"] is None
    assert data["models"]["combined"]["details"]["signature_coefficient"] == "prevalidated"


def test_apply_reads_the_named_sheet_of_a_workbook(run_folder, study_file, tmp_path, capsys):
    import pandas as pd

    d = study_file.parent
    book = tmp_path / "clinical.xlsx"
    clin = pd.read_csv(d / "clinical.csv", dtype=str)
    with pd.ExcelWriter(book) as xw:  # the patients on one sheet, a data dictionary on another
        clin.to_excel(xw, sheet_name="patients", index=False)
        pd.DataFrame({"column": list(clin.columns)}).to_excel(xw, sheet_name="dictionary", index=False)
    args = ["apply", str(run_folder / "bundle"), "--features", str(d / "imaging.csv"),
            "--clinical", str(book), "--replicates", "0"]
    assert main([*args, "--out", str(tmp_path / "a")]) == 2
    err = capsys.readouterr().err
    assert "clinical.xlsx: the workbook has 2 sheets holding data" in err and "apply" in err
    assert main([*args, "--clinical-sheet", "patients", "--out", str(tmp_path / "b")]) == 0
    capsys.readouterr()
    # the same patients as from the CSV
    from_csv = tmp_path / "c"
    assert main(["apply", str(run_folder / "bundle"), "--features", str(d / "imaging.csv"),
                 "--clinical", str(d / "clinical.csv"), "--replicates", "0", "--out", str(from_csv)]) == 0
    a = pd.read_csv(tmp_path / "b" / "predictions.csv")
    b = pd.read_csv(from_csv / "predictions.csv")
    pd.testing.assert_frame_equal(a, b)
