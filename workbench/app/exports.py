"""The files of a finished run (figures, report HTML, results.json, results folder, model bundle), built once.

:func:`prepare` builds them all in a background thread right after a run finishes, so that the
Export view finds them ready; the view calls :func:`get`, which waits for that thread or builds
a file itself when it has not been built. The report (20-30 s of drawing and templating) is
built in a worker process (:func:`run_apart`), so that it never competes with the views for the
interpreter lock. Nothing here touches Streamlit.
"""

from __future__ import annotations

import importlib
import io
import json
import multiprocessing
import pickle
import tempfile
import threading
import warnings
import zipfile
from concurrent.futures import ProcessPoolExecutor
from concurrent.futures.process import BrokenProcessPool
from pathlib import Path


def _module(name: str):
    try:
        return importlib.import_module(name)
    except ImportError:
        return None


def results_json(result) -> str | None:
    if hasattr(result, "to_dict"):
        data = result.to_dict()
    else:
        mod = _module("workbench.report.results")
        data = mod.results_dict(result) if mod is not None and hasattr(mod, "results_dict") else None
    return None if data is None else json.dumps(data, indent=2, allow_nan=False)


def results_zip(result) -> bytes | None:
    """results.json, the CSV tables and the run log, as the command line writes them, in one zip."""
    mod = _module("workbench.report.results")
    if mod is None or not hasattr(mod, "write_results"):
        return None
    with tempfile.TemporaryDirectory(prefix="workbench-results-") as tmp:
        folder = Path(tmp) / "results"
        mod.write_results(result, folder)
        buf = io.BytesIO()
        with zipfile.ZipFile(buf, "w", zipfile.ZIP_DEFLATED) as zf:
            for f in sorted(folder.iterdir()):
                zf.write(f, arcname=f"results/{f.name}")
        return buf.getvalue()


def bundle_zip(result) -> bytes | None:
    bundle = _module("workbench.report.bundle")
    if bundle is None:
        return None
    summary = bundle.summarise_training(result.cohort, result.models, result.spec.horizons,
                                        groups=result.spec.models.risk_groups)
    with tempfile.TemporaryDirectory(prefix="workbench-bundle-") as tmp:
        path = bundle.save_bundle(result.models, result.spec, summary, Path(tmp) / "model_bundle.zip")
        return Path(path).read_bytes()


def report_function():
    """The report layer's HTML renderer, or None when it has none yet."""
    mod = _module("workbench.report.html")
    for name in ("render_report", "report_html", "build_report"):
        fn = getattr(mod, name, None) if mod is not None else None
        if fn is not None:
            return fn
    return None


def report_html(result) -> str | None:
    fn = report_function()
    return None if fn is None else fn(result)


_POOL: ProcessPoolExecutor | None = None
_POOL_GUARD = threading.Lock()


def _call_pickled(fn, blob: bytes):
    return fn(pickle.loads(blob))


def run_apart(fn, result):
    """``fn(result)`` in the app's one worker process (started on first use, then kept warm).

    A long build in a thread of the app's own process shares the interpreter lock with the
    views: drawing a figure while the report was being built took ~6 s instead of ~1 s.
    ``fn`` must be a module-level function. Falls back to calling it here when ``result``
    cannot be pickled or the worker process cannot be started or dies; an exception
    raised by ``fn`` itself reaches the caller as it would here.
    """
    global _POOL
    try:
        blob = pickle.dumps(result, protocol=pickle.HIGHEST_PROTOCOL)
    except Exception:  # noqa: BLE001 - e.g. a stand-in result in tests, or an unpicklable object
        return fn(result)
    with _POOL_GUARD:
        try:
            if _POOL is None:
                _POOL = ProcessPoolExecutor(max_workers=1, mp_context=multiprocessing.get_context("spawn"))
            future = _POOL.submit(_call_pickled, fn, blob)
        except (OSError, RuntimeError, BrokenProcessPool):
            _POOL = None
            future = None
    if future is None:
        return fn(result)
    try:
        return future.result()
    except BrokenProcessPool:
        with _POOL_GUARD:
            _POOL = None
        return fn(result)


def report_html_apart(result) -> str | None:
    """:func:`report_html` in the worker process (:func:`run_apart`)."""
    return run_apart(report_html, result)


def figures(result) -> dict:
    """The run's standard figures (name -> matplotlib Figure), as the Results view shows them."""
    mod = _module("workbench.report.figureset")
    return mod.study_figures(result) if mod is not None and hasattr(mod, "study_figures") else {}


def screens(exports) -> dict:
    """Each standard figure as the PNG the Results view shows (name -> bytes), drawn ahead of the visit."""
    return {name: exports.screen(name) for name in (exports.get("figures") or {}) if name != "nomogram"}


BUILDERS = {"figures": figures, "report": report_html_apart, "json": results_json, "folder": results_zip,
            "bundle": bundle_zip}


class Exports:
    """The files of one run: built in the background, or on demand; errors kept to be shown."""

    def __init__(self, result) -> None:
        self.result = result
        self.files: dict[str, object] = {}
        self.errors: dict[str, BaseException] = {}
        # one lock per file: a view asking for results.json builds it at once instead of waiting
        # for the background thread to finish drawing the figures
        self._locks = {name: threading.Lock() for name in (*BUILDERS, "screens")}
        self._thread: threading.Thread | None = None
        self._pngs: dict[str, bytes] = {}
        self._figure_locks: dict[str, threading.Lock] = {}
        self._guard = threading.Lock()

    def start(self) -> Exports:
        self._thread = threading.Thread(target=self._all, name="workbench-exports", daemon=True)
        self._thread.start()
        return self

    def _all(self) -> None:
        # the Results view's figures first, then the Export view's files, the slowest last
        for name in ("figures", "screens", "json", "bundle", "folder", "report"):
            self._build(name)

    def _build(self, name: str) -> None:
        with self._locks[name]:
            if name in self.files or name in self.errors:
                return
            try:
                with warnings.catch_warnings():
                    warnings.simplefilter("ignore")
                    self.files[name] = (screens(self) if name == "screens" else BUILDERS[name](self.result))
            except Exception as exc:  # noqa: BLE001 - shown in the Export view
                self.errors[name] = exc

    def get(self, name: str):
        """The file's content (None when the layer offers none); raises the error met while building it."""
        self._build(name)  # waits for the background thread only while it builds this same file
        if name in self.errors:
            raise self.errors[name]
        return self.files.get(name)

    def screen(self, name: str) -> bytes:
        """One figure's screen PNG: drawn once, by the background thread or by the view that asks
        first (a view never waits for the other figures; one figure is never drawn by two threads)."""
        from workbench.app.charts import screen_png

        figs = self.get("figures") or {}
        with self._guard:
            lock = self._figure_locks.setdefault(name, threading.Lock())
        with lock:
            if name not in self._pngs:
                self._pngs[name] = screen_png(figs[name])
            return self._pngs[name]

    def ready(self, name: str) -> bool:
        return name in self.files or name in self.errors


def prepare(result) -> Exports:
    """Start building every file of ``result`` in the background."""
    return Exports(result).start()
