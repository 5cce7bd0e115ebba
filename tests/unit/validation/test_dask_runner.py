"""The Dask route of the validation engine: shared data sent once, results in order, same as processes.

Data: GBSG2 (Schumacher et al. 1994, `sksurv.datasets.load_gbsg2`). The reference for the
validation results is the processes backend (joblib's loky workers) run with the same seed:
every replicate is a pure function of the data and its seed, so the two must agree to the
last bit (tolerance: exact equality, NaN equal to NaN).
"""

from __future__ import annotations

import os

import numpy as np
import pandas as pd
import pytest

from workbench.cohort import Cohort, make_outcome
from workbench.models.cox import ClinicalCox
from workbench.preprocess.clinical import PredictorSpec
from workbench.validation import validate
from workbench.validation.backends import run_tasks
from workbench.validation.dask_runner import _split

distributed = pytest.importorskip("distributed")

H = [730.0, 1460.0]


def _scaled(task):
    shared, k = task
    return float(shared["x"][k] * shared["scale"])


def test_split_finds_the_parts_every_task_shares():
    big = {"x": np.arange(5)}
    pos, objs = _split([(big, 1, "a"), (big, 2, "a"), (big, 3, "a")])
    assert pos == [0] and objs[0] is big  # plain scalars stay in the tasks, even when equal
    assert _split([(big, 1), ({"x": 1}, 2)]) == ([], [])  # equal but not the same object
    assert _split([big, big]) == ([], [])  # not tuples
    assert _split([(big, 1)]) == ([], [])  # one task: nothing to share


ENV_AROUND_START: dict = {}


@pytest.fixture(scope="module")
def cluster():
    from workbench.validation.dask_runner import local_cluster

    with pytest.MonkeyPatch.context() as mp:
        mp.delenv("MALLOC_TRIM_THRESHOLD_", raising=False)  # as in a plain shell
        before = dict(os.environ)
        with local_cluster(2, dashboard_address=None) as c:
            ENV_AROUND_START.update(before=before, after=dict(os.environ))
            yield c


def test_local_cluster_workers_single_threaded_with_quiet_housekeeping(cluster):
    with distributed.Client(cluster) as client:
        assert set(client.nthreads().values()) == {1}
        env = client.run(lambda: os.environ.get("NUMBA_NUM_THREADS"))
        assert set(env.values()) == {"1"}

        def profiling(dask_worker):
            return "profile" in dask_worker.periodic_callbacks

        assert not any(client.run(profiling).values())

        def housekeeping():
            import dask

            return (dask.config.get("distributed.admin.tick.interval"),
                    dask.config.get("distributed.worker.memory.monitor-interval"))

        assert set(client.run(housekeeping).values()) == {("1s", "1s")}


def test_local_cluster_workers_keep_glibc_allocator_defaults(cluster):
    # Dask's nanny sets MALLOC_TRIM_THRESHOLD_=65536 for its workers by default (distributed's
    # distributed.yaml, nanny.pre-spawn-environ); glibc's mallopt(3) documents that setting it turns
    # off the sliding mmap threshold, so large numpy temporaries are mapped and faulted afresh.
    import dask

    assert dask.config.get("distributed.nanny.pre-spawn-environ").get("MALLOC_TRIM_THRESHOLD_") is not None
    with distributed.Client(cluster) as client:
        env = client.run(lambda: os.environ.get("MALLOC_TRIM_THRESHOLD_"))
        assert set(env.values()) == {None}


def test_local_cluster_leaves_this_process_environment_alone(cluster):
    # the nannies of a local cluster run in this process and write their workers' settings
    # (thread counts, PYTHONHASHSEED) into os.environ before starting them
    assert ENV_AROUND_START["after"] == ENV_AROUND_START["before"]


def test_workers_with_the_trim_setting_are_warned_about(cluster):
    with distributed.Client(cluster) as client:
        client.run(lambda: os.environ.update(MALLOC_TRIM_THRESHOLD_="65536"))
        try:
            with pytest.warns(RuntimeWarning, match="2 of 2 Dask workers run with MALLOC_TRIM_THRESHOLD_"):
                out = run_tasks(_scaled, [({"x": np.arange(3.0), "scale": 2.0}, k) for k in range(3)],
                                backend="dask", scheduler=client, workers=2)
        finally:
            client.run(lambda: os.environ.pop("MALLOC_TRIM_THRESHOLD_", None))
    assert out == [0.0, 2.0, 4.0]


def test_shared_part_scattered_once_results_in_task_order(cluster, monkeypatch):
    shared = {"x": np.arange(20.0) ** 2, "scale": 0.5}
    tasks = [(shared, k) for k in range(8)]
    seen = []
    with distributed.Client(cluster) as client:
        calls = []
        real = client.scatter
        monkeypatch.setattr(client, "scatter", lambda data, **kw: calls.append((len(data), kw)) or real(data, **kw))
        out = run_tasks(_scaled, tasks, backend="dask", scheduler=client, workers=2,
                        progress=lambda d, t: seen.append((d, t)))
    assert out == [k * k * 0.5 for k in range(8)]  # what a serial loop gives, in the same order
    assert calls == [(1, {"broadcast": True, "hash": False})]
    assert seen[-1] == (8, 8) and [d for d, _ in seen] == list(range(1, 9))


def test_dask_equals_processes_for_a_seed(cluster):
    from sksurv.datasets import load_gbsg2

    X, y = load_gbsg2()
    X = X.reset_index(drop=True)
    clin = pd.DataFrame({c: X[c].astype(str) if X[c].dtype.name == "category" else X[c] for c in X.columns})
    feats = pd.DataFrame({c: X[c].astype(float) for c in ("age", "tsize")})
    cohort = Cohort(ids=np.array([f"G{i}" for i in range(len(X))]), y=make_outcome(y["time"], y["cens"]),
                    clinical=clin, features=feats, time_unit="days")
    specs = (PredictorSpec("pnodes"), PredictorSpec("tgrade", kind="categorical", reference="I"))
    models = {"nodes": ClinicalCox(specs[:1]), "nodes_grade": ClinicalCox(specs)}
    kw = {"replicates": 4, "random_state": 7, "calibration": False}
    ref = validate(models, cohort, H, backend="processes", workers=2, **kw)
    res = validate(models, cohort, H, backend="dask", scheduler=cluster.scheduler_address, workers=2, **kw)
    for m in models:
        for arm in ("train", "test"):
            a, b = getattr(ref.replicates[m], arm), getattr(res.replicates[m], arm)
            assert a.shape[0] == 4 and np.array_equal(a, b, equal_nan=True), (m, arm)
    key = ("nodes_grade", "nodes")
    assert np.array_equal(ref.pair_replicates[key].test, res.pair_replicates[key].test, equal_nan=True)
    # the replicates differ from one another (each its own bootstrap sample), so a backend that
    # mixed up seeds or task order could not pass the check above
    test = ref.replicates["nodes"].test
    assert all(not np.array_equal(test[0], test[k], equal_nan=True) for k in range(1, 4))
