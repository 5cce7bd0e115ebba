"""Fixtures of the front-end tests; the helpers they share are in apphelpers.py."""

from __future__ import annotations

import pytest
from apphelpers import APP_MAIN


@pytest.fixture
def new_app():
    from streamlit.testing.v1 import AppTest

    # a limit against hangs, not a timing: a study run on a busy 2-core machine can take minutes
    def make(timeout: float = 600):
        return AppTest.from_file(str(APP_MAIN), default_timeout=timeout)

    return make
