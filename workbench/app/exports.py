"""The files of a finished run (figures, report HTML, results.json, results folder, model bundle), built once.

:func:`prepare` starts building them right after a run finishes, so that the Results and Export
views find them ready. The building happens in two worker processes kept warm for the server's
lifetime (:mod:`workbench.app.workers`): one draws the run's figures, each when first asked for
(the figures layer's plan: the figure the Results view shows is drawn first, without waiting for
the others, and is held there, so it is written as a download without drawing it again), the other
writes results.json, the bundle, the results folder and the report (20-30 s). The server's own
process only waits for them, so a view never competes with a build for the interpreter lock:
with the builds in a thread of the server, switching the Results figure took ~6 s instead of
~0.1 s. When the result cannot be pickled or a worker cannot be started, everything is built
here in a background thread instead, as before. Nothing here touches Streamlit.
"""

from __future__ import annotations

import importlib
import io
import json
import tempfile
import threading
import uuid
import warnings
import zipfile
from pathlib import Path

from workbench.app import workers
from workbench.app.workers import run_apart  # noqa: F401  (re-exported)


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


def figures(result) -> dict:
    """The run's standard figures, as the Results view shows them: name -> a function drawing the
    matplotlib Figure (the figures layer's plan), so the figure shown first is drawn first."""
    mod = _module("workbench.report.figureset")
    for name in ("figure_plan", "study_figures"):
        if mod is not None and hasattr(mod, name):
            return getattr(mod, name)(result)
    return {}


BUILDERS = {"figures": figures, "report": report_html, "json": results_json, "folder": results_zip,
            "bundle": bundle_zip}
FILES = ("json", "bundle", "folder", "report")
"""The files the second worker writes, in this order (the slowest last)."""

BACKGROUND_ONLY = ("report",)
"""Files never built in a view's thread while the background thread runs: the report takes about 10 s of
CPU, and built in a script thread it would hold the interpreter lock against every view for as long.
The others take well under a second, so a view that needs one at once may build it (when no worker can)."""

SCREEN = "screen"
"""``fmt`` of :meth:`Exports.figure_file` for the PNG the Results view shows."""


class Exports:
    """The files of one run: built in the worker processes (or here), or on demand; errors kept to be shown.

    ``apart=False`` builds everything in this process (tests of the locking, and the fallback).
    """

    def __init__(self, result, apart: bool = True) -> None:
        self.result = result
        self.files: dict[str, object] = {}
        self.errors: dict[str, BaseException] = {}
        self._locks = {name: threading.Lock() for name in (*BUILDERS, "screens")}
        self._thread: threading.Thread | None = None
        self._pngs: dict[str, bytes] = {}
        self._figure_locks: dict[str, threading.Lock] = {}
        self._guard = threading.Lock()
        self._futures: dict[str, object] = {}
        self._local_figures: dict | None = None
        self._local_guard = threading.Lock()
        self._job = workers.Job(result, token=uuid.uuid4().hex) if apart else None
        self._done = threading.Condition()
        self._wanted: list[str] = []

    def start(self) -> Exports:
        # the second worker gets every file at once and writes them in order, the report last
        for name in FILES:
            self._futures[name] = self._submit(workers.FILES_POOL, workers.build, BUILDERS[name])
        self._thread = threading.Thread(target=self._all, name="workbench-exports", daemon=True)
        self._thread.start()
        return self

    def _submit(self, pool: str, task, *args):
        if self._job is None:
            return None
        return self._job.submit(pool, task, *args)

    def _all(self) -> None:
        # the Results view's figures first, then the Export view's files (their futures); a file a view
        # waits for (see get) goes before the others
        order = ["figures", "screens", *FILES]
        while True:
            with self._done:
                left = [n for n in order if not self.ready(n)]
                if not left:
                    return
                name = next((n for n in self._wanted if n in left), left[0])
            self._build(name)
            with self._done:
                self._done.notify_all()

    def _compute(self, name: str):
        if name == "screens":
            return {n: self.screen(n) for n in self.names() if n != "nomogram"}
        if name == "figures":  # the names, in the order the Results view lists them
            future = self._submit(workers.FIGURES_POOL, workers.figure_task, BUILDERS["figures"], None, None)
            got = workers.outcome(future)
            return got if got is not workers.UNAVAILABLE else list(self._figures_here())
        got = self._from_worker(name)
        return got if got is not workers.UNAVAILABLE else BUILDERS[name](self.result)

    def _from_worker(self, name: str):
        """The file as the files worker wrote it (waiting for it), or UNAVAILABLE (not sent, or the worker died)."""
        with self._guard:
            future = self._futures.get(name)
            if future is None:
                future = self._futures[name] = self._submit(workers.FILES_POOL, workers.build, BUILDERS[name])
        return workers.outcome(future)

    def _figures_here(self) -> dict:
        with self._local_guard:
            if self._local_figures is None:
                self._local_figures = dict(BUILDERS["figures"](self.result))
            return self._local_figures

    def _figure_here(self, name: str):
        figs = self._figures_here()
        with self._local_guard:  # one drawing at a time in this process (matplotlib objects are not shared)
            return workers.drawn(figs, name)

    def _build(self, name: str) -> None:
        with self._locks[name]:
            if name in self.files or name in self.errors:
                return
            try:
                with warnings.catch_warnings():
                    warnings.simplefilter("ignore")
                    self.files[name] = self._compute(name)
            except Exception as exc:  # noqa: BLE001 - shown in the Export view
                self.errors[name] = exc

    def get(self, name: str):
        """The file's content (None when the layer offers none); raises the error met while building it.

        ``"figures"`` is the list of the run's figure names; ``"screens"`` their screen PNGs.
        The report (:data:`BACKGROUND_ONLY`) asked for while the background thread runs is never built
        in the caller's thread (a view's script thread): the caller waits for the files worker's copy,
        or, when there is none, for the background thread to build it here, next."""
        if name in BACKGROUND_ONLY and self._background() and not self.ready(name):
            self._wait_for(name)
        self._build(name)  # waits for the background thread only while it builds this same file
        if name in self.errors:
            raise self.errors[name]
        return self.files.get(name)

    def names(self) -> list[str]:
        return list(self.get("figures") or [])

    def figure_file(self, name: str, fmt: str) -> bytes:
        """One figure as ``fmt`` ("png", "svg", "pdf") for download, or :data:`SCREEN` for the page."""
        from workbench.app.charts import save_figure, screen_png

        self.names()  # raises the figures' error, if any
        got = workers.outcome(self._submit(workers.FIGURES_POOL, workers.figure_task, BUILDERS["figures"],
                                           name, fmt))
        if got is not workers.UNAVAILABLE:
            return got
        fig = self._figure_here(name)
        return screen_png(fig) if fmt == SCREEN else save_figure(fig, fmt)

    def screen(self, name: str) -> bytes:
        """One figure's screen PNG: drawn once, by the background thread or by the view that asks
        first (a view never waits for the other figures; one figure is never drawn twice)."""
        with self._guard:
            lock = self._figure_locks.setdefault(name, threading.Lock())
        with lock:
            if name not in self._pngs:
                self._pngs[name] = self.figure_file(name, SCREEN)
            return self._pngs[name]

    def ready(self, name: str) -> bool:
        return name in self.files or name in self.errors

    def _background(self) -> bool:
        """True when called from another thread than the background builder while it still runs."""
        t = self._thread
        return t is not None and t.is_alive() and t is not threading.current_thread()

    def _wait_for(self, name: str) -> None:
        try:
            got = self._from_worker(name)  # no lock held, no building here: only the worker's copy
        except Exception as exc:  # noqa: BLE001 - the task's own error, kept like the builder's
            got, error = workers.UNAVAILABLE, exc
        else:
            error = None
        if got is not workers.UNAVAILABLE or error is not None:
            with self._locks[name]:
                if not self.ready(name):
                    if error is None:
                        self.files[name] = got
                    else:
                        self.errors[name] = error
            return
        with self._done:
            if name not in self._wanted:
                self._wanted.append(name)
            while not self.ready(name) and self._background():
                self._done.wait(0.5)


def prepare(result) -> Exports:
    """Start building every file of ``result`` in the background."""
    return Exports(result).start()


def of_job(job, result=None) -> Exports:
    """The run's files: started when the run finished, or now when that did not happen."""
    ex = getattr(job, "exports", None)
    if ex is None:
        ex = prepare(result if result is not None else job.result)
        if job is not None:
            job.exports = ex
    return ex
