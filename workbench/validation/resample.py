"""The resampling engine: bootstrap optimism correction, repeated cross-validation,
leave-one-centre-out, and external validation.

Every replicate refits the WHOLE model on its training rows (each model's ``fit``
does its own preprocessing, harmonisation, feature selection and penalty
choice), so no step ever sees the rows it is judged on.

Reproducibility
---------------
All randomness comes from ``numpy.random.SeedSequence(random_state)``: one child
for the apparent fit, one per replicate (bootstrap indices, cross-validation
folds) and, inside each, one for the models. Every model parameter called
``random_state`` (the model's own, or that of an estimator among its parameters,
such as the signature inside a combined model) is set to a replicate-specific
integer when the model is cloned for a replicate (``reseed_models=True``). A
replicate is therefore a pure function of the data and its seed, and results are
identical to the last bit for a seed whatever the backend and number of workers.
Replicate ``b`` does not depend on the total number of replicates, so 50
replicates are the first 50 of 200.

Bootstrap estimates and intervals
---------------------------------
For a metric with apparent value A (fit and evaluate on all rows), replicate b
gives B_b (fit and evaluate on the bootstrap sample) and O_b (the same fit
evaluated on the original rows). optimism = mean_b(B_b - O_b) and the corrected
estimate is A - optimism (Harrell, Lee & Mark 1996). The 95% interval is the
percentile interval of B_b moved so that the mean of B maps to the corrected
estimate, [est + q_2.5(B) - mean(B), est + q_97.5(B) - mean(B)], a location-shifted
bootstrap interval (Noma et al. 2021, from memory). When the bootstrap-sample
performance is centred on the apparent value (mean(B) = A, as for Cox models)
this is the percentile interval of B shifted by the optimism. For flexible
models it is not: a forest fitted to a bootstrap sample, with its repeated
patients, fits that sample better than the original fit fits the original rows
(mean(B) > A), and shifting by the optimism alone would place the interval
above the corrected estimate. Why B and not O: B_b is the apparent performance
of the whole modelling process re-run on a new sample of the same size, so its
spread is the bootstrap estimate of the sampling variability of A; O_b is
evaluated on rows about 63% of which the model was trained on, a mixture that
understates the variability. The interval ignores the variability of the
optimism itself (small next to that of A), which only a double bootstrap would
capture. Where B has no spread (the calibration slope of an unpenalised Cox
model on its own training rows is always 1) the interval is NaN rather than of
zero width.

Cross-validation
----------------
Repeated stratified k-fold (folds by patient id, balanced for events): each
metric is averaged over the folds of a repeat; the estimate is the mean of the
repeat means and ``sd`` their standard deviation across repeats (no interval).

Leave-one-centre-out
--------------------
Internal-external validation (Royston, Parmar & Sylvester 2004): each centre in
turn is held out. The pooled estimate is the mean of the per-centre values
weighted by the number of events in each held-out centre; ``sd`` is the
event-weighted standard deviation across centres (heterogeneity, not a standard
error). Per-centre values are kept in ``replicates``.

References
----------
.. [1] Harrell FE, Lee KL, Mark DB. Multivariable prognostic models: issues in
       developing models, evaluating assumptions and adequacy, and measuring and
       reducing errors. Stat Med 1996;15:361-87.
.. [2] Steyerberg EW, Harrell FE. Prediction models need appropriate internal,
       internal-external, and external validation. J Clin Epidemiol 2016;69:245-7.
.. [3] Royston P, Parmar MKB, Sylvester R. Construction and validation of a
       prognostic model across several studies, with an application in
       superficial bladder cancer. Stat Med 2004;23:907-26.
.. [4] Efron B, Tibshirani RJ. An Introduction to the Bootstrap. Chapman & Hall, 1993.
.. [5] Noma H, Shinozaki T, Iba K, Teramukai S, Maruo K. Confidence intervals of
       prediction accuracy measures for multivariable prediction models based on
       the bootstrap-based optimism correction methods. Stat Med 2021;40:5691-701
       (from memory).
"""

from __future__ import annotations

import warnings
from collections import Counter
from collections.abc import Callable, Mapping
from dataclasses import dataclass, field

import numpy as np
import pandas as pd
from sklearn.model_selection import StratifiedGroupKFold

from workbench.cohort.core import Cohort
from workbench.errors import ModelError, SpecError
from workbench.models.base import get_params
from workbench.validation.backends import run_tasks
from workbench.validation.evaluate import (
    evaluate_pair,
    evaluate_predictions,
    ibs_grid,
    metric_names,
    pair_metric_names,
    prediction_times,
)

__all__ = [
    "FitSummary",
    "MetricEstimate",
    "ReplicateFailure",
    "ReplicateMetrics",
    "SelectionSummary",
    "ValidationResult",
    "validate",
    "validate_external",
]

METHODS = ("bootstrap", "cv", "by_centre")


# --------------------------------------------------------------------- results


@dataclass(frozen=True)
class ReplicateFailure:
    """A model that could not be fitted or evaluated in one replicate (fold: cv only)."""

    model: str
    replicate: int
    fold: int
    stage: str
    message: str


@dataclass(frozen=True)
class ReplicateMetrics:
    """Every per-replicate value of one model (or one model pair).

    Attributes
    ----------
    names : tuple of str
        Metric names (columns).
    train : ndarray of shape (n_rows, n_metrics) or None
        Bootstrap: performance on the bootstrap sample itself (B); external:
        performance on resampled external rows; else None.
    test : ndarray of shape (n_rows, n_metrics) or None
        Bootstrap: on the original rows (O); cv: on the held-out fold;
        by_centre: on the held-out centre; external: None.
    nb_train, nb_test : ndarray of shape (n_rows, n_horizons, n_thresholds) or None
        Decision-curve net benefit, same arms (models only).
    replicate : ndarray of int
        Bootstrap replicate, cv repeat, or centre number per row.
    fold : ndarray of int or None
        Fold within the repeat (cv only).
    ok : ndarray of bool
        False where the model could not be fitted or evaluated (row all NaN).
    events : ndarray of int
        Events among the evaluation rows of ``test`` (``train`` for external).
    """

    names: tuple[str, ...]
    train: np.ndarray | None
    test: np.ndarray | None
    nb_train: np.ndarray | None
    nb_test: np.ndarray | None
    replicate: np.ndarray
    fold: np.ndarray | None
    ok: np.ndarray
    events: np.ndarray

    def column(self, name: str, arm: str = "test") -> np.ndarray:
        """Values of one metric across rows of one arm (``"train"`` or ``"test"``)."""
        return getattr(self, arm)[:, self.names.index(name)]


@dataclass(frozen=True)
class MetricEstimate:
    """One validated metric.

    Attributes
    ----------
    name : str
    apparent : float
        Fit and evaluate on all rows.
    optimism : float
        Bootstrap mean of (B - O); NaN for other methods.
    estimate : float
        Bootstrap: apparent - optimism; cv: mean of repeat means; by_centre:
        event-weighted mean over centres; external: value on the external cohort.
    sd : float
        Bootstrap/external: SD of B; cv: SD of the repeat means; by_centre:
        event-weighted SD across centres.
    ci_lower, ci_upper : float
        Bootstrap: percentile interval of B re-centred on the estimate (NaN where B
        has no spread); external: percentile interval; NaN for cv and by_centre.
    n_used : int
        Replicates (folds, centres) that contributed.
    """

    name: str
    apparent: float
    optimism: float
    estimate: float
    sd: float
    ci_lower: float
    ci_upper: float
    n_used: int


@dataclass(frozen=True)
class SelectionSummary:
    """How often each imaging feature was kept by a model's refits.

    Attributes
    ----------
    model : str
    n_fits : int
        Successful replicate fits that reported ``selected_features_``.
    frequency : dict of str to float
        Share of those fits that kept each feature, highest first.
    n_selected : ndarray of int
        Number of features kept in each of those fits.
    apparent : tuple of str
        Features kept by the fit on all rows.
    """

    model: str
    n_fits: int
    frequency: dict
    n_selected: np.ndarray
    apparent: tuple[str, ...] = ()

    def to_frame(self) -> pd.DataFrame:
        """One row per feature: share of refits that kept it, and whether the apparent fit did."""
        return pd.DataFrame(
            {
                "feature": list(self.frequency),
                "frequency": list(self.frequency.values()),
                "in_apparent_fit": [f in self.apparent for f in self.frequency],
            }
        )


@dataclass(frozen=True)
class FitSummary:
    """What the engine keeps of an apparent fit (no training data).

    ``loglik`` and ``n_params`` come from the model's ``loglik_`` and
    ``n_params_`` (Cox models), ``terms`` from ``describe()``.
    """

    model: str
    loglik: float | None
    n_params: int | None
    terms: tuple[str, ...] | None
    selected: tuple[str, ...] | None


@dataclass(frozen=True)
class ValidationResult:
    """Everything a validation run measured.

    Attributes
    ----------
    method : {"bootstrap", "cv", "by_centre", "external"}
    models : tuple of str
    horizons : ndarray
    time_unit : str
    n, n_events : int
        Size of the cohort the apparent fits were evaluated on.
    metric_names, pair_metric_names : tuple of str
    apparent : dict of str to ModelPerformance
    apparent_pairs : dict of (model, baseline) to PairPerformance
        For every pair of models, later model in ``models`` against earlier.
    fits : dict of str to FitSummary
    estimates : dict of str to dict of str to MetricEstimate
    pair_estimates : dict of (model, baseline) to dict of str to MetricEstimate
    replicates : dict of str to ReplicateMetrics
    pair_replicates : dict of (model, baseline) to ReplicateMetrics
    n_replicates : dict of str to int
        Replicates (repeats for cv, centres) each model was asked to run.
    failures : dict of str to int
    failure_log : tuple of ReplicateFailure
    dropped_metrics : dict of str to dict of str to int
        Per model, per metric: successful replicates where the metric was
        undefined (e.g. horizon outside the follow-up of a fold).
    selection : dict of str to SelectionSummary
    warning_counts : dict of str to dict of str to int
        Per model, warning categories raised in its replicate fits and evaluations.
    centres : tuple of str
        Held-out centres, in row order of ``replicates`` (by_centre only).
    conf_level : float
    seed_entropy : int
        Entropy of the root SeedSequence; pass it as ``random_state`` to repeat the run.
    settings : dict
        Method settings (replicates, folds, repeats, backend, workers).
    notes : tuple of str
    """

    method: str
    models: tuple[str, ...]
    horizons: np.ndarray
    time_unit: str
    n: int
    n_events: int
    metric_names: tuple[str, ...]
    pair_metric_names: tuple[str, ...]
    apparent: dict
    apparent_pairs: dict
    fits: dict
    estimates: dict
    pair_estimates: dict
    replicates: dict
    pair_replicates: dict
    n_replicates: dict
    failures: dict
    failure_log: tuple
    dropped_metrics: dict
    selection: dict
    warning_counts: dict
    centres: tuple[str, ...] = ()
    conf_level: float = 0.95
    seed_entropy: int = 0
    settings: dict = field(default_factory=dict)
    notes: tuple[str, ...] = ()

    def summary_frame(self) -> pd.DataFrame:
        """One row per model and metric with apparent, optimism, estimate, SD and interval."""
        rows = [
            {"model": m, **vars(e)} for m in self.models for e in self.estimates[m].values()
        ]
        return pd.DataFrame(rows).rename(columns={"name": "metric"})


# -------------------------------------------------------------------- helpers


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


def _seed_int(ss: np.random.SeedSequence) -> int:
    return int(ss.generate_state(1, np.uint32)[0])


def _root(random_state) -> np.random.SeedSequence:
    if isinstance(random_state, np.random.SeedSequence):
        return random_state
    if random_state is not None and (int(random_state) != random_state or random_state < 0):
        raise SpecError(f"random_state must be a non-negative whole number or None, got {random_state!r}.")
    return np.random.SeedSequence(None if random_state is None else int(random_state))


@dataclass(frozen=True)
class _Job:
    """Everything a worker needs; shipped once per chunk of tasks."""

    cohort: Cohort
    models: dict
    horizons: np.ndarray
    grid: np.ndarray
    kw: dict
    reseed: bool


@dataclass(frozen=True)
class _Task:
    index: int
    fold: int
    train_idx: np.ndarray
    test_idx: np.ndarray | None  # None: all rows
    eval_train: bool
    model_seed: int
    active: tuple[str, ...]


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
                    perf = evaluate_predictions(
                        risk, curv, train.y, evals[arm].y, job.horizons, ibs_times=job.grid,
                        on_error="nan", model=name, **job.kw)
                    rec[arm] = (perf.vector(), perf.net_benefit, perf.dropped)
                rec["ok"] = True
                curves[name] = {arm: p[1] for arm, p in preds.items()}
            except Exception as exc:  # noqa: BLE001 - every failure is counted and reported
                rec["message"] = f"{type(exc).__name__}: {exc}"
        rec["warnings"] = Counter(w.category.__name__ for w in caught)
        out["models"][name] = rec
    names = [m for m in task.active if m in curves]
    for i, base in enumerate(names):
        for new in names[i + 1:]:
            out["pairs"][(new, base)] = {
                arm: evaluate_pair(curves[new][arm], curves[base][arm], evals[arm].y, job.horizons).vector()
                for arm in evals
            }
    out["events"] = {arm: int(c.n_events) for arm, c in evals.items()}
    return out


def _run_chunk(payload) -> list:
    job, tasks = payload
    return [_run_task(job, t) for t in tasks]


def _chunks(tasks: list, workers: int, backend: str) -> list[list]:
    # Ship the cohort once per chunk rather than once per replicate, but keep at least ten
    # chunks so that progress and cancellation are seen during the run. Serial runs ship
    # nothing, so every replicate is its own chunk.
    n_chunks = len(tasks) if backend == "serial" else min(len(tasks), max(10, 4 * int(workers)))
    n_chunks = max(1, n_chunks)
    bounds = np.linspace(0, len(tasks), n_chunks + 1).round().astype(int)
    return [tasks[a:b] for a, b in zip(bounds[:-1], bounds[1:], strict=True) if b > a]


def _apparent(cohort: Cohort, models: Mapping, horizons, grid, kw, seed_ss, prefitted=None):
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


def _copy_seed(ss: np.random.SeedSequence) -> np.random.SeedSequence:
    # spawn() advances a SeedSequence; work on a copy so a caller's object can be reused.
    return np.random.SeedSequence(ss.entropy, spawn_key=ss.spawn_key, pool_size=ss.pool_size)


# ----------------------------------------------------------------- the plans


def _bootstrap_plan(n: int, replicates: int, rep_root) -> list[tuple[np.ndarray, int]]:
    plan = []
    for child in rep_root.spawn(int(replicates)):
        idx_ss, model_ss = child.spawn(2)
        plan.append((np.random.default_rng(idx_ss).integers(0, n, n), _seed_int(model_ss)))
    return plan


def _cv_plan(cohort: Cohort, folds: int, repeats: int, rep_root) -> list[tuple[int, int, np.ndarray, np.ndarray, int]]:
    n_patients = np.unique(cohort.ids).size
    if n_patients < folds:
        raise SpecError(
            f"{folds}-fold cross-validation needs at least {folds} patients; the cohort has {n_patients}."
        )
    plan = []
    for r, child in enumerate(rep_root.spawn(int(repeats))):
        fold_ss, model_ss = child.spawn(2)
        splitter = StratifiedGroupKFold(n_splits=int(folds), shuffle=True, random_state=_seed_int(fold_ss))
        seeds = [_seed_int(s) for s in model_ss.spawn(int(folds))]
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", UserWarning)  # fewer events than folds in a class
            splits = splitter.split(np.zeros(cohort.n), cohort.event, cohort.ids)
            for f, (tr, te) in enumerate(splits):
                plan.append((r, f, tr, te, seeds[f]))
    return plan


def cv_splits(cohort: Cohort, *, folds: int = 5, repeats: int = 10, random_state=None) -> list:
    """The cross-validation splits :func:`validate` uses for ``method="cv"``.

    Folds are formed from patient ids (every row of a patient in one fold) and
    balanced for events; each repeat reshuffles.

    Returns
    -------
    list of (repeat, fold, train_idx, test_idx)
    """
    rep_root = _root(random_state).spawn(2)[1]
    return [(r, f, tr, te) for r, f, tr, te, _ in _cv_plan(cohort, folds, repeats, rep_root)]


# ---------------------------------------------------------------- estimation


def _percentiles(v: np.ndarray, conf_level: float) -> tuple[float, float]:
    if v.size < 2:
        return np.nan, np.nan
    a = (1.0 - conf_level) / 2.0
    lo, hi = np.quantile(v, [a, 1.0 - a])
    return float(lo), float(hi)


def _sd(v: np.ndarray) -> float:
    return float(np.std(v, ddof=1)) if v.size >= 2 else np.nan


def _estimates(method: str, apparent: np.ndarray, rm: ReplicateMetrics, conf_level: float) -> dict:
    out = {}
    for j, name in enumerate(rm.names):
        a = float(apparent[j])
        opt, est, sd, lo, hi, used = np.nan, np.nan, np.nan, np.nan, np.nan, 0
        if method == "bootstrap":
            b, o = rm.train[rm.ok, j], rm.test[rm.ok, j]
            keep = np.isfinite(b) & np.isfinite(o)
            b, o, used = b[keep], o[keep], int(keep.sum())
            if used:
                opt = float(np.mean(b - o))
                est, sd = a - opt, _sd(b)
                tiny = 1e-9 * max(1.0, abs(a))
                if sd > tiny:
                    # percentile interval of B, moved so that it is centred where B's mean
                    # maps to the corrected estimate (see the module notes)
                    lo, hi = (x - float(np.mean(b)) + est for x in _percentiles(b, conf_level))
                elif not _sd(o) > tiny:
                    lo = hi = est  # nothing varies at all (e.g. a model compared with itself)
                # else B has no spread but O does (an unpenalised Cox model's slope on its own
                # training rows is always 1): a zero-width interval would mislead, leave NaN.
        elif method == "external":
            b = rm.train[rm.ok, j]
            b = b[np.isfinite(b)]
            used, est, sd = b.size, a, _sd(b)
            lo, hi = _percentiles(b, conf_level)
        elif method == "cv":
            v, rep = rm.test[:, j], rm.replicate
            keep = rm.ok & np.isfinite(v)
            used = int(keep.sum())
            means = np.array([v[keep & (rep == r)].mean() for r in np.unique(rep[keep])])
            if means.size:
                est, sd = float(means.mean()), _sd(means)
        else:  # by_centre: event-weighted over held-out centres
            v, w = rm.test[:, j], rm.events.astype(float)
            keep = rm.ok & np.isfinite(v) & (w > 0)
            used = int(keep.sum())
            if used:
                est = float(np.average(v[keep], weights=w[keep]))
                sd = float(np.sqrt(np.average((v[keep] - est) ** 2, weights=w[keep]))) if used > 1 else np.nan
        out[name] = MetricEstimate(name, a, opt, float(est), float(sd), float(lo), float(hi), int(used))
    return out


def _model_metrics(name, tasks, outputs, arms, names, k, m, with_fold) -> ReplicateMetrics:
    rows = [(t, o["models"][name], o["events"]) for t, o in zip(tasks, outputs, strict=True)
            if name in o["models"]]
    vals = {a: np.full((len(rows), len(names)), np.nan) for a in arms}
    nbs = {a: np.full((len(rows), k, m), np.nan) for a in arms}
    for i, (_, rec, _) in enumerate(rows):
        if rec["ok"]:
            for a in arms:
                vals[a][i], nbs[a][i] = rec[a][0], rec[a][1]
    ev_arm = "test" if "test" in arms else "train"
    return ReplicateMetrics(
        names=names, train=vals.get("train"), test=vals.get("test"),
        nb_train=nbs.get("train"), nb_test=nbs.get("test"),
        replicate=np.array([t.index for t, _, _ in rows], dtype=int),
        fold=np.array([t.fold for t, _, _ in rows], dtype=int) if with_fold else None,
        ok=np.array([rec["ok"] for _, rec, _ in rows], dtype=bool),
        events=np.array([ev[ev_arm] for _, _, ev in rows], dtype=int),
    )


def _pair_metrics(key, tasks, outputs, arms, names, with_fold) -> ReplicateMetrics:
    # A pair row exists only where both models were fitted and evaluated.
    rows = [(t, o["pairs"][key], o["events"]) for t, o in zip(tasks, outputs, strict=True)
            if key in o["pairs"]]
    vals = {a: np.array([p[a] for _, p, _ in rows]).reshape(len(rows), len(names)) for a in arms}
    ev_arm = "test" if "test" in arms else "train"
    return ReplicateMetrics(
        names=names, train=vals.get("train"), test=vals.get("test"), nb_train=None, nb_test=None,
        replicate=np.array([t.index for t, _, _ in rows], dtype=int),
        fold=np.array([t.fold for t, _, _ in rows], dtype=int) if with_fold else None,
        ok=np.ones(len(rows), dtype=bool),
        events=np.array([ev[ev_arm] for _, _, ev in rows], dtype=int),
    )


def _summarise(method, tasks, outputs, models, n_rep, apparent, apparent_pairs, fits, horizons,
               arms, conf_level, max_failure_rate, unit):
    names = metric_names(horizons)
    pnames = pair_metric_names(horizons)
    first = next(iter(apparent.values()))
    k, m = first.net_benefit.shape
    with_fold = method == "cv"
    replicates, estimates, failures, dropped, selection, warn = {}, {}, {}, {}, {}, {}
    log = []
    for name in models:
        rm = _model_metrics(name, tasks, outputs, arms, names, k, m, with_fold)
        replicates[name] = rm
        estimates[name] = _estimates(method, apparent[name].vector(), rm, conf_level)
        recs = [(t, o["models"][name]) for t, o in zip(tasks, outputs, strict=True) if name in o["models"]]
        for t, rec in recs:
            if not rec["ok"]:
                log.append(ReplicateFailure(name, t.index, t.fold, rec["stage"], rec["message"]))
        failures[name] = int((~rm.ok).sum())
        nan_counts = Counter()
        for a in arms:
            block = getattr(rm, a)[rm.ok]
            for j, nm in enumerate(names):
                nan_counts[nm] += int(np.sum(~np.isfinite(block[:, j])))
        dropped[name] = {nm: c for nm, c in nan_counts.items() if c}
        warn[name] = dict(sum((rec["warnings"] for _, rec in recs), Counter()))
        sels = [rec["selected"] for _, rec in recs if rec["ok"] and rec["selected"] is not None]
        if sels:
            freq = Counter(f for s in sels for f in set(s))
            order = sorted(freq, key=lambda f: (-freq[f], f))
            selection[name] = SelectionSummary(
                model=name, n_fits=len(sels), frequency={f: freq[f] / len(sels) for f in order},
                n_selected=np.array([len(s) for s in sels], dtype=int),
                apparent=fits[name].selected or ())
    for name in models:
        total = int(replicates[name].ok.size)
        if total and failures[name] / total > max_failure_rate:
            msgs = next(f.message for f in log if f.model == name)
            raise ModelError(
                f"model {name!r} could not be fitted or evaluated in {failures[name]} of {total} "
                f"{unit} ({100 * failures[name] / total:.0f}%), more than the {100 * max_failure_rate:.0f}% "
                f"allowed, so its validation would be unreliable. First problem: {msgs}. Check that "
                "every resample has enough events for the model's terms (rare categories, "
                "strata without events), or simplify the model."
            )
    pair_reps, pair_est = {}, {}
    for key, pp in apparent_pairs.items():
        rm = _pair_metrics(key, tasks, outputs, arms, pnames, with_fold)
        pair_reps[key] = rm
        pair_est[key] = _estimates(method, pp.vector(), rm, conf_level)
    return dict(metric_names=names, pair_metric_names=pnames, replicates=replicates,
                estimates=estimates, failures=failures, failure_log=tuple(log),
                dropped_metrics=dropped, selection=selection, warning_counts=warn,
                pair_replicates=pair_reps, pair_estimates=pair_est)


# ------------------------------------------------------------------ the engine


def _check_models(models) -> dict:
    if not isinstance(models, Mapping) or not models:
        raise SpecError("models must be a non-empty dict of name -> model, e.g. {'clinical': ClinicalCox(...)}.")
    for name, m in models.items():
        for attr in ("fit", "predict_risk", "predict_survival"):
            if not callable(getattr(m, attr, None)):
                raise SpecError(
                    f"model {name!r} has no {attr}() method; models must follow the workbench model "
                    "protocol (fit(cohort), predict_risk(cohort), predict_survival(cohort, times))."
                )
    return dict(models)


def _replicate_counts(models, total: int, model_replicates) -> dict:
    counts = {name: int(total) for name in models}
    for name, r in (model_replicates or {}).items():
        if name not in counts:
            raise SpecError(f"model_replicates names {name!r}, which is not one of the models {list(counts)}.")
        if int(r) != r or r < 1:
            raise SpecError(f"model_replicates[{name!r}] must be a whole number of at least 1, got {r!r}.")
        counts[name] = min(int(r), int(total))
    return counts


def validate(
    models: Mapping[str, object],
    cohort: Cohort,
    horizons,
    *,
    method: str = "bootstrap",
    replicates: int = 200,
    folds: int = 5,
    repeats: int = 10,
    random_state=None,
    backend: str = "processes",
    workers: int = 1,
    scheduler=None,
    progress: Callable[[int, int], None] | None = None,
    model_replicates: Mapping[str, int] | None = None,
    tau: float | None = None,
    calibration: bool = True,
    thresholds=None,
    conf_level: float = 0.95,
    max_failure_rate: float = 0.10,
    reseed_models: bool = True,
    apparent_models: Mapping[str, object] | None = None,
) -> ValidationResult:
    """Internally validate unfitted models by refitting them in every resample.

    Parameters
    ----------
    models : dict of name to unfitted model
        Models following :class:`workbench.models.base.SurvivalModel`; they are
        never modified (each replicate fits a fresh copy).
    cohort : Cohort
    horizons : array-like
        Strictly increasing horizons in ``cohort.time_unit``, inside follow-up.
    method : {"bootstrap", "cv", "by_centre"}
        Optimism-corrected bootstrap, repeated k-fold cross-validation, or
        leave-one-centre-out (needs ``cohort.centre``). See the module notes.
    replicates : int, default 200
        Bootstrap replicates; 0 gives apparent performance only (estimates NaN).
    folds, repeats : int, default 5 and 10
        Cross-validation.
    random_state : int, SeedSequence or None
        Root seed; None draws fresh entropy (recorded in ``seed_entropy``).
    backend : {"processes", "threads", "serial", "dask"}
    workers : int
    scheduler : str or distributed.Client, optional
        Dask scheduler address, a client, or ``"local"`` (see :mod:`.backends`).
    progress : callable(done, total), optional
        Called as replicates finish (e.g. :func:`.backends.tqdm_progress`).
    model_replicates : dict of name to int, optional
        Fewer replicates for costly models (e.g. a forest): the model is
        refitted only in the first ``r`` bootstrap replicates (cv: repeats);
        comparisons use the replicates both models share. Recorded in ``notes``.
    tau, calibration, thresholds
        See :func:`workbench.validation.evaluate.evaluate_predictions`.
    conf_level : float, default 0.95
    max_failure_rate : float, default 0.10
        A model that cannot be fitted or evaluated in a larger share of its
        replicates is an error; below it failures are counted and reported.
    reseed_models : bool, default True
        Give every replicate's model copy its own ``random_state`` (see module notes).
    apparent_models : dict of name to fitted model, optional
        Models already fitted on all rows of ``cohort`` with the same settings (the
        caller's apparent fits); they are used as they are instead of being fitted
        again. Passing models fitted on other rows makes the apparent values wrong.

    Returns
    -------
    ValidationResult

    References
    ----------
    .. [1] Harrell FE, Lee KL, Mark DB. Stat Med 1996;15:361-87.
    .. [2] Steyerberg EW, Harrell FE. J Clin Epidemiol 2016;69:245-7.
    .. [3] Royston P, Parmar MKB, Sylvester R. Stat Med 2004;23:907-26.
    """
    models = _check_models(models)
    if method not in METHODS:
        raise SpecError(f"unknown validation method {method!r}; choose one of {', '.join(METHODS)}.")
    for nm, v, least in (("replicates", replicates, 0), ("folds", folds, 1), ("repeats", repeats, 1)):
        if int(v) != v or v < least:
            raise SpecError(f"{nm} must be a whole number of at least {least}, got {v!r}.")
    if method == "cv" and folds < 2:
        raise SpecError("cross-validation needs at least 2 folds.")
    if not 0.0 <= max_failure_rate < 1.0:
        raise SpecError(f"max_failure_rate must lie in [0, 1), got {max_failure_rate!r}.")
    root = _root(random_state)
    root = _copy_seed(root)
    app_ss, rep_root = root.spawn(2)
    h = np.unique(np.asarray(horizons, dtype=float))
    grid = ibs_grid(cohort.y, h)
    kw = {"tau": tau, "calibration": calibration, "thresholds": thresholds, "time_unit": cohort.time_unit}
    apparent, fits, apparent_pairs = _apparent(cohort, models, h, grid, kw, app_ss, apparent_models)

    notes, centres = [], ()
    if method == "bootstrap":
        n_rep = _replicate_counts(models, replicates, model_replicates) if replicates else dict.fromkeys(models, 0)
        plan = _bootstrap_plan(cohort.n, max(n_rep.values()), rep_root)
        if not replicates:
            notes.append("no bootstrap replicates were run: only apparent performance is available, "
                         "and it is optimistic; the validated estimates are left empty (NaN).")
        tasks = [
            _Task(b, 0, idx, None, True, seed, tuple(nm for nm in models if b < n_rep[nm]))
            for b, (idx, seed) in enumerate(plan)
        ]
        arms, unit = ("train", "test"), "bootstrap replicates"
    elif method == "cv":
        n_rep = _replicate_counts(models, repeats, model_replicates)
        plan = _cv_plan(cohort, folds, max(n_rep.values()), rep_root)
        tasks = [
            _Task(r, f, tr, te, False, seed, tuple(nm for nm in models if r < n_rep[nm]))
            for r, f, tr, te, seed in plan
        ]
        arms, unit = ("test",), "cross-validation folds"
    else:
        if cohort.centre is None:
            raise SpecError(
                "leave-one-centre-out validation needs the centre of every patient; give the cohort "
                "a centre column (in the study file: [data] centre = '...')."
            )
        centres = tuple(sorted(np.unique(cohort.centre)))
        if len(centres) < 2:
            raise SpecError(f"leave-one-centre-out validation needs at least 2 centres; found only {centres}.")
        if model_replicates:
            notes.append("model_replicates is ignored for by_centre: every centre is held out once.")
        n_rep = {nm: len(centres) for nm in models}
        seeds = [_seed_int(s) for s in rep_root.spawn(len(centres))]
        tasks = [
            _Task(i, 0, np.flatnonzero(cohort.centre != c), np.flatnonzero(cohort.centre == c), False,
                  seeds[i], tuple(models))
            for i, c in enumerate(centres)
        ]
        arms, unit = ("test",), "held-out centres"

    job = _Job(cohort, models, h, grid, kw, bool(reseed_models))
    chunks = _chunks(tasks, workers, backend)
    outputs = [
        o for chunk in run_tasks(
            _run_chunk, [(job, c) for c in chunks], backend=backend, workers=workers,
            scheduler=scheduler, progress=progress, weights=[len(c) for c in chunks])
        for o in chunk
    ]
    parts = _summarise(method, tasks, outputs, models, n_rep, apparent, apparent_pairs, fits, h,
                       arms, conf_level, max_failure_rate, unit)
    total = max(n_rep.values())
    for nm, r in n_rep.items():
        if 0 < r < total:
            notes.append(f"model {nm!r} was validated on the first {r} of {total} {unit.split()[0]} "
                         f"{'replicates' if method == 'bootstrap' else 'repeats'} (model_replicates).")
    for nm, c in parts["failures"].items():
        if c:
            notes.append(f"model {nm!r} could not be fitted or evaluated in {c} of {n_rep[nm]} {unit}; "
                         "those replicates are left out of its estimates (see failure_log).")
    return ValidationResult(
        method=method, models=tuple(models), horizons=h, time_unit=cohort.time_unit, n=cohort.n,
        n_events=cohort.n_events, apparent=apparent, apparent_pairs=apparent_pairs, fits=fits,
        n_replicates=n_rep, centres=centres, conf_level=conf_level, seed_entropy=int(root.entropy),
        settings={"replicates": int(replicates), "folds": int(folds), "repeats": int(repeats),
                  "backend": backend, "workers": int(workers), "calibration": bool(calibration),
                  "reseed_models": bool(reseed_models), "max_failure_rate": float(max_failure_rate)},
        notes=tuple(notes), **parts)


# --------------------------------------------------------------- external data


def _run_external_chunk(payload) -> list:
    preds, y_train, y_ext, horizons, grid, kw, tasks = payload
    out = []
    for idx, _ in tasks:
        y_b = y_ext[idx]
        rec_models, curves = {}, {}
        for name, (risk, curv) in preds.items():
            r_b, c_b = risk.take(idx), curv.take(idx)
            perf = evaluate_predictions(r_b, c_b, y_train, y_b, horizons, ibs_times=grid,
                                        on_error="nan", model=name, **kw)
            rec_models[name] = {"ok": True, "stage": "", "message": "", "selected": None,
                                "warnings": Counter(), "train": (perf.vector(), perf.net_benefit, ())}
            curves[name] = c_b
        names = list(preds)
        pairs = {(new, base): {"train": evaluate_pair(curves[new], curves[base], y_b, horizons).vector()}
                 for i, base in enumerate(names) for new in names[i + 1:]}
        out.append({"models": rec_models, "pairs": pairs, "events": {"train": int(y_b["event"].sum())}})
    return out


def validate_external(
    fitted_models: Mapping[str, object],
    train_cohort_y,
    external_cohort: Cohort,
    horizons,
    *,
    replicates: int = 200,
    random_state=None,
    tau: float | None = None,
    calibration: bool = True,
    thresholds=None,
    conf_level: float = 0.95,
    backend: str = "serial",
    workers: int = 1,
    scheduler=None,
    progress: Callable[[int, int], None] | None = None,
) -> ValidationResult:
    """Performance of fitted models on an external cohort, with bootstrap intervals.

    The models are applied unchanged. The estimate is the performance on the
    whole external cohort; the interval is the percentile interval over
    bootstrap resamples of the external patients (predictions fixed, no
    refitting). Censoring weights and the Brier null model come from the
    training outcome ``train_cohort_y``.

    Parameters
    ----------
    fitted_models : dict of name to fitted model
    train_cohort_y : structured ndarray
        Outcome of the development cohort the models were fitted on.
    external_cohort : Cohort
    horizons : array-like
    replicates : int, default 200
        Bootstrap resamples of the external rows; 0 gives no intervals.
    random_state, tau, calibration, thresholds, conf_level, backend, workers, scheduler, progress
        As in :func:`validate`.

    Returns
    -------
    ValidationResult
        ``method="external"``; ``replicates[name].train`` holds the resampled values.

    References
    ----------
    .. [1] Royston P, Altman DG. External validation of a Cox prognostic model:
           principles and methods. BMC Med Res Methodol 2013;13:33.
    """
    fitted_models = dict(fitted_models)
    if not fitted_models:
        raise SpecError("fitted_models is empty; give at least one fitted model.")
    h = np.unique(np.asarray(horizons, dtype=float))
    grid = ibs_grid(external_cohort.y, h)
    times = prediction_times(h, grid)
    kw = {"tau": tau, "calibration": calibration, "thresholds": thresholds,
          "time_unit": external_cohort.time_unit}
    preds = {nm: (m.predict_risk(external_cohort), m.predict_survival(external_cohort, times))
             for nm, m in fitted_models.items()}
    apparent = {
        nm: evaluate_predictions(r, c, train_cohort_y, external_cohort.y, h, ibs_times=grid,
                                 on_error="raise", model=nm, **kw)
        for nm, (r, c) in preds.items()
    }
    apparent_pairs = _pairs({nm: c for nm, (_, c) in preds.items()}, external_cohort.y, h)
    fits = {nm: _fit_summary(nm, m) for nm, m in fitted_models.items()}
    root = _copy_seed(_root(random_state))
    n = external_cohort.n
    plan = [(np.random.default_rng(s).integers(0, n, n), b)
            for b, s in enumerate(root.spawn(2)[1].spawn(int(replicates)))]
    tasks = [_Task(b, 0, idx, None, True, 0, tuple(fitted_models)) for idx, b in plan]
    chunks = _chunks(plan, workers, backend)
    outputs = [
        o for chunk in run_tasks(
            _run_external_chunk,
            [(preds, train_cohort_y, external_cohort.y, h, grid, kw, c) for c in chunks],
            backend=backend, workers=workers, scheduler=scheduler, progress=progress,
            weights=[len(c) for c in chunks])
        for o in chunk
    ]
    parts = _summarise("external", tasks, outputs, fitted_models, {}, apparent, apparent_pairs, fits,
                       h, ("train",), conf_level, 1.0, "external resamples")
    return ValidationResult(
        method="external", models=tuple(fitted_models), horizons=h,
        time_unit=external_cohort.time_unit, n=n, n_events=external_cohort.n_events,
        apparent=apparent, apparent_pairs=apparent_pairs, fits=fits,
        n_replicates={nm: int(replicates) for nm in fitted_models}, conf_level=conf_level,
        seed_entropy=int(root.entropy),
        settings={"replicates": int(replicates), "backend": backend, "workers": int(workers),
                  "calibration": bool(calibration)},
        notes=("Predictions fixed; intervals resample the external patients only.",), **parts)
