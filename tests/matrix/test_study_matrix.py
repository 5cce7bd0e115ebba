"""The study matrix: every optional path of a study runs end to end on public data.

Each case takes a public dataset (see conftest.py), writes the two tables and a
study file, and runs the command line as a user would: ``run`` (results.json,
CSV tables, figures, bundle, HTML report), then ``apply`` of the bundle to the
same tables and ``estimate`` for the first patient with every model in the
bundle. The cases cover the optional study keys in combination: volume feature
or not, batch or not, centre or not, external cohort or not, clinical-only
studies, each model alone, each validation method including "none", screening
on and off, each predictor kind and transform, and both missing-value policies.

The cohorts are cut to about 200 patients and the replicates to 2-3 so that the
whole matrix stays within a few minutes on two cores; the point is that every
path finishes and writes what it should, not the numbers (those are checked
against reference libraries elsewhere). The report is rendered with jinja2's
StrictUndefined, so a template that reads a key absent for some study fails here.
"""

from __future__ import annotations

import fnmatch
import json

import numpy as np
import pandas as pd
import pytest
import tomli_w

from workbench.cli import main

N_ROWS = 200


def _cut(feats: pd.DataFrame, clin: pd.DataFrame, n: int = N_ROWS):
    """The first ``n`` patients of each table (the shipped order)."""
    return feats.iloc[:n].reset_index(drop=True), clin.iloc[:n].reset_index(drop=True)


def _doc(name, settings, **over) -> dict:
    """A study file as a dict, from the example script's settings, with overrides."""
    doc = {
        "study": {"name": name, "horizons": settings["horizons"], "seed": 7},
        "data": {
            "features": "features.csv",
            "clinical": "clinical.csv",
            "id": "patient_id",
            "time": settings.get("time", "time"),
            "event": settings.get("event", "event"),
            "time_unit": settings["time_unit"],
        },
        "predictor": [dict(p) for p in settings["predictors"]],
        "imaging": {},
        "models": {"fit": ["clinical", "combined"], "forest": {"trees": 20, "min_leaf": 10}},
        # the smallest settings that still run every step: a two-stage interval from 10 outer
        # samples (the study default is 100 x 10 refits per model) and a 9-permutation
        # added-value test in 3 folds (the default is 199 x 5 signature refits)
        "validation": {"method": "bootstrap", "replicates": 2, "forest_replicates": 2, "backend": "serial",
                       "outer_replicates": 10, "inner_replicates": 1},
        "added_value": {"permutations": 9, "folds": 3},
    }
    for section, values in over.items():
        if section == "predictor":
            doc["predictor"] = values
        elif values is None:
            doc.pop(section, None)
        else:
            doc.setdefault(section, {}).update(values)
    return doc


def _run_case(tmp_path, feats, clin, doc, *, external=None, cli=False, monkeypatch=None):
    """Write the tables and the study, run it, and check what every face wrote.

    With ``cli`` the run goes through ``workbench run`` with every output (figure files
    in three formats, the HTML report). Otherwise the same steps are called in-process
    and the figures are drawn but not encoded (encoding is most of the time and is
    covered by the ``cli`` case): the report's figure encoder is replaced by a stub
    that closes the figure, and the figure set is drawn without saving.
    """
    if feats is not None:
        feats.to_csv(tmp_path / "features.csv", index=False)
    else:
        doc["data"].pop("features", None)
    clin.to_csv(tmp_path / "clinical.csv", index=False)
    if external is not None:
        external[1].to_csv(tmp_path / "ext_clinical.csv", index=False)
        doc["external"] = {"clinical": "ext_clinical.csv"}
        if external[0] is not None:
            external[0].to_csv(tmp_path / "ext_features.csv", index=False)
            doc["external"]["features"] = "ext_features.csv"
    study = tmp_path / "study.toml"
    study.write_text(tomli_w.dumps(doc))
    out = tmp_path / "results"
    if cli:
        assert main(["run", str(study), "--out", str(out), "--quiet", "--no-pdf"]) == 0
        html = (out / "report.html").read_text()
        assert any((out / "figures").glob("*.png")), "no figure written"
    else:
        import matplotlib.pyplot as plt

        from workbench.report import html as report_html
        from workbench.report import report_figures
        from workbench.report.bundle import save_bundle
        from workbench.report.bundle_training import summarise_training
        from workbench.report.digest import format_results
        from workbench.report.figureset import study_figures
        from workbench.report.results import write_results
        from workbench.study import read_study
        from workbench.workflow import run_study

        result = run_study(read_study(study))
        write_results(result, out)
        assert "Research use only" in format_results(result)
        figs = study_figures(result)
        assert figs, "no figure drawn"
        for f in figs.values():
            plt.close(f)
        monkeypatch.setattr(report_figures, "_embed", lambda fig: plt.close(fig) or "data:,")
        html = report_html.render_report(result)
        training = summarise_training(result.cohort, result.models, result.spec.horizons)
        save_bundle(result.models, result.spec, training, out / "bundle", overwrite=True)
    data = json.loads((out / "results.json").read_text())
    fit = list(doc.get("models", {}).get("fit", ["clinical"]))
    # a named volume feature adds the clinical + tumour volume comparison model (not in the bundle)
    auto = ["clinical_volume"] if feats is not None and doc.get("imaging", {}).get("volume_feature") else []
    assert list(data["models"]) == fit + auto
    assert "Research use only" in html
    assert "could not be drawn" not in html, "a report figure failed"
    assert (out / "bundle").is_dir()

    # apply the bundle to the same tables (only the pipeline is checked, not the numbers)
    args = ["apply", str(out / "bundle"), "--clinical", str(tmp_path / "clinical.csv"),
            "--out", str(tmp_path / "applied"), "--replicates", "2"]
    if feats is not None:
        args += ["--features", str(tmp_path / "features.csv")]
    assert main(args) == 0
    pred = pd.read_csv(tmp_path / "applied" / "predictions.csv")
    assert len(pred) > 0

    # one patient through every model of the bundle
    # the fields a model of the study can use: its predictors, the imaging pool, the batch
    keep = [p["column"] for p in doc["predictor"]] + [c for c in (doc["data"].get("batch"),) if c]
    row = clin.iloc[[0]]
    if feats is not None:
        row = row.merge(feats.iloc[[0]], on="patient_id")
        excl = doc.get("imaging", {}).get("exclude", [])
        keep += [c for c in feats.columns[1:] if not any(fnmatch.fnmatch(c, x) for x in excl)]
    row = row[[c for c in dict.fromkeys(keep) if c in row]].dropna(axis=1)
    row.to_csv(tmp_path / "patient.csv", index=False)
    for model in fit:
        assert main(["estimate", str(out / "bundle"), "--model", model, "--patient", str(tmp_path / "patient.csv")]) == 0
    return data, html


@pytest.fixture(scope="module")
def gbsg2(public_tables):
    feats, clin, settings = public_tables.load_public("gbsg2")
    return (*_cut(feats, clin), settings)


@pytest.fixture(scope="module")
def veterans(public_tables):
    feats, clin, settings = public_tables.load_public("veterans")
    return feats, clin, settings


@pytest.fixture(scope="module")
def rossi(public_tables):
    feats, clin, settings = public_tables.load_public("rossi")
    return (*_cut(feats, clin), settings)


# ------------------------------------------------------------------ cases


@pytest.mark.slow  # the one case through `workbench run` with every figure file: about 45 s
def test_no_volume_no_batch_no_centre_bootstrap(tmp_path, monkeypatch, gbsg2):
    feats, clin, s = gbsg2
    data, html = _run_case(tmp_path, feats, clin, _doc("gbsg2 plain", s), cli=True)
    assert data["models"]["combined"]["volume_correlation"] is None
    assert "not applicable" in html
    # one naming scheme: term (the study's predictor) and design_column(s), no tuple text in CSVs
    clinical = data["models"]["clinical"]
    assert {r["term"] for r in clinical["coefficients"]} == {p["column"] for p in s["predictors"]}
    assert {r["design_column"] for r in clinical["coefficients"]} == set(clinical["baseline_survival"]["x_mean"])
    assert {r["term"] for r in clinical["hazard_ratios"]} <= {p["column"] for p in s["predictors"]}
    assert all(isinstance(r["design_columns"], list) for r in clinical["hazard_ratios"])
    assert {r["design_column"] for r in clinical["proportional_hazards"]} >= {"GLOBAL", "age"}
    log = (tmp_path / "results" / "run.log").read_text()
    assert "harmonisation: none, because the study names no batch column" in log
    csv_text = (tmp_path / "results" / "hazard_ratios_clinical.csv").read_text()
    assert "('" not in csv_text and csv_text.startswith("term,")


def test_volume_screen_cv_every_kind(tmp_path, monkeypatch, gbsg2):
    feats, clin, s = gbsg2
    preds = [
        {"column": "age", "kind": "spline", "knots": 3, "label": "Age"},
        {"column": "horTh", "kind": "categorical", "reference": "no"},
        {"column": "menostat", "kind": "categorical", "levels": ["Pre", "Post"]},
        {"column": "tgrade", "kind": "ordinal", "levels": ["I", "II", "III"]},
    ]
    doc = _doc("gbsg2 cv", s, predictor=preds, imaging={"volume_feature": "tumour_volume_cc", "reduce": {"screen": True}},
               validation={"method": "cv", "folds": 3, "repeats": 1, "uno_tau": 1000}, figures={"min_at_risk": 15})
    data, html = _run_case(tmp_path, feats, clin, doc, monkeypatch=monkeypatch)
    assert data["models"]["combined"]["volume_correlation"]["feature"] == "tumour_volume_cc"
    assert "truncated at 1000 days" in html
    # the clinical + tumour volume model went through the same cross-validation
    assert data["validation"]["n_replicates"]["clinical_volume"] == data["validation"]["n_replicates"]["combined"]
    assert data["volume_comparison"]["internal"]["model"] == "combined"
    assert data["volume_comparison"]["internal"]["baseline"] == "clinical_volume"
    assert "Clinical + imaging signature against Clinical + tumour volume" in html
    assert "fewer than 15 patients remain at risk" in " ".join(html.split())


def test_log_transform_and_missing_values(tmp_path, monkeypatch, veterans):
    feats, clin, s = veterans
    feats, clin = feats.copy(), clin.copy()
    feats["karnofsky_raw"] = feats["karnofsky"]
    clin = clin.merge(feats[["patient_id", "karnofsky_raw"]], on="patient_id")
    feats = feats.drop(columns="karnofsky_raw")
    # blank every 11th shipped value of two predictors: one imputed, one complete-case
    clin.loc[::11, "karnofsky_raw"] = np.nan
    clin.loc[5::13, "age"] = np.nan
    feats.loc[3::17, "months_from_diagnosis"] = np.nan  # imaging values: training medians inside each fit
    preds = [
        {"column": "age", "kind": "linear", "missing": "complete_case"},
        {"column": "karnofsky_raw", "kind": "linear", "transform": "log2", "missing": "impute"},
        {"column": "celltype", "kind": "categorical", "reference": "squamous", "missing": "impute"},
    ]
    doc = _doc("veterans missing", s, predictor=preds, imaging={"exclude": ["*karnofsky*"]})
    data, _ = _run_case(tmp_path, feats, clin, doc, monkeypatch=monkeypatch)
    assert data["cohort"]["n_incomplete_dropped"] == int(clin["age"].isna().sum())
    assert any(w["category"] == "DataQualityWarning" and "missing imaging values" in w["message"]
               for w in data["warnings"])


def test_centre_codes_by_centre_and_batch(tmp_path, monkeypatch, gbsg2):
    feats, clin, s = gbsg2
    feats, clin = feats.copy(), clin.copy()
    # grade as the "centre" (codes 1, 2, 10 written as whole numbers), menopausal status as the "scanner"
    clin["centre"] = clin["tgrade"].map({"I": 1, "II": 2, "III": 10})
    feats["scanner"] = clin["menostat"].map({"Pre": "S1", "Post": "S2"})
    preds = [p for p in s["predictors"] if p["column"] != "tgrade"]
    doc = _doc("gbsg2 centres", s, predictor=preds, data={"centre": "centre", "batch": "scanner"},
               imaging={"harmonise": {"method": "combat"}}, validation={"method": "by_centre"})
    data, html = _run_case(tmp_path, feats, clin, doc, monkeypatch=monkeypatch)
    centres = data["cohort"]["summary"]["centres"]
    assert list(centres) == ["1", "2", "10"], centres
    assert "1.0" not in json.dumps(centres)


def test_external_cohort_and_validation_none(tmp_path, monkeypatch, public_tables):
    feats, clin, s = public_tables.load_public("gbsg2")
    dev = _cut(feats, clin, 200)
    ext = (feats.iloc[400:560].reset_index(drop=True), clin.iloc[400:560].reset_index(drop=True))
    doc = _doc("gbsg2 external", s, validation={"method": "none"})
    data, html = _run_case(tmp_path, *dev, doc, external=ext, monkeypatch=monkeypatch)
    assert data["validation"]["method"] == "none"
    c = data["models"]["clinical"]["performance"]["harrell_c"]
    assert c["apparent"] is not None
    assert "Apparent performance only" in html and "apparent, not validated" in html
    assert "no bootstrap replicates were run" not in html and "0 replicates" not in html
    assert data["validation"]["notes"][-1].startswith("No internal validation (method 'none')")
    assert data["external"] is not None


def test_clinical_only_study_with_external_cohort(tmp_path, monkeypatch, public_tables):
    _, clin, s = public_tables.load_public("rossi")
    doc = _doc("rossi clinical only", s)
    doc.pop("imaging")
    doc.pop("models")  # a clinical-only study fits the clinical model by default
    ext = (None, clin.iloc[250:].reset_index(drop=True))
    data, html = _run_case(tmp_path, None, clin.iloc[:250].reset_index(drop=True), doc, external=ext,
                           monkeypatch=monkeypatch)
    assert list(data["models"]) == ["clinical"]
    assert data["external"]["n"] == len(clin) - 250
    assert "a clinical-only study" in html


@pytest.mark.parametrize("model", ["combined", "penalised_all", "forest"])
def test_each_model_alone(tmp_path, monkeypatch, rossi, model):
    feats, clin, s = rossi
    doc = _doc(f"rossi {model}", s, models={"fit": [model], "baseline": model})
    data, _ = _run_case(tmp_path, feats, clin, doc, monkeypatch=monkeypatch)
    assert list(data["models"]) == [model]


def test_empty_signature(tmp_path, monkeypatch, rossi):
    """Screening at a tiny false discovery rate keeps no feature: the combined model equals the clinical one."""
    feats, clin, s = rossi
    doc = _doc("rossi empty", s, imaging={"reduce": {"screen": True, "screen_fdr": 1e-9}},
               models={"fit": ["clinical", "combined", "penalised_all"]})
    data, html = _run_case(tmp_path, feats, clin, doc, monkeypatch=monkeypatch)
    comb = data["models"]["combined"]
    assert comb["signature"]["selected"] == []
    assert comb["equal_to"] == "clinical"
    assert comb["volume_correlation"] is None
    assert any(w["category"] == "EmptySignatureWarning" for w in data["warnings"])
    assert "equal to the clinical model" in html
    assert "the two models are the same model" in html
    assert data["models"]["combined"]["label"].endswith("(equal to the clinical model)")
