"""The app's two worker processes: one draws a run's figures, the other writes its files.

Each is a one-process pool (``spawn``), started on first use and kept warm for the server's
lifetime (about 300 MB each). A task carries the pickled result with a token; the worker
unpickles it once per token and keeps it, with its figures, until another run's token comes,
so a figure asked for again (for the screen, then as a download) is not drawn from scratch.
Whatever cannot go to a worker (an unpicklable result or function, a pool that cannot start
or has died) is reported as :data:`UNAVAILABLE`, and the caller builds it in its own process.
Nothing here touches Streamlit.
"""

from __future__ import annotations

import multiprocessing
import pickle
import threading
import warnings
from concurrent.futures import Future, ProcessPoolExecutor
from concurrent.futures.process import BrokenProcessPool

FIGURES_POOL = "figures"
FILES_POOL = "files"
UNAVAILABLE = object()
"""What :func:`outcome` returns when the task could not run in a worker."""

MAX_BREAKS = 2
"""A worker that died this many times is not started again (everything is then built here)."""

_POOLS: dict[str, ProcessPoolExecutor] = {}
_BREAKS: dict[str, int] = {}
_GUARD = threading.Lock()


def _pool(kind: str) -> ProcessPoolExecutor:
    with _GUARD:
        if _BREAKS.get(kind, 0) >= MAX_BREAKS:
            raise RuntimeError(f"the {kind} worker died {MAX_BREAKS} times")
        if kind not in _POOLS:
            _POOLS[kind] = ProcessPoolExecutor(max_workers=1, mp_context=multiprocessing.get_context("spawn"),
                                               initializer=_lower_priority)
        return _POOLS[kind]


def _drop(kind: str, pool: ProcessPoolExecutor | None = None) -> None:
    """Forget the worker ``kind`` (``pool``, when given: not a newer one) and count its death once."""
    with _GUARD:
        if _POOLS.get(kind) is not None and (pool is None or _POOLS[kind] is pool):
            del _POOLS[kind]
            _BREAKS[kind] = _BREAKS.get(kind, 0) + 1


def submit(kind: str, fn, *args) -> Future | None:
    """``fn(*args)`` in worker ``kind``; None when the worker cannot be started."""
    pool = None
    try:
        pool = _pool(kind)
        future = pool.submit(fn, *args)
    except (OSError, RuntimeError, BrokenProcessPool):
        _drop(kind, pool)
        return None
    future.pool_kind, future.pool = kind, pool
    return future


def outcome(future: Future | None):
    """The task's value, or :data:`UNAVAILABLE` when it did not run (no worker, or the worker died).

    An exception raised by the task itself reaches the caller as it would in this process."""
    if future is None:
        return UNAVAILABLE
    try:
        return future.result()
    except BrokenProcessPool:  # two threads waiting on one task of a dead worker count one death
        _drop(getattr(future, "pool_kind", ""), getattr(future, "pool", None))
        return UNAVAILABLE


def _picklable(obj) -> bool:
    try:
        pickle.dumps(obj, protocol=pickle.HIGHEST_PROTOCOL)
    except Exception:  # noqa: BLE001 - e.g. a closure or a lock
        return False
    return True


class Job:
    """A result pickled once, and the tasks sent to the workers about it."""

    def __init__(self, result, token: str) -> None:
        self.token = token
        try:
            self.blob = pickle.dumps(result, protocol=pickle.HIGHEST_PROTOCOL)
        except Exception:  # noqa: BLE001 - e.g. a stand-in result in tests, or an unpicklable object
            self.blob = None

    def submit(self, kind: str, task, *args) -> Future | None:
        if self.blob is None or not _picklable(args):
            return None
        return submit(kind, task, self.token, self.blob, *args)


def run_apart(fn, result):
    """``fn(result)`` in the files worker; here when that cannot be (``fn`` module-level)."""
    got = outcome(Job(result, token=f"once-{id(result)}").submit(FILES_POOL, build, fn))
    return fn(result) if got is UNAVAILABLE else got


def warm() -> None:
    """Start both workers and load the report and figure layers in them (while a run goes on)."""
    for kind in (FIGURES_POOL, FILES_POOL):
        submit(kind, _load_layers)


# --- run in the worker processes ---------------------------------------------------------------

_HELD: dict[str, object] = {}

NICENESS = 10
"""How much lower the workers' CPU priority is than the server's: on a 2-core machine the two
workers drawing and writing after a run would otherwise slow the views they work for."""


def _lower_priority() -> None:
    import os

    try:
        os.nice(NICENESS)
    except (AttributeError, OSError):  # not on this platform, or not allowed: run at the same priority
        pass


def _load_layers() -> None:
    import workbench.app.charts  # noqa: F401
    import workbench.report.figureset  # noqa: F401
    import workbench.report.html  # noqa: F401


def _result(token: str, blob: bytes):
    if _HELD.get("token") != token:
        _HELD.clear()
        _HELD["result"] = pickle.loads(blob)
        _HELD["token"] = token
    return _HELD["result"]


def build(token: str, blob: bytes, fn):
    """``fn(result)`` for the result of ``token``."""
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return fn(_result(token, blob))


def figure_task(token: str, blob: bytes, fn, name: str | None, fmt: str | None):
    """The figures ``fn(result)`` (Figures, or functions drawing them) held per token, each drawn once
    when first asked for: their names (``name`` None), or one of them as the screen PNG (``fmt``
    "screen") or a download file ("png", "svg", "pdf")."""
    from workbench.app.charts import save_figure, screen_png

    result = _result(token, blob)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        if "figures" not in _HELD:
            _HELD["figures"] = dict(fn(result))
        figs = _HELD["figures"]
        if name is None:
            return list(figs)
        fig = drawn(figs, name)
        return screen_png(fig) if fmt == "screen" else save_figure(fig, fmt)


def drawn(figs: dict, name: str):
    """Figure ``name`` of ``figs``, drawn now if it is still a drawing to do (a plan's function),
    and kept drawn: the figure asked for first is drawn first, without waiting for the others."""
    fig = figs[name]
    if callable(fig):  # a matplotlib Figure is not callable
        fig = figs[name] = fig()
    return fig
