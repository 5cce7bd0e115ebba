"""Running replicates: fit every model on training rows, evaluate on the evaluation rows.

A task is one resample (bootstrap replicate, cross-validation fold, held-out
centre); tasks are shipped to a backend in chunks (see :mod:`.backends`).
"""

from __future__ import annotations

import warnings
from collections import Counter
from collections.abc import Mapping
from dataclasses import dataclass

import numpy as np

from workbench.cohort.core import Cohort
from workbench.errors import ModelError
from workbench.models.base import get_params
from workbench.validation.evaluate import evaluate_pair, evaluate_predictions, prediction_times
from workbench.validation.plans import _seed_int
from workbench.validation.results import FitSummary


def _reseeded(model, seed: int | None):
    """Unfitted copy of ``model``; every ``random_state`` set to ``seed`` (if given)."""
    params = get_params(model)
    if seed is not None:
        for k, v in params.items():
            if k == "random_state":
                params[k] = int(seed)
            elif hasattr(v, "get_params") and hasattr(v, "set_params"):
                if "random_state" in v.get_params(deep=False):
                    from sklearn.base import clone

                    params[k] = clone(v).set_params(random_state=int(seed))
    return type(model)(**params)


def _has_unset_random_state(model) -> bool:
    params = get_params(model)
    for k, v in params.items():
        if k == "random_state" and v is None:
            return True
        if hasattr(v, "get_params") and v.get_params(deep=False).get("random_state", 0) is None:
            return True
    return False


@dataclass(frozen=True)
class _Job:
    """Everything a worker needs; shipped once per chunk of tasks."""

    cohort: Cohort
    models: dict
    horizons: np.ndarray
    grid: np.ndarray
    kw: dict
    reseed: bool
    own_censoring: bool = False  # by_centre: weights and null model from the held-out rows


@dataclass(frozen=True)
class _Task:
    index: int
    fold: int
    train_idx: np.ndarray
    test_idx: np.ndarray | None  # None: all rows
    eval_train: bool
    model_seed: int
    active: tuple[str, ...]
    oob_idx: np.ndarray | None = None  # bootstrap: rows of patients not drawn (out-of-bootstrap arm)
    outer: int = -1  # two-stage bootstrap: outer sample this task belongs to (-1: none)


def _fit_predict(job: _Job, name: str, seed: int | None, train: Cohort, evals: dict):
    model = _reseeded(job.models[name], seed if job.reseed else None)
    fitted = model.fit(train)
    fitted = model if fitted is None else fitted
    times = prediction_times(job.horizons, job.grid)
    preds = {arm: (fitted.predict_risk(c), fitted.predict_survival(c, times)) for arm, c in evals.items()}
    return fitted, preds


def _run_task(job: _Job, task: _Task) -> dict:
    train = job.cohort.take(task.train_idx)
    evals = {"test": job.cohort if task.test_idx is None else job.cohort.take(task.test_idx)}
    if task.eval_train:
        evals["train"] = train
    if task.oob_idx is not None:
        evals["oob"] = job.cohort.take(task.oob_idx)
    out = {"models": {}, "pairs": {}}
    curves = {}
    for name in task.active:
        rec = {"ok": False, "stage": "fit", "message": "", "selected": None, "warnings": Counter()}
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always")
            try:
                fitted, preds = _fit_predict(job, name, task.model_seed, train, evals)
                rec["selected"] = getattr(fitted, "selected_features_", None)
                rec["stage"] = "evaluate"
                for arm, (risk, curv) in preds.items():
                    y_cens = evals[arm].y if job.own_censoring and arm == "test" else train.y
                    try:
                        perf = evaluate_predictions(
                            risk, curv, y_cens, evals[arm].y, job.horizons, ibs_times=job.grid,
                            on_error="nan", model=name, **job.kw)
                    except Exception:
                        # the out-of-bootstrap rows are a small random set: too few of them to
                        # evaluate leaves that arm NaN (counted as dropped), not the replicate failed
                        if arm != "oob":
                            raise
                        rec[arm] = None
                        continue
                    rec[arm] = (perf.vector(), perf.net_benefit, perf.dropped)
                rec["ok"] = True
                curves[name] = {arm: p[1] for arm, p in preds.items() if rec[arm] is not None}
            except Exception as exc:  # noqa: BLE001 - every failure is counted and reported
                rec["message"] = f"{type(exc).__name__}: {exc}"
        rec["warnings"] = Counter(w.category.__name__ for w in caught)
        out["models"][name] = rec
    names = [m for m in task.active if m in curves]
    for i, base in enumerate(names):
        for new in names[i + 1:]:
            out["pairs"][(new, base)] = {
                arm: _pair_or_nan(curves[new], curves[base], evals, arm, job.horizons) for arm in evals
            }
    out["events"] = {arm: int(c.n_events) for arm, c in evals.items()}
    return out


def _pair_or_nan(new: dict, base: dict, evals: dict, arm: str, horizons) -> np.ndarray | None:
    if arm not in new or arm not in base:
        return None
    try:
        return evaluate_pair(new[arm], base[arm], evals[arm].y, horizons).vector()
    except Exception:
        if arm != "oob":
            raise
        return None


def _run_chunk(payload) -> list:
    job, tasks = payload
    return [_run_task(job, t) for t in tasks]


def _chunks(tasks: list, workers: int, backend: str) -> list[list]:
    # Ship the cohort once per chunk rather than once per replicate, but keep at least ten
    # chunks so that progress and cancellation are seen during the run. Serial runs (one
    # worker runs in this process too, see backends.run_tasks) ship nothing, so every
    # replicate is its own chunk: progress after each one, and a cancel acts within one.
    serial = backend == "serial" or (int(workers) == 1 and backend in ("processes", "threads"))
    n_chunks = len(tasks) if serial else min(len(tasks), max(10, 4 * int(workers)))
    n_chunks = max(1, n_chunks)
    bounds = np.linspace(0, len(tasks), n_chunks + 1).round().astype(int)
    return [tasks[a:b] for a, b in zip(bounds[:-1], bounds[1:], strict=True) if b > a]


def _apparent(cohort: Cohort, models: Mapping, horizons, grid, kw, seed_ss, prefitted=None, curves=None):
    perf, fits, preds = {}, {}, {}
    times = prediction_times(horizons, grid)
    for name, model in models.items():
        seed = _seed_int(seed_ss) if _has_unset_random_state(model) else None
        try:
            if prefitted is not None and name in prefitted:
                fitted = prefitted[name]
            else:
                fitted = _reseeded(model, seed)
                fitted = fitted.fit(cohort) or fitted
        except Exception as exc:
            raise ModelError(
                f"model {name!r} could not be fitted on all {cohort.n} patients of the cohort "
                f"({type(exc).__name__}: {exc}); fix this before validating it."
            ) from exc
        risk, curv = fitted.predict_risk(cohort), fitted.predict_survival(cohort, times)
        perf[name] = evaluate_predictions(
            risk, curv, cohort.y, cohort.y, horizons, ibs_times=grid, on_error="raise",
            model=name, **kw)
        preds[name] = curv
        fits[name] = _fit_summary(name, fitted)
    if curves is not None:
        curves.update(preds)
    pairs = _pairs(preds, cohort.y, horizons)
    return perf, fits, pairs


def _pairs(curves: dict, y, horizons) -> dict:
    names = list(curves)
    return {
        (new, base): evaluate_pair(curves[new], curves[base], y, horizons, model=new, baseline=base)
        for i, base in enumerate(names)
        for new in names[i + 1:]
    }


def _fit_summary(name: str, fitted) -> FitSummary:
    ll, k = getattr(fitted, "loglik_", None), getattr(fitted, "n_params_", None)
    try:
        terms = tuple(dict.fromkeys(t.term for t in fitted.describe().terms))
    except Exception:  # noqa: BLE001 - describe() is informative only here
        terms = None
    sel = getattr(fitted, "selected_features_", None)
    return FitSummary(
        model=name,
        loglik=None if ll is None else float(ll),
        n_params=None if k is None else int(k),
        terms=terms,
        selected=None if sel is None else tuple(sel),
    )
