"""A whole study through the app under AppTest: Results, Signature, Nomogram, Patient and Export views.

The study is the demo study reduced to the clinical and the clinical + imaging
model with 3 bootstrap replicates, so that the module runs in well under a minute.
"""

from __future__ import annotations

import json
import subprocess
import sys
import time
from dataclasses import replace

import numpy as np
import pytest
from apphelpers import APP_MAIN, DEMO, REPO, assert_clean, page_texts, static_tables

from workbench.app import state
from workbench.study import read_study, write_study

REPLICATES = 3
pytestmark = pytest.mark.slow  # one study run in the app and one on the command line: about a minute


def _light_spec():
    spec = read_study(DEMO / "study.toml")
    # the interval rule the app uses for a run of fewer than 10 replicates (no interval is shown):
    # the command line then runs the same study
    return replace(spec, models=replace(spec.models, fit=("clinical", "combined")), external=None,
                   added_value=replace(spec.added_value, permutations=9),
                   validation=replace(spec.validation, interval="shifted-percentile"))


@pytest.fixture(scope="module")
def ran():
    from streamlit.testing.v1 import AppTest

    at = AppTest.from_file(str(APP_MAIN), default_timeout=600).run()
    at.session_state[state.K_STUDY] = _light_spec()
    at.switch_page("views/results.py").run()
    at.number_input(key="results_replicates").set_value(REPLICATES)
    at.number_input(key="results_workers").set_value(1)
    at.button(key="results_run").click().run()
    return at


@pytest.fixture(scope="module")
def cli_results(tmp_path_factory):
    """results.json of the command line for the same study file and seed."""
    tmp = tmp_path_factory.mktemp("cli")
    study = write_study(_light_spec(), tmp / "light.toml")
    out = tmp / "out"
    subprocess.run(
        [sys.executable, "-m", "workbench.cli", "run", str(study), "--replicates", str(REPLICATES),
         "--workers", "1", "--out", str(out), "--quiet", "--no-figures", "--no-report"],
        check=True, cwd=REPO, capture_output=True, timeout=600,
    )
    return json.loads((out / "results.json").read_text())


def _frame_with(at, *columns):
    """The first table on the page that has all these columns (data grid or static table)."""
    for d in [*(d.value for d in at.dataframe), *static_tables(at)]:
        if all(c in d.columns for c in columns):
            return d
    raise AssertionError(f"no table with columns {columns}")


def _cell(df, model_label: str, measure: str, column: str) -> str:
    row = df[(df["Model"] == model_label) & (df["Measure"] == measure)]
    assert len(row) == 1, (model_label, measure, df[["Model", "Measure"]].to_string())
    return str(row.iloc[0][column])


def test_results_page_runs_and_shows_harrell_c_of_the_command_line(ran, cli_results):
    assert_clean(ran)
    assert any("Finished in" in s.value for s in ran.success)
    wide = _frame_with(ran, "Measure", "Clinical Cox", "Clinical + imaging signature")
    with pytest.raises(AssertionError):  # apparent values and optimism only on demand
        _frame_with(ran, "Model", "Measure", "Validated", "Apparent")
    ran.toggle(key="results_details").set_value(True).run()
    assert_clean(ran)
    disc = _frame_with(ran, "Model", "Measure", "Validated", "Apparent")
    assert any("Reclassification (NRI, IDI)" in m.value for m in ran.markdown)
    # observed conditional survival by risk group, as results.json has it (3 groups x 3 horizon pairs)
    cond = _frame_with(ran, "Risk group", "Alive at", "Chance of being alive at", "Estimate (95% CI)")
    assert len(cond) == 3 * 3 and set(cond["Risk group"]) == {"low", "intermediate", "high"}
    ran.toggle(key="results_details").set_value(False).run()
    # Reference: the command line's results.json for the same study file and seed.
    for name, label in (("clinical", "Clinical Cox"), ("combined", "Clinical + imaging signature")):
        perf = cli_results["models"][name]["performance"]["harrell_c"]
        assert _cell(disc, label, "Harrell C", "Validated") == f"{perf['estimate']:.3f}"
        assert _cell(disc, label, "Harrell C", "Apparent") == f"{perf['apparent']:.3f}"
        shown = wide.loc[wide["Measure"] == "Harrell C", label].iloc[0]
        # With fewer than MIN_CI_REPLICATES replicates the page shows the estimate without an interval.
        assert shown == f"{perf['estimate']:.3f}"


def test_results_page_shows_the_comparison(ran, cli_results):
    texts = " ".join(page_texts(ran))
    assert "Clinical + imaging signature minus Clinical Cox" in texts
    diff = _frame_with(ran, "Measure", "Difference (validated)")
    ref = cli_results["comparison"]["combined"]["differences"]["harrell_c"]
    row = diff[diff["Measure"] == "Harrell C"].iloc[0]
    assert row["Difference (validated)"] == f"{ref['estimate']:.3f}"
    full = read_study(DEMO / "study.toml").validation.replicates
    assert "Quick mode" in texts and f"the {full} replicates set on the Design page" in texts


def test_results_tables_are_static_and_downloadable_with_the_same_cells(ran):
    import io
    import zipfile

    import pandas as pd

    from workbench.app.light_tables import tables_zip

    shown = static_tables(ran)
    assert len(shown) >= 4  # discrimination, calibration, overall accuracy, the comparison
    assert not any("Measure" in d.value.columns for d in ran.dataframe)  # no data grid left for them
    labels = [b.proto.label for b in ran.get("download_button")]
    assert "Download the tables shown (CSV files, zip)" in labels
    with zipfile.ZipFile(io.BytesIO(tables_zip({"Discrimination": shown[0]}))) as zf:
        back = pd.read_csv(zf.open("discrimination.csv"), dtype=str, keep_default_na=False)
    pd.testing.assert_frame_equal(back, shown[0].astype(str), check_dtype=False)


def test_signature_page_matches_the_fitted_signature(ran):
    ran.switch_page("views/signature.py").run()
    assert_clean(ran)
    result = ran.session_state[state.K_JOB].result
    sig = result.models["combined"].signature_
    steps = ran.dataframe[0].value
    # the demo's repeat table: the reproducibility filter (before any modelling) comes first
    removed = len(result.prepared.unreproducible)
    assert steps.iloc[0]["Step"].startswith("Reproducibility (ICC(3,1) >= 0.75")
    assert steps.iloc[0]["Dropped"] == removed > 0
    assert steps.iloc[0]["Features out"] == sig.steps_[0].n_in
    assert list(steps["Features out"])[1:] == [s.n_out for s in sig.steps_]
    # ... and the harmonisation checks of results.json
    h = result.harmonisation["development"]
    assert any(f"scanner classifier AUC {h['before']['classifier_auc']:.2f} -> {h['after']['classifier_auc']:.2f}"
               in c.value for c in ran.caption)
    selected = ran.dataframe[1].value
    assert list(selected["Feature"]) == list(sig.coef_.index)
    assert any("refits kept between" in m.value for m in ran.markdown)


def test_nomogram_page_draws_and_offers_downloads(ran):
    ran.switch_page("views/nomogram.py").run()
    assert_clean(ran)
    assert not ran.error
    labels = [b.label for b in ran.get("download_button")]
    for fmt in ("PNG", "SVG", "PDF"):
        assert f"Download {fmt}" in labels
    assert any("points tables" in x for x in labels)


def _first_patient(result) -> dict:
    """Every value of the cohort's first patient: clinical fields, imaging features and the scanner."""
    cohort = result.cohort
    record = {c: cohort.clinical.iloc[0][c] for c in cohort.clinical.columns if c != result.spec.data.batch}
    record = {k: (None if isinstance(v, float) and np.isnan(v) else v) for k, v in record.items()}
    record.update({f: float(v) for f, v in cohort.features.iloc[0].items()})
    record[result.spec.data.batch] = str(cohort.batch[0])
    return record


def _estimate_page(at, **overrides):
    """The Patient view with the first cohort patient read from a one-row patient file."""
    import pandas as pd

    at.switch_page("views/patient.py").run()
    result = at.session_state[state.K_JOB].result
    row = {result.spec.data.id: str(result.cohort.ids[0]), **_first_patient(result)}
    body = pd.DataFrame([row]).to_csv(index=False).encode()
    at.radio(key="patient_source").set_value("file").run()
    at.file_uploader(key="patient_file").set_value(("patient.csv", body, "text/csv"))
    at = at.run()
    for col, val in overrides.items():
        at.text_input(key=f"pt_combined_file_0_{col}").set_value(val)
    next(b for b in at.button if b.label == "Estimate").click().run()
    return at


def test_patient_estimate_matches_the_library(ran):
    from workbench.estimate import estimate_patient, ranges_from_model
    from workbench.report.bundle_training import summarise_training

    at = _estimate_page(ran)
    assert_clean(at)
    result = at.session_state[state.K_JOB].result
    model = result.models["combined"]
    cohort = result.cohort
    record = _first_patient(result)
    training = summarise_training(cohort, result.models, result.spec.horizons)
    ranges = ranges_from_model(model, training, name="combined", batch_column=result.spec.data.batch)
    keep = {c.column for c in ranges.clinical} | set(ranges.imaging_features) | {result.spec.data.batch}
    est = estimate_patient(model, {k: v for k, v in record.items() if k in keep}, result.spec.horizons,
                           training_ranges=ranges)
    shown = {m.label: m.value for m in at.metric}
    for hz in est.horizons:
        assert shown[f"Survival at {hz.horizon:g} months"] == f"{100 * hz.survival:.1f}%"
    assert "Research use only" in " ".join(i.value for i in at.info)  # the caution, once, above the view
    # alive at the first horizon (a follow-up visit): the chances of reaching the later ones
    first = float(result.spec.horizons[0])
    box = next(n for n in at.number_input if n.label.startswith("Known to be alive at"))
    box.set_value(first).run()
    assert_clean(at)
    cond = estimate_patient(model, {k: v for k, v in record.items() if k in keep}, result.spec.horizons,
                            training_ranges=ranges, alive_at=first).conditional
    table = _frame_with(at, "Horizon", "Chance, given alive now")
    assert list(table["Chance, given alive now"]) == [f"{100 * c.survival:.1f}%" for c in cond]
    assert len(cond) == len(result.spec.horizons) - 1


def test_patient_out_of_range_and_text_are_explained(ran):
    at = _estimate_page(ran, age="120")
    assert_clean(at)
    assert any("age" in w.value and "above the training range" in w.value for w in at.warning)
    at = _estimate_page(ran, age="old")
    assert_clean(at)
    assert any("'age'" in e.value and "not a number" in e.value for e in at.error)


def test_export_page_offers_results_and_bundle(ran, cli_results):
    ran.switch_page("views/export.py").run()
    assert_clean(ran)
    labels = [b.label for b in ran.get("download_button")]
    assert "Download results.json" in labels
    assert "Download the model bundle (zip)" in labels
    assert "Download the report (HTML)" in labels


@pytest.mark.slow
def test_cancel_stops_a_run_between_replicates():
    # Two workers: the engine then reports (and checks for cancelling) after each chunk of replicates.
    job = state.RunJob(("cancel-test", "x", 16, 2), _light_spec(), 16, 2).start()
    deadline = time.monotonic() + 300
    while job.running and job.done == 0 and time.monotonic() < deadline:
        job.wait(0.1)
    job.cancel()
    job.wait(300)
    assert not job.running
    assert job.cancelled and job.result is None and job.error is None
    assert 0 < job.done < job.total
