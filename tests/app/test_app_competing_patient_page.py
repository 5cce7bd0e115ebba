"""The Patient page of a study with competing events: what its survival estimate is, and its inputs.

The small demo competing study (invented data, ``small_competing_study`` in tests/conftest.py: 150
patients, one worker) run on the Results page with 1 bootstrap replicate. The Patient page's
"Survival at ..." comes from the ordinary Cox model, which censors competing events (the
cause-specific view ``workbench run`` takes, with a warning); the page must say so and point to
the competing-risks section for each cause's risk. The "known to be alive at" input is written
like the study's horizons (whole months here), not "0.00".
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from apphelpers import APP_MAIN, assert_clean, page_texts

from workbench.app import state
from workbench.study import read_study


@pytest.fixture(scope="module")
def estimated(small_competing_study):
    from streamlit.testing.v1 import AppTest

    path, _ = small_competing_study
    at = AppTest.from_file(str(APP_MAIN), default_timeout=600).run()
    at.session_state[state.K_STUDY] = read_study(path)
    at.switch_page("views/results.py").run()
    at.number_input(key="results_replicates").set_value(1)
    at.number_input(key="results_workers").set_value(1)
    at.button(key="results_run").click().run()
    at.switch_page("views/patient.py").run()
    result = at.session_state[state.K_JOB].result
    cohort, d = result.cohort, result.spec.data
    row = {d.id: str(cohort.ids[0]), **{c: cohort.clinical.iloc[0][c] for c in cohort.clinical.columns}}
    row = {k: (None if isinstance(v, float) and np.isnan(v) else v) for k, v in row.items()}
    row.update({f: float(v) for f, v in cohort.features.iloc[0].items()})
    row[d.batch] = str(cohort.batch[0])
    at.radio(key="patient_source").set_value("file").run()
    at.file_uploader(key="patient_file").set_value(("patient.csv", pd.DataFrame([row]).to_csv(index=False).encode(),
                                                    "text/csv"))
    at = at.run()
    next(b for b in at.button if b.label == "Estimate").click().run()
    assert_clean(at)
    return at


def test_survival_estimate_says_it_censors_competing_events_and_points_to_the_section(estimated):
    at = estimated
    assert any(m.label.startswith("Survival at") for m in at.metric)
    notes = [i.value for i in at.info if "competing events" in i.value]
    assert len(notes) == 1, [i.value for i in at.info]
    assert "(other)" in notes[0] and "censoring" in notes[0]
    assert "Competing risks section of the Results page" in notes[0]
    assert "Research use only" in " ".join(i.value for i in at.info)  # the caution stays above the view


def test_alive_at_input_is_written_like_the_horizons(estimated):
    at = estimated
    box = next(n for n in at.number_input if n.label.startswith("Known to be alive at"))
    assert box.proto.format == "%d"  # was "%0.2f": "0.00" months
    assert box.value == 0 and isinstance(box.value, int)
    first = int(at.session_state[state.K_JOB].result.spec.horizons[0])
    box.set_value(first).run()
    assert_clean(at)
    assert any("Alive at" in m.value for m in at.markdown)  # the conditional estimate was made


def test_alive_at_input_for_horizons_in_days_and_in_fractions():
    from workbench.app.views.patient import alive_input

    days = alive_input([365.0, 730.0, 1095.0])
    assert days["format"] == "%d" and days["value"] == 0 and days["step"] == 182
    years = alive_input([0.5, 1.0, 2.0])
    assert years["format"] == "%.1f" and years["max_value"] == 2.0


def test_one_replicate_reads_in_the_singular(estimated):
    # the provenance line above the patient view once read "(finished at hh:mm, 1 replicates)"
    texts = " ".join(page_texts(estimated))
    assert "1 replicate)" in texts and "1 replicates" not in texts
