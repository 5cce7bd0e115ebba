"""The competing-risks section in headless Chromium: the analysis, then a patient from a file with refit limits.

The demo competing study cut to 150 patients (invented data, ``small_competing_study`` in
tests/conftest.py): its two tables are chosen on the Data page and its study file loaded on the
Design page (the file's column roles then apply to those tables); the Results page's
competing-risks section runs its bootstrap (2 replicates), and the clinical + signature model's
patient estimate reads two patients from a file and runs 50 refits of the whole model in the
background. Waits are on page state (see test_app_browser.py); screenshots go to
WORKBENCH_SCREENSHOTS (docs/screenshots when the docs are rendered).
"""

from __future__ import annotations

from pathlib import Path

import pytest
import test_app_browser as demo_browser
from test_app_browser import (
    RUN_TIMEOUT_MS,
    _act,
    _goto,
    _main,
    _no_traceback,
    _settle,
    _shot,
    _upload,
)

# the app and the browser page of the demo walk-through, started afresh for this module
app_url = demo_browser.app_url
page = demo_browser.page

pytestmark = pytest.mark.slow


def test_competing_section_runs(page, small_competing_study):
    study, folder = small_competing_study
    page.get_by_text("Cohort summary").wait_for()  # the first view is up (the demo's Data page)
    _settle(page)
    page.get_by_text("My own tables").click()
    page.get_by_text("Upload the clinical table", exact=False).wait_for()
    _upload(page, "Imaging features table", Path(folder) / "imaging.csv")
    _upload(page, "Clinical table", Path(folder) / "clinical.csv")
    page.get_by_role("button", name="Use these column roles").click()
    page.get_by_text("Cohort summary").wait_for()
    _settle(page)
    _goto(page, "Design")
    _upload(page, "Load an existing study file", study)
    page.get_by_text(f"Loaded {study.name}").first.wait_for()
    _goto(page, "Results")
    page.get_by_role("heading", name="Competing risks").wait_for()
    reps = page.get_by_role("spinbutton", name="Bootstrap replicates for the competing-risks analysis")
    reps.fill("2")
    _act(page, lambda: reps.press("Enter"))
    page.get_by_role("button", name="Run the competing-risks analysis").click()
    page.get_by_text("Validated performance").wait_for(timeout=RUN_TIMEOUT_MS)
    page.get_by_text("Fine-Gray nomogram: risk of the cause of interest").wait_for()
    _settle(page)
    text = _main(page).inner_text()
    assert "150 patients" in text and "Research use only" in text, text[:3000]
    _no_traceback(page)
    _shot(page, "8_competing")


def test_patient_from_a_file_with_refit_limits(page, small_competing_study):
    _, folder = small_competing_study
    model = page.locator("[data-testid='stRadio']").filter(has_text="Model").first
    _act(page, lambda: model.get_by_text("Clinical + signature", exact=True).click())
    page.get_by_text("Read the patients' values from a file").first.wait_for()
    box = page.locator("[data-testid='stFileUploader']").filter(has_text="Patient file").first
    _settle(page)
    box.locator("input[type='file']").set_input_files(str(Path(folder) / "two.csv"))
    count = page.get_by_role("spinbutton", name="Refits of the whole model for the limits")
    count.wait_for()
    count.fill("50")
    _act(page, lambda: count.press("Enter"))
    page.get_by_role("button", name="Check the patients' values and start 50 refits").click()
    page.get_by_text("Estimated risks").first.wait_for(timeout=RUN_TIMEOUT_MS)
    _settle(page)
    text = _main(page).inner_text()
    assert "refit" in text.lower() and "Research use only" in text
    shown = text.split("Estimated risks", 1)[1]
    assert "%" in shown and "(no limits)" not in shown  # every horizon of the file route has its limits
    _no_traceback(page)
    _shot(page, "8b_competing_patient")
