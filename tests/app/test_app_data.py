"""Data view under AppTest: the demo cohort's key numbers, and bad input shown as plain messages."""

from __future__ import annotations

import numpy as np
import pandas as pd
from apphelpers import DEMO, assert_clean, page_texts, static_tables


def _metric(at, label: str) -> str:
    for m in at.metric:
        if m.label == label:
            return str(m.value)
    raise AssertionError(f"no metric {label!r}; metrics: {[m.label for m in at.metric]}")


def test_demo_numbers_match_raw_table_and_lifelines(new_app):
    at = new_app().run()
    assert_clean(at)
    clin = pd.read_csv(DEMO / "clinical.csv")
    # Reference: direct count on the raw CSV (pandas), independent of the workbench reader.
    assert _metric(at, "Patients") == str(len(clin))
    assert _metric(at, "Events") == str(int((clin["status"] == "dead").sum()))
    assert _metric(at, "Censored") == str(int((clin["status"] == "alive").sum()))
    # Reference: median follow-up by reverse Kaplan-Meier (Schemper & Smith 1996) computed with
    # lifelines' KaplanMeierFitter on the censoring indicator; the page shows one decimal.
    from lifelines import KaplanMeierFitter

    km = KaplanMeierFitter().fit(clin["os_months"], event_observed=(clin["status"] == "alive"))
    assert _metric(at, "Median follow-up (months)") == f"{km.median_survival_time_:.1f}"
    km_os = KaplanMeierFitter().fit(clin["os_months"], event_observed=(clin["status"] == "dead"))
    assert _metric(at, "Median survival (months)") == f"{km_os.median_survival_time_:.1f}"


def test_demo_numbers_match_library_summary(new_app):
    from workbench.cohort.summary import summarise_cohort
    from workbench.study import read_study

    spec = read_study(DEMO / "study.toml")
    from workbench.cohort.io import read_cohort

    s = summarise_cohort(read_cohort(spec.data.features, spec.data.clinical, spec.data.column_map()), spec.horizons)
    at = new_app().run()
    assert _metric(at, "Events") == str(s.n_events)
    assert _metric(at, "Median follow-up (months)") == f"{s.median_followup:.1f}"
    horizon_table = static_tables(at)[0]  # the first table of the summary, as the page shows it
    assert list(horizon_table["Survival"]) == [f"{100 * h.survival:.1f}%" for h in s.horizons]
    assert list(horizon_table["At risk"]) == [str(h.at_risk) for h in s.horizons]
    texts = " ".join(page_texts(at))
    assert f"this cohort ({s.sample_size.n_available})" in texts
    assert "Research use only" in texts  # the caution on the page


def test_wrong_time_column_is_a_plain_message(new_app):
    at = new_app().run()
    at.selectbox(key="map_time").set_value("sex").run()
    assert_clean(at)
    errors = " ".join(e.value for e in at.error)
    assert "'sex'" in errors and "clinical.csv" in errors
    assert not at.metric  # no summary of an unusable cohort


def test_event_column_without_codes_is_a_plain_message(new_app):
    at = new_app().run()
    at.selectbox(key="map_event").set_value("hospital").run()
    assert_clean(at)
    assert at.error, "choosing the hospital column as the event must be refused"
    assert "'hospital'" in " ".join(e.value for e in at.error)


def _upload(at, features: tuple, clinical: tuple):
    at.radio(key="data_source").set_value("upload").run()
    at.file_uploader(key="upload_features").set_value(features)
    at.file_uploader(key="upload_clinical").set_value(clinical)
    at = at.run()
    # the column roles are suggestions until the user confirms them
    if any(getattr(b, "key", None) == "map_confirm" for b in at.button):
        at = at.button(key="map_confirm").click().run()
    return at


def test_malformed_upload_is_a_plain_message(new_app):
    at = new_app().run()
    clin = (DEMO / "clinical.csv").read_bytes()
    rng = np.random.default_rng(7)
    garbage = bytes(rng.integers(0, 256, 4000, dtype=np.uint8))
    at = _upload(at, ("features.xlsx", garbage, "application/octet-stream"), ("clinical.csv", clin, "text/csv"))
    assert_clean(at)
    msg = " ".join(e.value for e in at.error)
    assert "features.xlsx" in msg and "cannot be read" in msg
    assert "workbench-upload" not in msg  # the private folder is not shown


def test_text_in_time_column_names_column_and_row(new_app):
    at = new_app().run()
    clin = pd.read_csv(DEMO / "clinical.csv", dtype=str)
    clin.loc[4, "os_months"] = "about a year"
    at = _upload(at, ("imaging.csv", (DEMO / "imaging.csv").read_bytes(), "text/csv"),
                 ("my_clinical.csv", clin.to_csv(index=False).encode(), "text/csv"))
    assert_clean(at)
    msg = " ".join(e.value for e in at.error)
    assert "os_months" in msg and "my_clinical.csv" in msg
    assert "6" in msg  # spreadsheet row of the bad cell: header is row 1, so data row index 4 is row 6


def test_valid_upload_reads_like_the_demo(new_app):
    at = new_app().run()
    at = _upload(at, ("imaging.csv", (DEMO / "imaging.csv").read_bytes(), "text/csv"),
                 ("clinical.csv", (DEMO / "clinical.csv").read_bytes(), "text/csv"))
    assert_clean(at)
    assert not at.error
    assert _metric(at, "Patients") == "500"
