"""Shared helpers of the front-end tests: the app under AppTest and the texts it shows.

A module of its own name (not ``conftest``): the test modules import from it, and with several
``conftest.py`` files in the tree ``from conftest import ...`` took whichever was imported first
(tests/unit/competing/ and tests/app/ in one run failed at collection).
"""

from __future__ import annotations

from html.parser import HTMLParser
from pathlib import Path

REPO = Path(__file__).resolve().parents[2]
APP_MAIN = REPO / "workbench" / "app" / "main.py"
DEMO = REPO / "demo_cohort"


def page_texts(at) -> list[str]:
    """Every message, caption and markdown text the page shows."""
    out = []
    for kind in ("error", "warning", "info", "success", "caption", "markdown", "text", "title", "subheader"):
        out += [str(e.value) for e in getattr(at, kind)]
    return out


def assert_clean(at) -> None:
    """No uncaught exception and no traceback anywhere on the page."""
    assert not at.exception, [e.value for e in at.exception]
    for t in page_texts(at):
        assert "Traceback" not in t, t


class _Tables(HTMLParser):
    """The <table> elements of an HTML text as rows of cell texts (read with the standard library)."""

    def __init__(self) -> None:
        super().__init__(convert_charrefs=True)
        self.tables: list[list[list[str]]] = []
        self._cell: list[str] | None = None

    def handle_starttag(self, tag, attrs):
        if tag == "table":
            self.tables.append([])
        elif tag == "tr" and self.tables:
            self.tables[-1].append([])
        elif tag in ("td", "th"):
            self._cell = []

    def handle_endtag(self, tag):
        if tag in ("td", "th") and self._cell is not None:
            self.tables[-1][-1].append("".join(self._cell).replace("\xa0", "").strip())
            self._cell = None

    def handle_data(self, data):
        if self._cell is not None:
            self._cell.append(data)


def static_tables(at) -> list:
    """The static HTML tables the page shows (``st.html``), each a DataFrame of the cell texts as
    shown, the header row as its columns."""
    import pandas as pd

    out = []
    for block in at.get("html"):
        parser = _Tables()
        parser.feed(block.value)
        out += [pd.DataFrame(rows[1:], columns=rows[0]) for rows in parser.tables if rows]
    return out
