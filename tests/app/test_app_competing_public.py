"""The app's competing-risks section on a public dataset, off the demo's path.

scikit-survival's ``load_cgvhd`` (chronic graft-versus-host disease after transplant; 100
patients; Pintilie, Competing Risks: A Practical Perspective, Wiley 2006): status 1 the event,
relapse and death competing, age and its logarithm as the "imaging" table. Found by running it
through the app: the signature kept no feature but the section did not say so (the command line
did), the all-cause rows were called "death from any cause" although the events are not deaths,
and with every interval withheld for the cohort's size the caption blamed the replicates.
"""

from __future__ import annotations

import pytest
from apphelpers import APP_MAIN, assert_clean, page_texts
from public_data import cgvhd_study

from workbench.app import state
from workbench.competing.analysis import run_competing
from workbench.units import time_phrase

pytestmark = pytest.mark.slow  # one competing-risks analysis with 10 replicates (about 15 s)
REPS = 10


@pytest.fixture(scope="module")
def cgvhd(tmp_path_factory):
    return cgvhd_study(tmp_path_factory.mktemp("cgvhd_app"))

def test_section_names_the_empty_signature_the_outcome_and_why_no_interval(cgvhd):
    from streamlit.testing.v1 import AppTest

    at = AppTest.from_file(str(APP_MAIN), default_timeout=600).run()
    at.session_state[state.K_STUDY] = cgvhd
    at.switch_page("views/results.py").run()
    at.number_input(key="competing_replicates").set_value(REPS)
    at.button(key="competing_run").click().run()
    assert_clean(at)
    ref = run_competing(cgvhd, replicates=REPS)
    assert ref.arms[("cause", "combined")].n_selected == 0  # the case this test is about
    warnings = [w.value for w in at.warning]
    assert any("signature kept no imaging feature" in w and w[0].isupper() for w in warnings), warnings
    texts = " ".join(page_texts(at))
    frames = [d.value for d in at.dataframe]
    corrected = next(f for f in frames if "Brier 0.5 years" in f.columns)
    assert "first event of any cause" in set(corrected["Outcome"]) and "death" not in " ".join(corrected["Outcome"])
    want = ref.corrected[("cause", "clinical", "cause_specific")]["auc"]
    row = corrected[(corrected["Model"] == "Clinical") & (corrected["Fitted by"] == "cause-specific Cox")
                    & (corrected["Outcome"] == "cause of interest")].iloc[0]
    assert [row[f"AUC {time_phrase(t, 'years')}"] for t in ref.horizons] == [f"{x:.3f}" for x in want]
    # 100 patients: below every interval floor, and the caption says that, not "fewer than 10 replicates"
    assert "No intervals. Without an interval:" in texts and "this cohort has 100" in texts
    assert "fewer than 10 bootstrap replicates" not in texts
    assert "Research use only" in texts
