"""Running validation tasks on a Dask cluster: the shared data shipped once, one future per task.

Every engine task is a tuple such as ``(job, chunk)`` whose first part (the cohort, the
unfitted models, the horizons) is the same object in every task. Pickling it into every
task sends it through the scheduler once per task; here each part that is the same object
in every task is scattered to the workers once (``client.scatter(..., broadcast=True)``)
and each task carries only a reference to it plus its own small part (row indices, seeds).
Tasks are submitted straight to the client (``client.submit``), without joblib's Dask
backend in between, and gathered in task order, so the result list is the one a serial
loop gives: every task is a pure function of its inputs.

The cluster ``scheduler="local"`` starts (:func:`local_cluster`) is set up as the
processes backend is: one single-threaded worker process per worker, BLAS/OpenMP pools of
one thread (each task also runs inside ``threadpool_limits(1)``), and glibc's own memory
allocator settings. Dask's nanny starts its workers with ``MALLOC_TRIM_THRESHOLD_=65536``
(``distributed.nanny.pre-spawn-environ``, so that freed memory goes back to the system
sooner). Setting it switches off glibc's sliding mmap threshold: every array over 128 KiB
is then a fresh memory map whose pages the kernel zero-fills on first touch, and freeing it
unmaps it. A validation replicate allocates and frees a few GB of such temporaries (design
matrices of a bootstrap sample, path solver work arrays); measured on the bench cohort
(2026-12-04, load 3), it took 0.5 million page faults and 1.2 s of system CPU per
replicate in a default Dask worker against 20-26 thousand and 0.06-0.08 s without the
setting, and 1.1 s in a loky worker given the same setting. The local cluster leaves it
unset (unless this process has it set: the workers inherit this process's environment), and
puts back this process's environment after the nannies have written their settings into it
(they do so before starting each worker; left there, the variable would reach every
process started later, loky's workers included). :func:`run_on_dask` warns when the workers
of a cluster of your own run with it. Its scheduler and workers
also keep their housekeeping quiet (:data:`WORKER_CONFIG`): no sampling profiler (it walks
the running task's Python stack every 10 ms), and the event-loop probe, memory monitor and
system monitor woken every 1-2 s instead of every 20, 100 and 500 ms. Measured on the shared
2-core machine (2026-12-03, load 40): a default worker used 2.2% of a core idle and 24% more
CPU than its task's own thread during a 4 s CPU-bound task; with these settings 0.4% and 5%
(scratch measurement; the side-by-side numbers are in bench/bench_backends.py). For a cluster
of your own, start the workers the same way, e.g.
``DASK_DISTRIBUTED__WORKER__PROFILE__ENABLED=False DASK_DISTRIBUTED__ADMIN__TICK__INTERVAL=1s
DASK_DISTRIBUTED__NANNY__PRE_SPAWN_ENVIRON='{"MALLOC_TRIM_THRESHOLD_": None}'
dask worker tcp://host:8786 --nthreads 1 --nworkers N`` (from a shell without
``MALLOC_TRIM_THRESHOLD_`` set). Several threads per worker run
Python-heavy fits under one interpreter lock; a warning says so.
"""

from __future__ import annotations

import os
import warnings
from collections.abc import Callable, Sequence
from contextlib import contextmanager

from threadpoolctl import threadpool_limits

from workbench.errors import SpecError

__all__ = ["WORKER_CONFIG", "WORKER_ENV", "local_cluster", "run_on_dask"]

#: Dask settings for a local cluster of validation workers (see the module notes).
WORKER_CONFIG = {
    "distributed.worker.profile.enabled": False,
    "distributed.admin.tick.interval": "1s",  # event-loop latency probe, 20 ms by default
    "distributed.worker.memory.monitor-interval": "1s",  # 100 ms by default
    "distributed.admin.system-monitor.interval": "2s",  # 500 ms by default
}
#: Thread pools of one thread, set before a worker process imports numpy (as loky does).
WORKER_ENV = {k: "1" for k in ("OMP_NUM_THREADS", "MKL_NUM_THREADS", "OPENBLAS_NUM_THREADS", "NUMBA_NUM_THREADS")}
#: Set by Dask's nanny by default; unset here (``None`` drops it): see the module notes.
MALLOC_VAR = "MALLOC_TRIM_THRESHOLD_"

_ATOMS = (type(None), bool, int, float, complex, str, bytes)


def _import_distributed():
    try:
        import distributed
    except ImportError:  # pragma: no cover - depends on the environment
        raise SpecError(
            "the 'dask' backend needs the packages dask and distributed, which are not installed. "
            "Install them (pip install 'dask[distributed]') or choose backend='processes'."
        ) from None
    return distributed


def local_cluster(workers: int, **kwargs):
    """A ``distributed.LocalCluster`` set up for validation replicates.

    ``workers`` single-threaded worker processes with one-thread BLAS pools, the sampling
    profiler off and slower housekeeping (see the module notes). ``kwargs`` go to
    ``LocalCluster``.
    """
    import dask

    distributed = _import_distributed()
    pre = dict(dask.config.get("distributed.nanny.pre-spawn-environ", {}) or {})
    pre.update(WORKER_ENV)
    pre[MALLOC_VAR] = None
    # the scheduler and the nannies read the configuration when they are made (the nannies pass
    # their copy to the worker processes): set it around the cluster's start
    with dask.config.set({**WORKER_CONFIG, "distributed.nanny.pre-spawn-environ": pre}), _environ_kept():
        opts = {"n_workers": int(workers), "threads_per_worker": 1, "processes": True, **kwargs}
        return distributed.LocalCluster(**opts)


@contextmanager
def _environ_kept():
    """Put back ``os.environ`` as it was: a local nanny writes its workers' settings into it."""
    before = dict(os.environ)
    try:
        yield
    finally:
        for key in [k for k in os.environ if k not in before]:
            del os.environ[key]
        os.environ.update({k: v for k, v in before.items() if os.environ.get(k) != v})


def _client(scheduler, workers: int):
    """(client, things to close) for a scheduler address, a Client or ``"local"``."""
    distributed = _import_distributed()
    if scheduler is None:
        raise SpecError(
            "the 'dask' backend needs scheduler='tcp://host:8786' (the address of a running Dask "
            "scheduler), an existing distributed.Client, or scheduler='local' for a local cluster."
        )
    if isinstance(scheduler, distributed.Client):
        return scheduler, ()
    if scheduler == "local":
        cluster = local_cluster(workers)
        client = distributed.Client(cluster)
        return client, (client, cluster)
    client = distributed.Client(scheduler)
    return client, (client,)


def _split(tasks: Sequence) -> tuple[list[int], list]:
    """Positions of the tuple parts that are one object (not a plain scalar) in every task."""
    if len(tasks) < 2 or not all(isinstance(t, tuple) for t in tasks):
        return [], []
    width = len(tasks[0])
    if any(len(t) != width for t in tasks):
        return [], []
    first = tasks[0]
    pos = [i for i in range(width)
           if not isinstance(first[i], _ATOMS) and all(t[i] is first[i] for t in tasks)]
    return pos, [first[i] for i in pos]


def _call(fn: Callable, shared: dict, own: tuple, width: int):
    """Worker side: rebuild the task tuple and run it with one-thread BLAS pools."""
    parts = iter(own)
    task = tuple(shared[i] if i in shared else next(parts) for i in range(width))
    with threadpool_limits(limits=1):
        return fn(task)


def _call_whole(fn: Callable, task):
    with threadpool_limits(limits=1):
        return fn(task)


def _check_threads(client) -> None:
    try:
        nthreads = client.nthreads()
    except Exception:  # noqa: BLE001 - informative only
        return
    many = {w: n for w, n in nthreads.items() if n > 1}
    if many:
        warnings.warn(
            f"{len(many)} of {len(nthreads)} Dask workers run several threads each (up to "
            f"{max(many.values())}); validation fits are mostly Python and numpy work that one "
            "process runs one at a time, so start the workers with --nthreads 1 (and more "
            "--nworkers) for full use of the cores.", RuntimeWarning, stacklevel=3)


def _worker_malloc_setting():
    return os.environ.get(MALLOC_VAR)


def _check_malloc(client) -> None:
    try:
        values = client.run(_worker_malloc_setting)
    except Exception:  # noqa: BLE001 - informative only
        return
    tuned = {w: v for w, v in values.items() if v is not None}
    if tuned:
        warnings.warn(
            f"{len(tuned)} of {len(values)} Dask workers run with {MALLOC_VAR}="
            f"{next(iter(tuned.values()))} (Dask's nanny sets it by default), which makes every "
            "large numpy array a fresh memory map: validation replicates then take 1.5 to 2 times "
            "the CPU (page faults). Start the workers with the Dask setting "
            f"distributed.nanny.pre-spawn-environ.{MALLOC_VAR} = null (in a shell without {MALLOC_VAR}), "
            "or use scheduler='local'.", RuntimeWarning, stacklevel=3)


def run_on_dask(fn: Callable, tasks: Sequence, scheduler, workers: int, collect: Callable[[list], list]) -> list:
    """Run ``fn`` on every task on a Dask cluster; ``collect`` gets the results in task order.

    ``collect(iterable)`` is fed the results in task order as they can be released (so a
    progress callback sees them), and its return value is returned.
    """
    distributed = _import_distributed()
    client, owned = _client(scheduler, workers)
    futures, scattered = [], []
    try:
        _check_threads(client)
        _check_malloc(client)
        pos, objs = _split(tasks)
        if pos:
            scattered = client.scatter(objs, broadcast=True, hash=False)
            shared = dict(zip(pos, scattered, strict=True))
            width = len(tasks[0])
            futures = [
                client.submit(_call, fn, shared, tuple(x for i, x in enumerate(t) if i not in shared), width,
                              pure=False)
                for t in tasks
            ]
        else:
            futures = [client.submit(_call_whole, fn, t, pure=False) for t in tasks]

        def in_order():
            ready: dict = {}
            index = {f.key: k for k, f in enumerate(futures)}
            nxt = 0
            for fut in distributed.as_completed(futures):
                ready[index[fut.key]] = fut.result()  # re-raises a task's exception here
                while nxt in ready:
                    yield ready.pop(nxt)
                    nxt += 1

        return collect(in_order())
    finally:
        if futures or scattered:
            client.cancel(futures + list(scattered))
        for obj in owned:
            obj.close()
