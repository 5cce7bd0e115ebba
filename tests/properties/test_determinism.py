"""Validation results for a seed do not depend on the backend or the number of workers.

Every replicate is a pure function of the data and its seed (numpy SeedSequence
children), and each task runs with single-threaded BLAS, so serial, thread,
process and Dask runs must agree to the last bit. Data: GBSG2 (Schumacher et al.
1994, `sksurv.datasets.load_gbsg2`).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from workbench.cohort import Cohort, make_outcome
from workbench.models.base import as_times
from workbench.models.cox import ClinicalCox
from workbench.predictions import RiskScores, SurvivalCurves
from workbench.preprocess.clinical import PredictorSpec
from workbench.stats.coxph import fit_coxph, linear_predictor, predict_survival
from workbench.validation import validate

H = [730.0, 1460.0]


class RandomSubsetCox:
    """Cox on a random subset of the numeric columns: uses its random_state in fit."""

    def __init__(self, k=2, random_state=None, name="subset"):
        self.k = k
        self.random_state = random_state
        self.name = name

    def fit(self, cohort):
        rng = np.random.default_rng(self.random_state)
        cols = sorted(rng.choice(list(cohort.features.columns), self.k, replace=False))
        self.selected_features_ = tuple(cols)
        self.fit_ = fit_coxph(cohort.features[cols].to_numpy(float), cohort.time, cohort.event,
                              min_events_per_parameter=0)
        return self

    def predict_risk(self, cohort):
        X = cohort.features[list(self.selected_features_)].to_numpy(float)
        return RiskScores(linear_predictor(self.fit_, X), self.name)

    def predict_survival(self, cohort, times):
        t = as_times(times)
        X = cohort.features[list(self.selected_features_)].to_numpy(float)
        return SurvivalCurves(t, predict_survival(self.fit_, X, t), self.name)


@pytest.fixture(scope="module")
def setup():
    from sksurv.datasets import load_gbsg2

    X, y = load_gbsg2()
    X = X.reset_index(drop=True)
    clin = pd.DataFrame({c: X[c].astype(str) if X[c].dtype.name == "category" else X[c] for c in X.columns})
    feats = pd.DataFrame({c: X[c].astype(float) for c in ("age", "tsize", "pnodes", "progrec", "estrec")})
    cohort = Cohort(ids=np.array([f"G{i}" for i in range(len(X))]), y=make_outcome(y["time"], y["cens"]),
                    clinical=clin, features=feats, time_unit="days")
    specs = (PredictorSpec("pnodes"), PredictorSpec("tgrade", kind="categorical", reference="I"))
    models = {"clinical": ClinicalCox(specs), "subset": RandomSubsetCox(k=2)}
    return cohort, models


def _run(setup, **kw):
    cohort, models = setup
    # the two-stage interval too: its outer and inner samples must be as reproducible
    return validate(models, cohort, H, replicates=4, random_state=123, interval="two-stage",
                    outer_replicates=10, inner_replicates=1, **kw)


def _assert_identical(a, b):
    for m in a.models:
        ra, rb = a.replicates[m], b.replicates[m]
        for arr in ("train", "test", "nb_train", "nb_test", "oob"):
            if getattr(ra, arr) is None:
                assert getattr(rb, arr) is None, (m, arr)
                continue
            assert np.array_equal(getattr(ra, arr), getattr(rb, arr), equal_nan=True), (m, arr)
        assert np.array_equal(a.outer_estimates[m], b.outer_estimates[m], equal_nan=True), m
        assert np.array_equal(a.outer_net_benefit[m], b.outer_net_benefit[m], equal_nan=True), m
        for x, y in zip(a.estimates[m].values(), b.estimates[m].values(), strict=True):
            vx, vy = (np.array(list(vars(e).values())[1:8], dtype=float) for e in (x, y))
            assert x.name == y.name and np.array_equal(vx, vy, equal_nan=True), (m, x.name)
            assert (x.estimator, x.interval, x.note) == (y.estimator, y.interval, y.note)
        if m in a.selection:
            assert a.selection[m].frequency == b.selection[m].frequency
    for key in a.pair_replicates:
        assert np.array_equal(a.pair_replicates[key].train, b.pair_replicates[key].train, equal_nan=True)


@pytest.fixture(scope="module")
def serial(setup):
    return _run(setup, backend="serial")


def test_random_model_really_varies_between_replicates(serial):
    # Otherwise the determinism checks below would be trivially true for it.
    assert len(serial.selection["subset"].frequency) > 2


def test_processes_with_two_workers_equal_serial(setup, serial):
    _assert_identical(serial, _run(setup, backend="processes", workers=2))


def test_threads_equal_serial(setup, serial):
    _assert_identical(serial, _run(setup, backend="threads", workers=2))


def test_same_seed_same_result_different_seed_different(setup, serial):
    _assert_identical(serial, _run(setup, backend="serial"))
    cohort, models = setup
    other = validate(models, cohort, H, replicates=4, random_state=124, backend="serial")
    assert not np.array_equal(other.replicates["clinical"].train, serial.replicates["clinical"].train,
                              equal_nan=True)


@pytest.mark.slow
def test_local_dask_cluster_equals_serial(setup, serial):
    import distributed

    from workbench.validation.dask_runner import _environ_kept

    # a cluster of the user's own (Dask's defaults: the allocator warning is expected); its nannies write
    # their workers' settings into this process's environment, put back so later process pools don't inherit them
    with _environ_kept(), distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True,
                                                   dashboard_address=None) as cluster:
        with pytest.warns(RuntimeWarning, match="MALLOC_TRIM_THRESHOLD_"):
            res = _run(setup, backend="dask", scheduler=cluster.scheduler_address, workers=2)
    _assert_identical(serial, res)


def test_progress_reports_every_replicate(setup):
    seen = []
    cohort, models = setup
    validate(models, cohort, H, replicates=5, random_state=0, backend="threads", workers=2,
             progress=lambda done, total: seen.append((done, total)), calibration=False)
    assert seen[-1] == (5, 5) and all(t == 5 for _, t in seen)
    assert [d for d, _ in seen] == sorted(d for d, _ in seen)
