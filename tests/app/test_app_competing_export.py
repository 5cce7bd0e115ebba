"""The Export page offers the competing-risks analysis's files, as ``workbench competing`` writes them.

The small demo competing study (invented data, ``small_competing_study`` in tests/conftest.py:
150 patients, one worker), its analysis run on the Results page with 2 bootstrap replicates.
The reference is the command line (``workbench competing STUDY --replicates 2``) on the same
study file and seed: the same library functions driven from a file. The downloads are read
from what the page hands to Streamlit's download buttons.
"""

from __future__ import annotations

import io
import json
import zipfile

import pytest
from apphelpers import APP_MAIN, assert_clean, page_texts

from workbench.app import state
from workbench.study import read_study

REPS = 2
RUN_TIME = ("seconds", "started")  # provenance fields of when and how long, not of what


@pytest.fixture
def downloads(monkeypatch):
    """What the page passes to every download button, by key (the button is still drawn)."""
    import streamlit as st
    from streamlit.delta_generator import DeltaGenerator

    got: dict[str, dict] = {}
    original = DeltaGenerator.download_button

    def record(self, label, data, *args, **kwargs):
        got[kwargs.get("key")] = {"label": label, "data": data, "file_name": kwargs.get("file_name")}
        return original(self, label, data, *args, **kwargs)

    monkeypatch.setattr(DeltaGenerator, "download_button", record)
    monkeypatch.setattr(st, "download_button", lambda *a, **k: record(st._main, *a, **k))
    return got


def _without_run_time(doc: dict) -> dict:
    doc = json.loads(json.dumps(doc))
    for k in RUN_TIME:
        doc["provenance"].pop(k, None)
    return doc


@pytest.fixture
def app(small_competing_study):
    from streamlit.testing.v1 import AppTest

    path, _ = small_competing_study
    at = AppTest.from_file(str(APP_MAIN), default_timeout=600).run()
    at.session_state[state.K_STUDY] = read_study(path)
    return at


def test_export_page_says_when_no_competing_analysis_has_run(app):
    at = app
    at.switch_page("views/export.py").run()
    assert_clean(at)
    texts = " ".join(page_texts(at))
    assert "No competing-risks analysis has run yet" in texts
    assert "Research use only" in texts  # the caution stays on the page


@pytest.mark.slow  # two competing-risks analyses with their figures (the app's and the command line's)
def test_export_page_offers_the_command_lines_competing_results(app, downloads, small_competing_study, tmp_path):
    from workbench.cli import main

    path, _ = small_competing_study
    at = app
    at.switch_page("views/results.py").run()
    at.number_input(key="competing_replicates").set_value(REPS)
    at.button(key="competing_run").click().run()
    assert_clean(at)
    at.switch_page("views/export.py").run()
    assert_clean(at)
    assert "Research use only" in " ".join(page_texts(at))
    assert {"export_cr_json", "export_cr_folder"} <= set(downloads), sorted(downloads)

    out = tmp_path / "cli"
    assert main(["competing", str(path), "--out", str(out), "--replicates", str(REPS), "--quiet"]) == 0
    want = json.loads((out / "competing_results.json").read_text())
    got = json.loads(downloads["export_cr_json"]["data"])
    assert want["provenance"]["replicates"] == REPS
    assert _without_run_time(got) == _without_run_time(want)

    # the zip holds the folder the command line writes: the same files, the same JSON
    with zipfile.ZipFile(io.BytesIO(downloads["export_cr_folder"]["data"])) as zf:
        names = {n.split("/", 1)[1] for n in zf.namelist()}
        inner = json.loads(zf.read("competing/competing_results.json"))
    assert names == {p.name for p in out.iterdir()}
    assert _without_run_time(inner) == _without_run_time(want)
