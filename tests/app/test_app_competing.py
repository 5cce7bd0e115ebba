"""Competing risks in the app: the Data page's competing codes and the Results page's section.

The demo competing study (invented data, demo_cohort/study_competing.toml) with 2 bootstrap
replicates; the app's tables must show the numbers of the library function the command
line runs (workbench.competing.analysis.run_competing, same study and seed).
"""

from __future__ import annotations

import numpy as np
import pytest
from conftest import APP_MAIN, DEMO, assert_clean, page_texts

from workbench.app import state
from workbench.study import read_study

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
    corrected = next(f for f in frames if "Brier 12" in f.columns)
    diff = corrected[(corrected["Model"] == "Difference (signature added)")
                     & (corrected["Outcome"] == "cause of interest") & (corrected["Fitted by"] == "cause-specific Cox")]
    want = ref.corrected[("cause", "combined_minus_clinical", "cause_specific")]["auc"]
    assert [diff.iloc[0][f"AUC {t:g}"] for t in ref.horizons] == [f"{x:.3f}" for x in want]
    external = next(f for f in frames if "AUC 12" in f.columns and "Brier 12" not in f.columns)
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
