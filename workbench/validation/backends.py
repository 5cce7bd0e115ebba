"""Where validation replicates run: in this process, local processes, threads or Dask.

Every task the engine submits is a pure function of its inputs (the cohort, the
unfitted models and a seed), so the results are identical whatever the backend
and the number of workers. To make that hold to the last bit, each task runs
with the BLAS/OpenMP thread pools limited to one thread: multithreaded linear
algebra may sum in a different order with a different number of threads.
Parallelism comes from running replicates side by side instead.

Backends
--------
``"processes"`` (default)
    joblib with loky worker processes; the right choice on one machine.
``"threads"``
    joblib threads in this process, for debugging. Warning counts are not
    reliable here (Python's warning filters are process-wide).
``"serial"``
    A plain loop in this process, for debugging and for ``workers=1``.
``"dask"``
    A Dask cluster (:mod:`.dask_runner`): ``scheduler`` is a scheduler address
    (``"tcp://host:8786"``), an existing ``distributed.Client``, or ``"local"`` to
    start a local cluster of ``workers`` single-threaded processes for this run, set
    up as the processes backend's workers are (one-thread BLAS pools, and glibc's
    allocator without the trim setting Dask's nanny makes by default, which costs
    replicates 1.5-2 times the CPU).
    The data every task shares is sent to each worker once. Dask is imported only
    when asked for.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence

from threadpoolctl import threadpool_limits

from workbench.errors import SpecError

__all__ = ["BACKENDS", "run_tasks", "tqdm_progress"]

BACKENDS = ("processes", "threads", "serial", "dask")

Progress = Callable[[int, int], None]


def _call_single_threaded(fn: Callable, task):
    with threadpool_limits(limits=1):
        return fn(task)


def _check(backend: str, workers: int) -> None:
    if backend not in BACKENDS:
        raise SpecError(
            f"unknown backend {backend!r} for running validation replicates; choose one of "
            f"{', '.join(BACKENDS)}."
        )
    if int(workers) != workers or workers < 1:
        raise SpecError(f"workers must be a whole number of at least 1, got {workers!r}.")


def run_tasks(
    fn: Callable,
    tasks: Sequence,
    *,
    backend: str = "processes",
    workers: int = 1,
    scheduler=None,
    progress: Progress | None = None,
    weights: Sequence[int] | None = None,
) -> list:
    """Apply ``fn`` to every task and return the results in task order.

    Parameters
    ----------
    fn : callable
        A module-level function (it is pickled to the workers).
    tasks : sequence
        One argument per call.
    backend : {"processes", "threads", "serial", "dask"}
    workers : int
        Parallel workers (processes, threads or local Dask workers).
    scheduler : str or distributed.Client, optional
        Dask only (see the module notes).
    progress : callable(done, total), optional
        Called after every finished task with the running total of ``weights``
        (the number of replicates done) and their sum.
    weights : sequence of int, optional
        Work units per task for ``progress``; 1 each by default.

    Returns
    -------
    list
        ``[fn(task) for task in tasks]``, whatever the backend.
    """
    _check(backend, workers)
    w = [1] * len(tasks) if weights is None else [int(x) for x in weights]
    total = sum(w)
    out: list = []

    def collect(results) -> list:
        done = 0
        for k, r in enumerate(results):
            out.append(r)
            done += w[k]
            if progress is not None:
                progress(done, total)
        return out

    if backend == "serial" or (workers == 1 and backend in ("processes", "threads")):
        with threadpool_limits(limits=1):
            return collect(fn(t) for t in tasks)

    from joblib import Parallel, delayed

    if backend == "threads":
        # Thread pools are process-wide: limit them once, around all threads.
        with threadpool_limits(limits=1):
            par = Parallel(n_jobs=int(workers), prefer="threads", return_as="generator")
            return collect(par(delayed(fn)(t) for t in tasks))
    if backend == "processes":
        par = Parallel(n_jobs=int(workers), backend="loky", return_as="generator")
        return collect(par(delayed(_call_single_threaded)(fn, t) for t in tasks))

    from workbench.validation.dask_runner import run_on_dask

    return run_on_dask(fn, tasks, scheduler, int(workers), collect)


def tqdm_progress(desc: str = "validation", **tqdm_kwargs) -> Progress:
    """A progress callback that draws a tqdm bar in a terminal.

    For the command line; library code never draws anything by itself.

    Parameters
    ----------
    desc : str
        Label of the bar.
    **tqdm_kwargs
        Passed to ``tqdm.tqdm``.

    Returns
    -------
    callable(done, total)
    """
    from tqdm import tqdm

    state: dict = {}

    def update(done: int, total: int) -> None:
        bar = state.get("bar")
        if bar is None:
            bar = state["bar"] = tqdm(total=total, desc=desc, **tqdm_kwargs)
        bar.update(done - bar.n)
        if done >= total:
            bar.close()

    return update

