"""The competing-risks patient estimate of the clinical + signature model with refit limits, in the app.

The small demo competing study (invented data, ``small_competing_study`` in tests/conftest.py: 150
patients, 24 shape features, one worker), its analysis run in the app with 0 replicates (the
patient subsection uses the whole-cohort fits only). The limits' refit count is lowered to
``B`` for the app, the library and the command line alike (their floor, ``MIN_REFITS``, is a
rule for users, not for equality): the app's estimate must be the one ``workbench
competing-estimate --refits B`` prints for the same study, seed and patient file (the command
line is the reference: the same library functions driven from a file).
"""

from __future__ import annotations

import json
import re
import time
from types import SimpleNamespace

import pandas as pd
import pytest
from apphelpers import APP_MAIN, assert_clean, page_texts

from workbench.app import state
from workbench.study import read_study

B = 6  # refits: enough for limits to differ between patients, few enough for seconds


@pytest.fixture(scope="module")
def few_refits():
    from workbench import cli_competing
    from workbench.app.views import competing_patient_file
    from workbench.competing import refit_limits

    mp = pytest.MonkeyPatch()
    for mod in (cli_competing, competing_patient_file, refit_limits):
        mp.setattr(mod, "MIN_REFITS", B)
    yield
    mp.undo()


@pytest.fixture(scope="module")
def page(small_competing_study, few_refits):
    from streamlit.testing.v1 import AppTest

    path, _ = small_competing_study
    at = AppTest.from_file(str(APP_MAIN), default_timeout=600).run()
    at.session_state[state.K_STUDY] = read_study(path)
    at.switch_page("views/results.py").run()
    at.number_input(key="competing_replicates").set_value(0)
    at.button(key="competing_run").click().run()
    at.radio(key="cpe_model").set_value("combined").run()
    assert_clean(at)
    assert at.radio(key="cpe_source").value == "file"  # the route with limits comes first
    return at


def _upload(at, name: str, df: pd.DataFrame):
    at.file_uploader(key="cpe_file").set_value((name, df.to_csv(index=False).encode(), "text/csv")).run()


def _errors(at) -> str:
    return " ".join(e.value for e in at.error)


def test_a_file_with_an_unknown_or_missing_column_fails_before_any_refit(page, small_competing_study,
                                                                         monkeypatch):
    from workbench.app.views.competing_patient_file import JOB
    from workbench.competing import refit_limits

    def no_refits(*a, **k):
        raise AssertionError("refits started before the patients' values were checked")

    monkeypatch.setattr(refit_limits, "refit_arms", no_refits)
    at = page
    _, tmp = small_competing_study
    two = pd.read_csv(tmp / "two.csv", dtype=str)
    _upload(at, "short.csv", two.drop(columns=["morph_volume_cc"]))
    assert "short.csv lacks 1 column(s) this model needs: morph_volume_cc" in _errors(at)
    assert not [b for b in at.button if b.key == "cpe_refit_start"]  # nothing to start
    _upload(at, "extra.csv", two.assign(unknown_field="1"))
    at.number_input(key="cpe_refits").set_value(B).run()
    at.button(key="cpe_refit_start").click().run()
    assert_clean(at)
    text = _errors(at)
    assert "unknown_field" in text and "no refit was started" in text and "row 2 of the file" in text, text
    assert JOB not in at.session_state  # no refit job was made


def _command_line(path, patients, tmp, capsys) -> tuple[list[str], dict]:
    from workbench.cli import main

    out = tmp / "cli.json"
    assert main(["competing-estimate", str(path), "--model", "combined", "--patient", str(patients),
                 "--refits", str(B), "--workers", "1", "--json", str(out)]) == 0
    text = capsys.readouterr().out
    blocks = re.split(r"=== Patient \d+ of \d+ \(.*\) ===\n", text)
    return [b.strip() for b in blocks if b.strip()], json.loads(out.read_text())


def test_refits_give_the_command_line_limits_for_every_patient_and_file(page, small_competing_study, capsys):
    from workbench.app.views.competing_patient_file import CACHE
    from workbench.competing import refit_limits

    at = page
    path, tmp = small_competing_study
    two = pd.read_csv(tmp / "two.csv", dtype=str)
    _upload(at, "two.csv", two)
    at.number_input(key="cpe_refits").set_value(B).run()
    at.button(key="cpe_refit_start").click().run()  # the page follows the refits, then shows the estimate
    assert_clean(at)
    texts = " ".join(page_texts(at))
    assert "bootstrap refitting the whole model" in texts and refit_limits.REFIT_CAVEAT in texts
    assert "Research use only" in texts
    shown = next(d.value for d in at.dataframe if "Probability" in d.value.columns)
    assert shown.map(lambda s: "% to " in s).iloc[:, 2:].all().all()  # every cell has its limits
    printed, ref = _command_line(path, tmp / "two.csv", tmp, capsys)
    assert ref["refits"]["replicates"] == B and len(printed) == 2
    assert [c.value for c in at.code] == [printed[0]]  # the same text, limits, notes and caution
    cache = at.session_state[CACHE]
    assert len(cache["refits"]) == 1
    est = next(iter(cache["estimates"].values()))
    got = [float(x) for x in est.fine_gray.lower[0]]
    want = [r["lower"] for r in ref["patients"][0]["risks"] if r["route"] == "Fine-Gray"]
    assert got == want  # to the last digit (JSON keeps a float's repr)
    # the second patient and then a file of its own: the same refits, no new ones
    calls = []
    real = refit_limits.refit_arms
    refit_limits.refit_arms = lambda *a, **k: calls.append(1) or real(*a, **k)
    try:
        at.selectbox(key="cpe_row").set_value(1).run()
        assert [c.value for c in at.code] == [printed[1]]
        _upload(at, "second.csv", two.iloc[[1]])
        assert [c.value for c in at.code] == [printed[1]]
    finally:
        refit_limits.refit_arms = real
    assert calls == [] and len(cache["refits"]) == 1
    # the choices, the file and the refits come back after a visit to another page
    at.switch_page("views/data.py").run()
    at.switch_page("views/results.py").run()
    assert at.radio(key="cpe_model").value == "combined" and [c.value for c in at.code] == [printed[1]]
    assert_clean(at)


def test_refit_job_reports_each_refit_and_a_cancel_keeps_nothing(page, small_competing_study):
    from workbench.app.runs import RefitJob
    from workbench.app.views.competing import KEY
    from workbench.app.views.competing_patient_file import CACHE, JOB

    at = page
    analysis = at.session_state[KEY][1]
    job = RefitJob(("combined", 400), analysis.spec, 400, 1, analysis=SimpleNamespace(
        cohort=analysis.cohort, spec=analysis.spec)).start()
    deadline = time.monotonic() + 300
    while job.done < 2 and job._thread.is_alive() and time.monotonic() < deadline:
        job.wait(0.02)
    assert job.total == 400 and job.done >= 2 and re.fullmatch(r"Refit \d+ of 400", job.count_text())
    job.cancel()  # what the page's Cancel button calls
    assert job.cancelled and not job.running
    job.wait(60)
    assert not job._thread.is_alive() and job.result is None and job.error is None
    # the page says so, keeps no refits from it and offers to start again
    before = dict(at.session_state[CACHE]["refits"])
    at.session_state[JOB] = job
    at.number_input(key="cpe_refits").set_value(400).run()
    assert_clean(at)
    assert any("The refits were cancelled after" in w.value for w in at.warning)
    assert at.session_state[CACHE]["refits"] == before
    assert [b for b in at.button if b.key == "cpe_refit_start"]
