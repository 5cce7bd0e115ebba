"""Print the report HTML to PDF with a headless Chromium.

The HTML carries its own print style sheet (A4, page breaks before major
sections, the caution on every page), so the browser only has to print it.
Chromium runs with a fresh, throw-away profile and with networking features
switched off; the report makes no requests of its own.
"""

from __future__ import annotations

import re
import shutil
import subprocess
import tempfile
from pathlib import Path

from workbench.errors import WorkbenchError

CHROMIUM_CANDIDATES = ("/usr/bin/chromium", "chromium", "chromium-browser", "google-chrome")

CHROMIUM_FLAGS = (
    "--headless",
    "--no-sandbox",
    "--disable-gpu",
    "--disable-quic",
    "--no-first-run",
    "--disable-background-networking",
    "--disable-component-update",
    "--disable-sync",
    # the browser's own header and footer would print the file's location and the date
    "--no-pdf-header-footer",
)


class ReportError(WorkbenchError):
    """The report could not be written or printed (for example no browser to print the PDF)."""


def find_chromium(executable: str | None = None) -> str:
    """Path of the Chromium used to print PDFs.

    Parameters
    ----------
    executable : str, optional
        An explicit browser executable; otherwise the first of
        :data:`CHROMIUM_CANDIDATES` found.

    Raises
    ------
    ReportError
        When no Chromium can be found, saying how to install one.
    """
    for cand in ((executable,) if executable else CHROMIUM_CANDIDATES):
        path = shutil.which(cand) if cand else None
        if path:
            return path
    asked = f"the browser {executable!r} was not found. " if executable else ""
    raise ReportError(
        f"Cannot print the report to PDF: {asked}no Chromium browser is installed (looked for "
        f"{', '.join(CHROMIUM_CANDIDATES)}). Install it with 'apt-get install chromium' (Debian/Ubuntu), "
        "or write the report without a PDF (pdf=False); the HTML report can be printed from any browser."
    )


def print_pdf(html_path, pdf_path, *, executable: str | None = None, timeout: float = 180.0) -> Path:
    """Print a local HTML file to PDF with headless Chromium.

    Parameters
    ----------
    html_path : path
        The self-contained report HTML.
    pdf_path : path
        Where to write the PDF.
    executable : str, optional
        Browser executable (default: found by :func:`find_chromium`).
    timeout : float
        Seconds to wait for the browser.

    Returns
    -------
    Path of the PDF.

    Raises
    ------
    ReportError
        No browser, the browser failed, or it wrote no PDF.
    """
    browser = find_chromium(executable)
    html = Path(html_path).resolve()
    out = Path(pdf_path).resolve()
    if not html.is_file():
        raise ReportError(f"Cannot print {html}: the file does not exist; write the HTML report first.")
    out.parent.mkdir(parents=True, exist_ok=True)
    if out.exists():
        out.unlink()
    with tempfile.TemporaryDirectory(prefix="workbench-chromium-") as profile:
        cmd = [browser, *CHROMIUM_FLAGS, f"--user-data-dir={profile}", f"--print-to-pdf={out}", html.as_uri()]
        try:
            proc = subprocess.run(cmd, capture_output=True, text=True, timeout=timeout, check=False)
        except subprocess.TimeoutExpired:
            raise ReportError(
                f"Chromium did not finish printing {html.name} within {timeout:g} s; try again, or write the "
                "report with pdf=False and print the HTML from a browser."
            ) from None
    if not out.exists() or out.stat().st_size == 0:
        tail = "\n".join((proc.stderr or "").strip().splitlines()[-5:])
        raise ReportError(
            f"Chromium (exit status {proc.returncode}) wrote no PDF for {html.name}. Its last messages:\n{tail}\n"
            "Check that the browser starts (chromium --headless --version), or use pdf=False."
        )
    return out


def count_pdf_pages(path) -> int:
    """Number of pages of a PDF, read from its page objects (no PDF library needed)."""
    data = Path(path).read_bytes()
    return len(re.findall(rb"/Type\s*/Page(?![s\w])", data))
