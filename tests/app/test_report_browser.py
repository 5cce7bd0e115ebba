"""The study report in headless Chromium: opens offline without console errors, prints to PDF.

Small simulated study (invented data from the demo generator). The browser is Debian's
chromium, driven by Playwright (tests/app/install_browser.sh installs both).
"""

from __future__ import annotations

import pytest

from workbench.report.html import SECTIONS, write_report
from workbench.report.pdf import count_pdf_pages

CHROMIUM = "/usr/bin/chromium"
ARGS = ["--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run", "--disable-background-networking",
        "--disable-component-update", "--disable-sync"]



# No skip: the test command installs Chromium (tests/app/install_browser.sh) before the suite.


@pytest.fixture(scope="module")
def report(small_study_result, tmp_path_factory):
    result = small_study_result
    return result, write_report(result, tmp_path_factory.mktemp("report"), pdf=True)


def test_pdf_has_several_a4_pages(report):
    _, files = report
    assert files.pdf is not None and files.pdf.exists()
    assert files.pdf.read_bytes().startswith(b"%PDF")
    assert count_pdf_pages(files.pdf) > 1


def test_html_opens_without_console_errors_or_requests(report):
    import playwright.sync_api as playwright
    result, files = report
    errors, requests = [], []
    with playwright.sync_playwright() as p:
        browser = p.chromium.launch(executable_path=CHROMIUM, args=ARGS, headless=True)
        try:
            page = browser.new_page()
            page.on("console", lambda m: errors.append(m.text) if m.type == "error" else None)
            page.on("pageerror", lambda e: errors.append(str(e)))
            page.on("request", lambda r: requests.append(r.url))
            page.goto(files.html.as_uri(), wait_until="load")
            assert page.title().startswith(result.spec.name)
            assert page.locator("#caution").is_visible()
            for sid, heading in SECTIONS:
                assert page.locator(f"section#{sid} h2").inner_text() == heading
            # every embedded figure decodes to a picture
            sizes = page.eval_on_selector_all("figure img", "els => els.map(e => [e.complete, e.naturalWidth])")
            assert len(sizes) >= 8
            assert all(ok and w > 0 for ok, w in sizes), sizes
            shown = page.locator("section#performance").inner_text()
            c = result.validation.estimates["combined"]["harrell_c"].estimate
            assert f"{c:.3f}" in shown
        finally:
            browser.close()
    assert errors == []
    assert all(u.startswith(("file://", "data:")) for u in requests), requests
