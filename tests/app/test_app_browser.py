"""End to end in headless Chromium: the app served by ``streamlit run`` on a free localhost port.

Goes through Data -> Design -> Results -> Signature -> Nomogram -> Patient -> Export on the demo
cohort, asserts on what the page shows, and saves a screenshot of every view (to docs/screenshots/
when WORKBENCH_SCREENSHOTS=docs/screenshots is set).
The browser is Debian's chromium (tests/app/install_browser.sh installs it and the driver).

Every wait is on page state, never on a fixed time, so the tests pass on a busy machine: a
counter in the page counts script runs (the ``data-test-script-state`` attribute Streamlit puts
on the app root), and an action that makes the app rerun waits until a new run has started and
finished, with no stale element left and every image loaded.
"""

from __future__ import annotations

import os
import subprocess
import sys
import tempfile
import time
import urllib.request
from pathlib import Path

import pytest
from apphelpers import REPO

from workbench.app import launch

pytestmark = pytest.mark.slow

CHROMIUM = "/usr/bin/chromium"
CHROMIUM_ARGS = [
    "--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
    "--disable-background-networking", "--disable-component-update", "--disable-sync",
]
# Screenshots go to a temporary folder unless WORKBENCH_SCREENSHOTS names one (the
# documented ones are refreshed with WORKBENCH_SCREENSHOTS=docs/screenshots).
SHOTS = Path(os.environ.get("WORKBENCH_SCREENSHOTS") or tempfile.mkdtemp(prefix="workbench-shots-"))
REPLICATES = "2"
RUN_TIMEOUT_MS = 600_000


@pytest.fixture(scope="module")
def app_url():
    # each parallel test worker (pytest-xdist's gw0, gw1, ...) looks in its own range of ports,
    # so two app servers started at the same moment never take the same one
    worker = os.environ.get("PYTEST_XDIST_WORKER", "gw0").removeprefix("gw")
    port = launch.free_port(8611 + 100 * int(worker or 0))
    env = {**os.environ, "PYTHONUNBUFFERED": "1"}
    log = tempfile.TemporaryFile()
    proc = subprocess.Popen(launch.command(port, sys.executable), cwd=REPO, env=env, stdout=log, stderr=log)
    url = f"http://127.0.0.1:{port}"
    try:
        deadline = time.monotonic() + 90
        while True:
            try:
                with urllib.request.urlopen(f"{url}/_stcore/health", timeout=2) as r:
                    if r.read().strip() == b"ok":
                        break
            except OSError:
                pass
            if proc.poll() is not None or time.monotonic() > deadline:
                log.seek(0)
                raise RuntimeError(f"the app did not start: {log.read().decode(errors='replace')[-2000:]}")
            time.sleep(0.5)
        yield url
    finally:
        proc.terminate()
        try:
            proc.wait(20)
        except subprocess.TimeoutExpired:
            proc.kill()
            proc.wait(10)
        log.close()


@pytest.fixture(scope="module")
def page(app_url):
    from playwright.sync_api import sync_playwright

    assert Path(CHROMIUM).exists(), "run tests/app/install_browser.sh first"
    with tempfile.TemporaryDirectory(prefix="workbench-chromium-") as profile, sync_playwright() as pw:
        ctx = pw.chromium.launch_persistent_context(
            profile, executable_path=CHROMIUM, headless=True, args=CHROMIUM_ARGS,
            viewport={"width": 1440, "height": 1000}, accept_downloads=True,
        )
        pg = ctx.new_page()
        pg.set_default_timeout(60_000)
        pg.add_init_script(COUNT_RUNS)
        pg.goto(app_url)
        yield pg
        ctx.close()


def _main(page):
    return page.locator("section.stMain, [data-testid='stMain']").first


# Counts every script run the page sees: the app root's data-test-script-state attribute
# leaves "notRunning" whenever a run is requested or starts.
COUNT_RUNS = """
window.__wbRuns = 0;
window.__wbDoc = Math.random().toString(36).slice(2);
new MutationObserver((records) => {
  for (const r of records) {
    const s = r.target.getAttribute('data-test-script-state');
    if (r.oldValue === 'notRunning' && s !== 'notRunning') window.__wbRuns += 1;
  }
}).observe(document, {subtree: true, attributes: true, attributeOldValue: true,
                      attributeFilter: ['data-test-script-state']});
"""

# The page is idle: no script run under way, no element left stale from the previous run,
# every image decoded, and (when `since` = [document, count] is given) at least one run after
# that count. A click that reloads the whole document (a link followed as a new page load)
# starts the counter afresh: a new document counts as a new run.
IDLE = """(since) => {
  const app = document.querySelector('[data-testid="stApp"]');
  if (!app || app.getAttribute('data-test-script-state') !== 'notRunning') return false;
  if (since !== null && window.__wbDoc === since[0] && window.__wbRuns <= since[1]) return false;
  if (document.querySelector('[data-stale="true"]')) return false;
  return Array.from(document.images).every((i) => i.complete);
}"""


def _runs(page) -> list:
    """[document id, script runs seen in it]: the mark a later settle waits past."""
    return page.evaluate("() => [window.__wbDoc, window.__wbRuns]")


# What the page looks like when it is not idle: said in the failure message of a settle
# that timed out, so a hang on a CI machine can be told apart from a slow run.
NOT_IDLE = """(since) => {
  const app = document.querySelector('[data-testid="stApp"]');
  return {
    script_state: app ? app.getAttribute('data-test-script-state') : 'no app root',
    document: window.__wbDoc, runs: window.__wbRuns, waiting_for_more_than: since,
    stale: Array.from(document.querySelectorAll('[data-stale="true"]')).slice(0, 5)
      .map((e) => (e.getAttribute('data-testid') || e.tagName) + ': ' + (e.innerText || '').slice(0, 80)),
    images_loading: Array.from(document.images).filter((i) => !i.complete).slice(0, 5)
      .map((i) => (i.getAttribute('loading') || '') + ' ' + (i.currentSrc || i.src || '').slice(0, 80)),
    url: location.href,
  };
}"""
# A limit against hangs for a settle that does not wait for a study run: on a busy
# 2-core machine a page rerun takes seconds, never minutes.
SETTLE_TIMEOUT_MS = 180_000
# How long an action's own run is looked for before falling back to "idle again" (_act).
ACT_RUN_MS = 30_000


def _settle(page, since: list | None = None, timeout: int = SETTLE_TIMEOUT_MS):
    """Wait until the app is idle (and, with ``since``, has run again since that count)."""
    from playwright.sync_api import TimeoutError as PageTimeout

    try:
        page.wait_for_function(IDLE, arg=since, timeout=timeout)
    except PageTimeout:
        state = page.evaluate(NOT_IDLE, since)
        _shot_now(page, "settle_timeout")
        raise AssertionError(f"the page did not become idle within {timeout / 1000:.0f} s: {state}") from None


def _shot_now(page, name: str):
    """A screenshot as the page is, for a failure message (no waiting)."""
    SHOTS.mkdir(parents=True, exist_ok=True)
    try:
        page.screenshot(path=str(SHOTS / f"{name}.png"), full_page=True, timeout=10_000)
    except Exception:  # noqa: BLE001 - a failed picture must not hide the real failure
        pass


def _act(page, action):
    """Do something that makes the app rerun, then wait for that rerun to finish.

    The page is let go idle first: an action taken while a run is still under way is folded
    into that run (the app's state never passes through "not running"), so no new run would
    be counted and the wait after it could not end.
    """
    _settle(page)
    before = _runs(page)
    action()
    from playwright.sync_api import TimeoutError as PageTimeout

    try:
        page.wait_for_function(IDLE, arg=before, timeout=ACT_RUN_MS)
    except PageTimeout:
        # A fast run can start and end within one render of the page and leave no trace in the
        # attribute the counter watches: then being idle again is all there is to wait for (the
        # test's next step waits for the content it needs).
        _settle(page)


def _goto(page, title: str):
    _act(page, lambda: page.locator("[data-testid='stSidebarNav'] a").filter(has_text=title).first.click())
    page.get_by_role("heading", name=title, exact=True).first.wait_for()
    _settle(page)


def _upload(page, label: str, path: Path):
    box = page.locator("[data-testid='stFileUploader']").filter(has_text=label).first
    # An upload reruns the page; wait until the page is idle after it, or the next action may be
    # folded into that run. Not counted as a run (_act): a fast run can start and end within one
    # render of the page, leaving no trace in the attribute the counter watches.
    _settle(page)
    box.locator("input[type='file']").set_input_files(str(path))
    page.get_by_text(path.name).first.wait_for()
    _settle(page)


CONTENT_HEIGHT = """() => {
  const c = document.querySelector('[data-testid="stMainBlockContainer"]')
         || document.querySelector('[data-testid="stMain"]') || document.body;
  return c.scrollHeight;
}"""


def _shot(page, name: str):
    """Screenshot of the whole view: the app scrolls inside its main pane, so grow the window to fit it."""
    SHOTS.mkdir(parents=True, exist_ok=True)
    height = int(page.evaluate(CONTENT_HEIGHT))
    page.set_viewport_size({"width": 1440, "height": max(1000, min(height + 400, 9000))})
    # two animation frames: the browser has laid out the new size before the picture is taken
    page.evaluate("() => new Promise((r) => requestAnimationFrame(() => requestAnimationFrame(r)))")
    _settle(page)
    # Tables draw into canvases after the resize, on frames of their own: take pictures until two
    # in a row are the same (the page has stopped drawing), at most 40 frames' worth of tries.
    before = page.screenshot()
    for _ in range(40):
        page.evaluate("() => new Promise((r) => requestAnimationFrame(() => requestAnimationFrame(r)))")
        now = page.screenshot()
        if now == before:
            break
        before = now
    (SHOTS / f"{name}.png").write_bytes(now)
    page.set_viewport_size({"width": 1440, "height": 1000})


def _no_traceback(page):
    text = _main(page).inner_text()
    assert "Traceback" not in text and "Error details" not in text, text[:2000]


def test_data_view(page):
    page.get_by_text("Cohort summary").wait_for()
    _settle(page)
    main = _main(page)
    assert "Read 500 patients with 240 imaging features" in main.inner_text()
    metric = page.locator("[data-testid='stMetric']").filter(has_text="Events").first
    assert "311" in metric.inner_text()  # from summarise_cohort on the demo (see test_app_data.py)
    assert "Research use only" in main.inner_text()
    _no_traceback(page)
    _shot(page, "1_data")


def test_wrong_column_mapping_is_explained(page):
    box = page.get_by_label("Follow-up time", exact=False).first
    box.click()
    _act(page, lambda: page.get_by_role("option", name="sex", exact=True).click())
    err = page.locator("[data-testid='stAlertContentError']").first
    err.wait_for()
    assert "'sex'" in err.inner_text()
    _no_traceback(page)
    _shot(page, "1b_data_wrong_mapping")
    box = page.get_by_label("Follow-up time", exact=False).first
    box.click()
    _act(page, lambda: page.get_by_role("option", name="os_months", exact=True).click())
    page.get_by_text("Cohort summary").wait_for()
    _settle(page)


def test_design_view(page):
    _goto(page, "Design")
    page.get_by_text("Ready to run").wait_for()
    page.get_by_role("button", name="Download the study file (TOML)").wait_for()
    text = _main(page).inner_text()
    assert "Clinical predictors" in text and "Imaging signature" in text
    assert "240 of 240 imaging features in the pool" in text
    _no_traceback(page)
    _shot(page, "2_design")


def test_results_view_runs_with_progress(page):
    _goto(page, "Results")
    reps = page.get_by_role("spinbutton", name="Bootstrap replicates for this run")
    reps.fill(REPLICATES)
    _act(page, lambda: reps.press("Enter"))
    assert "Quick mode" in _main(page).inner_text()
    page.get_by_role("button", name="Run the study").click()
    page.get_by_role("button", name="Cancel the run").wait_for()
    page.get_by_role("progressbar").first.wait_for()
    page.get_by_text("Finished in").wait_for(timeout=RUN_TIMEOUT_MS)
    page.get_by_text("Figures", exact=True).wait_for()
    page.get_by_role("button", name="Download PDF").wait_for()
    _settle(page)
    text = _main(page).inner_text()
    assert "Discrimination" in text and "Against the baseline" in text
    assert "minus Clinical Cox" in text
    _no_traceback(page)
    _shot(page, "3_results")


def test_signature_view(page):
    _goto(page, "Signature")
    page.get_by_text("Reduction steps").wait_for()
    page.get_by_text("Stability across resamples").wait_for()
    page.get_by_text("refits kept between").wait_for()
    _settle(page)
    assert page.get_by_text("Reduction steps").count() >= 1
    _no_traceback(page)
    _shot(page, "4_signature")


def test_nomogram_view(page):
    _goto(page, "Nomogram")
    page.get_by_role("button", name="Download PDF").wait_for()
    page.get_by_role("button", name="Download the points tables (CSV files, zip)").wait_for()
    assert page.locator("[data-testid='stImage'] img").count() >= 1
    _no_traceback(page)
    _shot(page, "5_nomogram")


def test_patient_view(page, tmp_path):
    import pandas as pd

    _goto(page, "Patient")
    page.get_by_text("Read patients from a file").click()
    button = page.get_by_role("button", name="Download a template for the patient file", exact=False)
    button.wait_for()
    with page.expect_download() as dl:
        button.click()
    columns = Path(dl.value.path()).read_text().strip().split(",")
    # one demo patient's values, in exactly the template's columns
    demo = pd.read_csv(REPO / "demo_cohort" / "clinical.csv").merge(
        pd.read_csv(REPO / "demo_cohort" / "imaging.csv"), on="patient_id")
    path = tmp_path / "one_patient.csv"
    demo.loc[[0], columns].to_csv(path, index=False)
    box = page.locator("[data-testid='stFileUploader']").filter(has_text="Patient file").first
    box.locator("input[type='file']").set_input_files(str(path))
    page.get_by_role("button", name="Estimate").wait_for()
    _settle(page)
    page.get_by_role("button", name="Estimate").click()
    page.get_by_text("Survival at 12 months").first.wait_for()
    page.get_by_text("On the nomogram").wait_for()
    page.get_by_text("Survival read off the nomogram").wait_for()
    _settle(page)
    text = _main(page).inner_text()
    assert "95% CI" in text and "Research use only" in text
    _no_traceback(page)
    _shot(page, "6_patient")
    age = page.get_by_role("textbox", name="Age (years)")
    age.fill("120")
    _act(page, lambda: page.get_by_role("button", name="Estimate").click())
    page.get_by_text("above the training range").first.wait_for()
    page.get_by_text("Survival read off the nomogram").wait_for()
    _settle(page)
    _shot(page, "6b_patient_out_of_range")


def test_export_view(page):
    _goto(page, "Export")
    page.get_by_role("button", name="Download results.json").wait_for()
    page.get_by_role("button", name="Download the model bundle (zip)").wait_for()
    with page.expect_download() as dl:
        page.get_by_role("button", name="Download results.json").click()
    path = dl.value.path()
    assert Path(path).read_text().lstrip().startswith("{")
    _no_traceback(page)
    _shot(page, "7_export")
