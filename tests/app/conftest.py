"""Shared helpers of the front-end tests: the app under AppTest and the texts it shows."""

from __future__ import annotations

from pathlib import Path

import pytest

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


@pytest.fixture
def new_app():
    from streamlit.testing.v1 import AppTest

    # a limit against hangs, not a timing: a study run on a busy 2-core machine can take minutes
    def make(timeout: float = 600):
        return AppTest.from_file(str(APP_MAIN), default_timeout=timeout)

    return make
