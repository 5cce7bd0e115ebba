"""The background builder of a finished run's files (workbench.app.exports), without a browser."""

from __future__ import annotations

import threading
from pathlib import Path

import pytest
from matplotlib.figure import Figure

from workbench.app import exports


def _figure() -> Figure:
    fig = Figure(figsize=(2, 1.5))
    fig.add_subplot().plot([0, 1], [1, 0])
    return fig


@pytest.fixture
def builders(monkeypatch):
    calls = []

    def make(name, value):
        def build(result):
            calls.append(name)
            return value
        return build

    fake = {"figures": make("figures", {"calibration": _figure(), "nomogram": _figure()}),
            "json": make("json", "{}"), "bundle": make("bundle", b"zip"), "folder": make("folder", b"zip"),
            "report": make("report", "<html></html>")}
    monkeypatch.setattr(exports, "BUILDERS", fake)
    return calls


def test_screens_are_drawn_from_the_figures_once_and_leave_the_nomogram_to_its_page(builders):
    ex = exports.Exports(result=object())
    png = ex.get("screens")
    assert set(png) == {"calibration"}
    assert png["calibration"].startswith(b"\x89PNG")
    assert ex.get("screens") is png and builders == ["figures"]  # built once, from the one figure build


def test_background_build_finishes_every_file_in_order_without_locking_itself(builders):
    ex = exports.prepare(object())
    ex._thread.join(timeout=60)
    assert not ex._thread.is_alive()
    assert builders == ["figures", "json", "bundle", "folder", "report"]
    assert ex.ready("screens") and not ex.errors
    assert ex.get("report") == "<html></html>"


def _hold_figures(monkeypatch) -> threading.Event:
    """Make the figures' build wait until the returned event is set (a slow background build)."""
    gate = threading.Event()
    slow = exports.BUILDERS["figures"]

    def held(result):
        gate.wait(30)
        return slow(result)

    monkeypatch.setitem(exports.BUILDERS, "figures", held)
    return gate


def test_a_view_waiting_on_a_file_gets_it_when_the_background_build_is_under_way(builders, monkeypatch):
    gate = _hold_figures(monkeypatch)
    ex = exports.prepare(object())
    got = {}
    waiter = threading.Thread(target=lambda: got.setdefault("screens", ex.get("screens")))
    waiter.start()
    gate.set()
    waiter.join(timeout=60)
    assert set(got["screens"]) == {"calibration"}


def test_an_error_while_building_is_kept_and_raised_to_the_view(builders, monkeypatch):
    def broken(result):
        raise ValueError("no figures today")

    monkeypatch.setitem(exports.BUILDERS, "figures", broken)
    ex = exports.Exports(object())
    with pytest.raises(ValueError, match="no figures today"):
        ex.get("figures")
    with pytest.raises(ValueError, match="no figures today"):  # the screens need the figures
        ex.get("screens")


def test_results_file_is_built_at_once_while_the_figures_are_still_being_drawn(builders, monkeypatch):
    gate = _hold_figures(monkeypatch)
    ex = exports.prepare(object())
    try:
        got = {}
        reader = threading.Thread(target=lambda: got.setdefault("json", ex.get("json")))
        reader.start()
        reader.join(timeout=10)
        assert not reader.is_alive() and got["json"] == "{}"  # did not wait for the figures
        assert not ex.ready("figures")
    finally:
        gate.set()
        ex._thread.join(timeout=60)
    assert ex.ready("report") and not ex.errors


def test_a_view_gets_its_figure_without_waiting_for_the_others(builders, monkeypatch):
    from workbench.app import charts

    drawn = []
    real = charts.screen_png
    monkeypatch.setattr(charts, "screen_png", lambda fig, tight=True: drawn.append(fig) or real(fig, tight))
    ex = exports.Exports(object())
    png = ex.screen("calibration")  # asked for first by the view: drawn at once
    assert png.startswith(b"\x89PNG") and len(drawn) == 1
    assert ex.get("screens")["calibration"] is png and len(drawn) == 1  # not drawn a second time


def _pid(result) -> tuple[int, object]:
    import os

    return os.getpid(), result


def _fails(result):
    raise ValueError(f"report failed for {result}")


def test_the_report_is_built_in_a_worker_process_and_its_errors_reach_the_view():
    import os

    pid, echoed = exports.run_apart(_pid, {"run": 1})
    assert pid != os.getpid() and echoed == {"run": 1}  # another process, the result passed whole
    with pytest.raises(ValueError, match="report failed for 7"):
        exports.run_apart(_fails, 7)


def test_a_result_that_cannot_be_pickled_is_reported_on_here():
    import os

    pid, _ = exports.run_apart(_pid, threading.Lock())  # locks cannot be pickled
    assert pid == os.getpid()


# module-level builders: the worker processes import them by name
def _worker_figures(result) -> dict:
    import os

    if os.getpid() == result["parent"]:
        raise AssertionError("the figures were drawn in the server's own process")
    return {"calibration": _figure(), "nomogram": _figure()}


def _worker_json(result) -> str:
    import os

    return str(os.getpid())


def _dies_in_a_worker(result) -> str:
    import os

    if os.getpid() != result["parent"]:
        os._exit(3)  # a worker killed mid-build (e.g. out of memory)
    return "built here"


def test_figures_and_files_are_built_in_the_worker_processes_not_in_the_server(monkeypatch):
    import os

    monkeypatch.setattr(exports, "BUILDERS", {**exports.BUILDERS, "figures": _worker_figures, "json": _worker_json,
                                              "bundle": _worker_json, "folder": _worker_json, "report": _worker_json})
    ex = exports.prepare({"parent": os.getpid()})
    assert ex.names() == ["calibration", "nomogram"]
    assert ex.screen("calibration").startswith(b"\x89PNG")
    assert ex.figure_file("calibration", "svg").startswith(b"<?xml")  # a download, from the figures held there
    assert ex.figure_file("calibration", "pdf").startswith(b"%PDF")
    assert int(ex.get("json")) != os.getpid() and ex.get("report") == ex.get("json")  # one files worker
    ex._thread.join(timeout=120)
    assert set(ex.get("screens")) == {"calibration"} and not ex.errors


def test_a_worker_that_dies_leaves_the_build_to_the_server(monkeypatch):
    import os

    from workbench.app import workers

    monkeypatch.setattr(workers, "_BREAKS", {})
    monkeypatch.setitem(exports.BUILDERS, "json", _dies_in_a_worker)
    ex = exports.Exports({"parent": os.getpid()})
    assert ex.get("json") == "built here"
    assert workers._BREAKS == {workers.FILES_POOL: 1}  # counted, and a new worker is started next time


def _plan(drawn: list):
    """A figures layer that returns its figures as drawings still to do (like figureset.figure_plan)."""
    def plan(result) -> dict:
        return {"calibration": lambda: drawn.append("calibration") or _figure(),
                "td_auc": lambda: drawn.append("td_auc") or _figure()}
    return plan


def test_a_plan_of_figures_draws_only_the_figure_asked_for(monkeypatch):
    drawn = []
    monkeypatch.setitem(exports.BUILDERS, "figures", _plan(drawn))
    ex = exports.Exports(object())
    assert ex.names() == ["calibration", "td_auc"] and drawn == []  # the names cost no drawing
    assert ex.screen("td_auc").startswith(b"\x89PNG") and drawn == ["td_auc"]
    assert ex.figure_file("td_auc", "svg").startswith(b"<?xml") and drawn == ["td_auc"]  # held, not redrawn


def test_the_figure_worker_draws_each_figure_of_a_plan_when_first_asked(monkeypatch):
    import pickle

    from workbench.app import workers

    monkeypatch.setattr(workers, "_HELD", {})
    drawn = []
    blob = pickle.dumps({"run": 1})
    assert workers.figure_task("run-1", blob, _plan(drawn), None, None) == ["calibration", "td_auc"]
    assert drawn == []
    assert workers.figure_task("run-1", blob, _plan(drawn), "td_auc", "screen").startswith(b"\x89PNG")
    assert workers.figure_task("run-1", blob, _plan(drawn), "td_auc", "pdf").startswith(b"%PDF")
    assert drawn == ["td_auc"]


def _wait_until(condition, seconds: float = 60.0) -> None:
    """Poll a state (not a fixed sleep) until it holds; fail when it never does."""
    import time

    deadline = time.monotonic() + seconds
    while not condition():
        if time.monotonic() > deadline:
            raise AssertionError("the state waited for never came")
        time.sleep(0.01)


def test_a_view_never_builds_the_report_in_its_own_thread_when_no_worker_can(builders, monkeypatch):
    # an unpicklable result (a lock) cannot go to a worker: the files are built in this process, by the
    # background thread only; a view's script thread asking for the report waits, and it is built next
    where = {}
    real = exports.BUILDERS["report"]

    def report(result):
        where["report"] = threading.current_thread().name
        return real(result)

    monkeypatch.setitem(exports.BUILDERS, "report", report)
    gate = _hold_figures(monkeypatch)
    ex = exports.prepare(threading.Lock())
    got = {}
    view = threading.Thread(target=lambda: got.setdefault("report", ex.get("report")), name="ScriptRunner.scriptThread")
    view.start()
    try:  # until the view either builds the report itself or waits for it
        _wait_until(lambda: "report" in where or "report" in ex._wanted)
    finally:
        gate.set()
    view.join(timeout=60)
    ex._thread.join(timeout=60)
    assert got["report"] == "<html></html>" and not ex.errors
    assert where["report"] == "workbench-exports"  # the background thread, not the view's
    assert builders == ["figures", "report", "json", "bundle", "folder"]  # the file waited for went first


def test_a_view_waiting_on_a_file_gets_the_error_met_while_building_it(builders, monkeypatch):
    def broken(result):
        raise ValueError("no report today")

    monkeypatch.setitem(exports.BUILDERS, "report", broken)
    ex = exports.prepare(threading.Lock())
    with pytest.raises(ValueError, match="no report today"):
        ex.get("report")
    ex._thread.join(timeout=60)
    assert set(ex.files) >= {"json", "bundle", "folder"}


def test_the_app_script_does_not_run_when_a_worker_process_imports_it(monkeypatch):
    # A worker process spawned while Streamlit runs the app imports the file named by __main__.__file__
    # (Streamlit's stand-in module: the app's main.py) under the name "__mp_main__" (multiprocessing's
    # spawn start method); it must not run the app's pages there.
    import runpy

    import streamlit as st

    import workbench.app

    app_main = Path(workbench.app.__file__).parent / "main.py"

    calls = []
    monkeypatch.setattr(st, "navigation", lambda *a, **k: calls.append("navigation") or pytest.fail("page run"))
    monkeypatch.setattr(st, "set_page_config", lambda *a, **k: calls.append("set_page_config"))
    runpy.run_path(str(app_main), run_name="__mp_main__")
    assert calls == []
