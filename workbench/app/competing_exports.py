"""The files of a finished competing-risks analysis (the Results page's section), for the Export view.

What ``workbench competing STUDY --out DIR`` writes, by the library's own writer
(:func:`workbench.report.competing.write_competing_folder`): competing_results.json alone, and
the whole folder (the JSON, the figures at both journal widths, the Fine-Gray nomograms' points
tables) as one zip. Both are written in the app's files worker (:mod:`workbench.app.workers`)
as soon as the analysis ends; the server's process only waits for them. When the worker cannot
take the result, a background thread here writes them; a view's script thread never does.
Nothing here touches Streamlit.
"""

from __future__ import annotations

import io
import tempfile
import threading
import uuid
import warnings
import zipfile
from pathlib import Path

from workbench.app import workers

FOLDER = "competing"
"""The folder's name inside the zip (the command line's default ``--out``)."""


def competing_json(result) -> str:
    """competing_results.json as the command line writes it for ``result`` (the library's writer)."""
    from workbench.report.competing import write_competing_folder

    with tempfile.TemporaryDirectory(prefix="workbench-competing-") as tmp:
        write_competing_folder(result, tmp, figures=False)
        return (Path(tmp) / "competing_results.json").read_text(encoding="utf-8")


def competing_zip(result) -> bytes:
    """The whole competing-risks results folder, as the command line writes it, in one zip."""
    from workbench.report.competing import write_competing_folder

    with tempfile.TemporaryDirectory(prefix="workbench-competing-") as tmp:
        folder = Path(tmp) / FOLDER
        write_competing_folder(result, folder)
        buf = io.BytesIO()
        with zipfile.ZipFile(buf, "w", zipfile.ZIP_DEFLATED) as zf:
            for f in sorted(p for p in folder.rglob("*") if p.is_file()):
                zf.write(f, arcname=f"{FOLDER}/{f.relative_to(folder).as_posix()}")
        return buf.getvalue()


BUILDERS = {"json": competing_json, "folder": competing_zip}
"""The files, in the order they are written (the folder, with its figures, last)."""


class CompetingFiles:
    """The files of one competing-risks analysis, written in the background; errors kept to be shown."""

    def __init__(self, result) -> None:
        self.result = result
        self.files: dict[str, object] = {}
        self.errors: dict[str, BaseException] = {}
        self._events = {name: threading.Event() for name in BUILDERS}
        self._job = workers.Job(result, token=uuid.uuid4().hex)
        self._futures: dict[str, object] = {}
        self._thread: threading.Thread | None = None

    def start(self) -> CompetingFiles:
        for name, fn in BUILDERS.items():  # the worker gets both at once and writes them in order
            self._futures[name] = self._job.submit(workers.FILES_POOL, workers.build, fn)
        self._thread = threading.Thread(target=self._all, name="workbench-competing-files", daemon=True)
        self._thread.start()
        return self

    def _all(self) -> None:
        for name, fn in BUILDERS.items():
            try:
                got = workers.outcome(self._futures.get(name))
                if got is workers.UNAVAILABLE:  # no worker for it: written here, in this background thread
                    with warnings.catch_warnings():
                        warnings.simplefilter("ignore")
                        got = fn(self.result)
                self.files[name] = got
            except Exception as exc:  # noqa: BLE001 - shown in the Export view
                self.errors[name] = exc
            finally:
                self._events[name].set()

    def ready(self, name: str) -> bool:
        return self._events[name].is_set()

    def get(self, name: str):
        """The file (waiting for the background writer); raises the error met while writing it."""
        if self._thread is None:
            self.start()
        self._events[name].wait()
        if name in self.errors:
            raise self.errors[name]
        return self.files[name]


def prepare(result) -> CompetingFiles:
    """Start writing the files of the competing-risks analysis ``result`` in the background."""
    return CompetingFiles(result).start()


def of_analysis(result, job, store: dict, key: str) -> CompetingFiles:
    """The files of ``result``: those its job started when it finished, else those kept in ``store``
    (the session) under ``key`` for this same result, else started now and kept there."""
    ex = getattr(job, "exports", None) if job is not None and job.result is result else None
    if ex is not None:
        return ex
    kept = store.get(key)
    if kept is not None and kept[0] is result:
        return kept[1]
    ex = prepare(result)
    store[key] = (result, ex)
    return ex
