"""Competing risks in the app: the Data page's competing codes and the Results page's section.

The demo competing study (invented data, demo_cohort/study_competing.toml) with 2 bootstrap
replicates; the app's tables must show the numbers of the library function the command
line runs (workbench.competing.analysis.run_competing, same study and seed).
"""

from __future__ import annotations

import numpy as np
import pytest
from apphelpers import APP_MAIN, DEMO, assert_clean, page_texts

from workbench.app import state
from workbench.study import read_study
from workbench.units import time_phrase

pytestmark = pytest.mark.slow  # two competing-risks analyses of the demo (about a minute)
REPS = 2


def test_data_page_offers_the_values_left_as_competing_codes(new_app):
    at = new_app().run()
    at.selectbox(key="map_time").set_value("followup_cr_months").run()
    at.selectbox(key="map_event").set_value("death_cause").run()
    at.multiselect(key="map_event_codes").set_value(["cancer"]).run()
    at.multiselect(key="map_censor_codes").set_value(["alive"]).run()
    assert list(at.multiselect(key="map_competing_codes").options) == ["other"]
    at.multiselect(key="map_competing_codes").set_value(["other"]).run()
    assert_clean(at)
    assert at.session_state[state.K_DATA].competing_codes == ("other",)


@pytest.fixture(scope="module")
def competing_page():
    from streamlit.testing.v1 import AppTest

    at = AppTest.from_file(str(APP_MAIN), default_timeout=600).run()
    at.session_state[state.K_STUDY] = read_study(DEMO / "study_competing.toml")
    at.switch_page("views/results.py").run()
    at.number_input(key="competing_replicates").set_value(REPS)
    at.button(key="competing_run").click().run()
    return at


def test_results_page_runs_the_competing_analysis_with_the_library_numbers(competing_page):
    from workbench.competing.analysis import run_competing

    at = competing_page
    assert_clean(at)
    texts = " ".join(page_texts(at))
    assert "Competing risks" in [h.value for h in at.header]
    ref = run_competing(read_study(DEMO / "study_competing.toml"), replicates=REPS)
    frames = [d.value for d in at.dataframe]
    corrected = next(f for f in frames if "Brier 12 months" in f.columns)
    diff = corrected[(corrected["Model"] == "Difference (signature added)")
                     & (corrected["Outcome"] == "cause of interest") & (corrected["Fitted by"] == "cause-specific Cox")]
    want = ref.corrected[("cause", "combined_minus_clinical", "cause_specific")]["auc"]
    assert [diff.iloc[0][f"AUC {time_phrase(t, 'months')}"] for t in ref.horizons] == [f"{x:.3f}" for x in want]
    external = next(f for f in frames if "AUC 12 months" in f.columns and "Brier 12 months" not in f.columns)
    assert len(external) == len(ref.external)  # one row per target, model and method
    c = ref.cohort
    assert f"{int(np.sum(c.cause == 1))} events of interest, {int(np.sum(c.cause == 2))} competing" in texts
    assert "Research use only" in texts
    from workbench.app.views.competing import FIGURE_TITLES

    shown = [m.value.strip("*") for m in at.markdown]
    assert all(t in shown for t in FIGURE_TITLES.values()), shown  # the four figures, each under its title
    assert sum(type(e).__name__ == "Image" for e in at.main) >= len(FIGURE_TITLES)


def test_changing_the_replicates_marks_the_analysis_out_of_date(competing_page):
    at = competing_page
    at.number_input(key="competing_replicates").set_value(REPS + 1).run()
    assert any("changed since this analysis ran" in w.value for w in at.warning)


def test_patient_absolute_risks_match_the_library(competing_page):
    # the clinical model's estimate for one patient (values of the first demo patient) must show
    # the numbers of workbench.estimate_competing.estimate_competing_patient on the same fitted arm
    from workbench.app.views.competing import KEY
    from workbench.app.views.competing_patient import estimate_frame
    from workbench.estimate_competing import estimate_competing_patient

    at = competing_page
    at.radio(key="cpe_model").set_value("clinical").run()
    values = {"age": "67", "sex": "male", "ecog": "1", "stage": "III", "cea_ng_ml": "4.2"}
    for col, v in values.items():
        box = [w for w in at.selectbox if w.key == f"cpe_clinical_{col}"]
        if box:
            box[0].set_value(v)
        else:
            at.text_input(key=f"cpe_clinical_{col}").input(v)
    at.button[[b.label for b in at.button].index("Estimate the absolute risks")].click().run()
    assert_clean(at)
    spec = read_study(DEMO / "study_competing.toml")
    held = at.session_state[KEY][1]  # the app's own analysis, fitted as run_competing fits it
    est = estimate_competing_patient(held.arms[("cause", "clinical")], held.cohort, spec, values)
    shown = next(d.value for d in at.dataframe if "Probability" in d.value.columns)
    pd_ref = estimate_frame(est)
    assert shown.astype(str).values.tolist() == pd_ref.astype(str).values.tolist()
    assert any("Research use only" in i.value for i in at.info)
