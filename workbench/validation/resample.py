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

Bootstrap estimators
--------------------
Each replicate refits on a bootstrap sample and is evaluated on the sample (B),
on all original rows (O) and, when an estimator needs it, on the rows of the
patients not drawn (out-of-bootstrap, U; grouped by patient id). ``estimator``
chooses Harrell's optimism correction (A - mean(B - O)), the out-of-bootstrap
mean of U, or Efron & Tibshirani's .632+ rule; "auto" uses the optimism
correction when every model is smooth and the out-of-bootstrap estimate for
every model as soon as one of them interpolates its training rows (a forest), so comparisons always use one
estimator for both arms. See :mod:`.estimators_bootstrap`; every MetricEstimate
names its estimator.

Intervals
---------
``interval="two-stage"`` (the study-file default): the same estimator is re-run
inside outer bootstrap samples of the patients and the interval is formed from
those estimates (:func:`.intervals.two_stage_interval`: bias-corrected normal
interval; see :mod:`.two_stage`), for the bootstrap estimators; it targets the expected
performance of the modelling process at this sample size.
``interval="shifted-percentile"`` (this function's default, cheap): the
percentile interval of B moved so that mean(B) maps to the optimism-corrected
estimate, [est + q_2.5(B) - mean(B), est + q_97.5(B) - mean(B)]. It ignores the
variability of the optimism and covered about 0.87 for a nominal 0.95 in
simulation; it is not defined for the other estimators (NaN with a note).
Cross-validation has its own interval whatever ``interval`` says (below). Every interval is clipped to the metric's range and withdrawn (NaN + a
note) rather than reported with zero width or excluding its own estimate
(:mod:`.intervals`).

Cross-validation
----------------
Repeated stratified k-fold (folds by patient id, balanced for events): each
metric is averaged over the folds of a repeat; the estimate is the mean of the
repeat means and ``sd`` their standard deviation across repeats. The interval is
the corrected resampled t interval of the k x r held-out fold values
(:func:`.intervals.cv_interval`, Nadeau & Bengio 2003), differences from the
paired per-fold differences; it needs no outer samples. ``cv_interval="two-stage"``
keeps the two-stage bootstrap for comparison (bench/bench_cv_intervals.py).

Leave-one-centre-out
--------------------
Internal-external validation (Royston, Parmar & Sylvester 2004): each centre in
turn is held out. The pooled estimate is the mean of the per-centre values
weighted by the number of events in each held-out centre; ``sd`` is the
event-weighted standard deviation across centres (heterogeneity, not a standard
error). Per-centre values are kept in ``replicates``. Each held-out centre is
weighted by its own censoring distribution and scored against its own
Kaplan-Meier null model. Per-centre intervals and random-effects pooling (tau^2,
I^2, prediction interval for a new hospital) are in
:func:`workbench.validation.groups.loco_groups`.

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

from collections.abc import Callable, Mapping

import numpy as np

from workbench.cohort.codes import code_order
from workbench.cohort.core import Cohort
from workbench.errors import SpecError
from workbench.validation.backends import run_tasks
from workbench.validation.engine import _apparent, _chunks, _Job, _run_chunk, _Task
from workbench.validation.estimators import INTERVALS, _summarise
from workbench.validation.estimators_bootstrap import ESTIMATORS, no_information
from workbench.validation.evaluate import ibs_grid, metric_names, pair_metric_names
from workbench.validation.external import validate_external
from workbench.validation.intervals import CV_MIN_FOLD_VALUES, CV_RULE, TWO_STAGE_RULE
from workbench.validation.plans import (
    _bootstrap_plan,
    _copy_seed,
    _cv_plan,
    _oob_rows,
    _root,
    _seed_int,
    cv_splits,
)
from workbench.validation.results import (
    FitSummary,
    MetricEstimate,
    ReplicateFailure,
    ReplicateMetrics,
    SelectionSummary,
    ValidationResult,
)
from workbench.validation.two_stage import (
    outer_estimates,
    outer_net_benefit,
    outer_pair_estimates,
    outer_tasks,
)

__all__ = [
    "FitSummary",
    "MetricEstimate",
    "ReplicateFailure",
    "ReplicateMetrics",
    "SelectionSummary",
    "ValidationResult",
    "cv_splits",
    "validate",
    "validate_external",
]

METHODS = ("bootstrap", "cv", "by_centre")
CV_INTERVALS = ("corrected", "two-stage")
"""Interval routes of cross-validation: the corrected resampled t interval (no outer samples), or the
two-stage bootstrap it replaced (kept for bench/bench_cv_intervals.py, which measures both)."""


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


def _choose_estimators(models: Mapping, estimator: str) -> dict:
    """Bootstrap estimator per model; "auto": out-of-bootstrap for all if any model interpolates.

    Why not .632+ for "auto": for a forest, whose apparent C is near 1, the .632+ rule
    still gives the apparent value weight and overstated the true C by about 0.03 in
    bench/bench_forest_validation.py, while the out-of-bootstrap estimate was within 0.01.
    """
    if estimator != "auto":
        return dict.fromkeys(models, estimator)
    flexible = any(getattr(m, "apparent_fit_interpolates", False) for m in models.values())
    return dict.fromkeys(models, "oob" if flexible else "optimism")


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
    estimator: str = "auto",
    interval: str = "shifted-percentile",
    outer_replicates: int = 100,
    inner_replicates: int = 10,
    cv_interval: str = "corrected",
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
    estimator : {"auto", "optimism", "632plus", "oob"}, default "auto"
        Bootstrap estimator (see :mod:`.estimators_bootstrap`). "auto" uses
        Harrell's optimism correction when no model interpolates its training
        rows, and otherwise the out-of-bootstrap estimate for EVERY model, so that
        comparisons between a forest and a Cox model use one estimator for both arms.
    interval : {"two-stage", "shifted-percentile"}, default "shifted-percentile"
        "two-stage": interval (:func:`.intervals.two_stage_interval`) over ``outer_replicates``
        outer bootstrap samples, in each of which the same estimator is run with
        ``inner_replicates`` inner replicates (see :mod:`.two_stage`; costs
        ``outer * (inner + 1)`` extra refits per model). "shifted-percentile": the cheap
        location-shifted interval of the optimism estimator (under-covers; NaN for
        other estimators). cv (see ``cv_interval``) and by_centre intervals are not
        affected. The study file's default
        is "two-stage" (``[validation] interval``); this function keeps the cheap one
        as its default so that exploratory calls stay fast.
    outer_replicates, inner_replicates : int, default 100 and 10
    cv_interval : {"corrected", "two-stage"}, default "corrected"
        Cross-validation's interval: "corrected" (whatever ``interval`` says) is the
        corrected resampled t interval of the held-out fold values
        (:func:`.intervals.cv_interval`; Nadeau & Bengio 2003), which needs no outer
        samples and costs nothing beyond the estimate; "two-stage" with
        ``interval="two-stage"`` runs the two-stage bootstrap instead (conservative for
        a C difference in bench/bench_cv_intervals.py; kept for comparison).

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
    if estimator not in ("auto",) + ESTIMATORS:
        raise SpecError(f"unknown estimator {estimator!r}; choose one of auto, {', '.join(ESTIMATORS)}.")
    if interval not in INTERVALS:
        raise SpecError(f"unknown interval {interval!r}; choose one of {', '.join(INTERVALS)}.")
    if cv_interval not in CV_INTERVALS:
        raise SpecError(f"unknown cv_interval {cv_interval!r}; choose one of {', '.join(CV_INTERVALS)}.")
    for nm, v in (("outer_replicates", outer_replicates), ("inner_replicates", inner_replicates)):
        if int(v) != v or v < 0:
            raise SpecError(f"{nm} must be a whole number of at least 0, got {v!r}.")
    if not 0.0 <= max_failure_rate < 1.0:
        raise SpecError(f"max_failure_rate must lie in [0, 1), got {max_failure_rate!r}.")
    root = _root(random_state)
    root = _copy_seed(root)
    app_ss, rep_root = root.spawn(2)
    # a separate child for the two-stage samples, derived without advancing ``root``, so
    # the replicates of the estimate are the same with or without intervals
    outer_root = np.random.SeedSequence(root.entropy, spawn_key=root.spawn_key + (2**31,))
    h = np.unique(np.asarray(horizons, dtype=float))
    grid = ibs_grid(cohort.y, h)
    kw = {"tau": tau, "calibration": calibration, "thresholds": thresholds, "time_unit": cohort.time_unit}
    curves: dict = {}
    apparent, fits, apparent_pairs = _apparent(cohort, models, h, grid, kw, app_ss, apparent_models, curves)
    estimators = _choose_estimators(models, estimator) if method == "bootstrap" else {}
    gammas = {
        nm: no_information(metric_names(h), curves[nm], cohort.y, h, grid, apparent[nm].null_brier,
                           apparent[nm].null_ibs)
        for nm, e in estimators.items() if e == "632plus"
    }
    need_oob = any(e != "optimism" for e in estimators.values())

    notes, centres = [], ()
    if method == "bootstrap":
        n_rep = _replicate_counts(models, replicates, model_replicates) if replicates else dict.fromkeys(models, 0)
        plan = _bootstrap_plan(cohort.n, max(n_rep.values()), rep_root)
        if not replicates:
            notes.append("no bootstrap replicates were run: only apparent performance is available, "
                         "and it is optimistic; the validated estimates are left empty (NaN).")
        tasks = [
            _Task(b, 0, idx, None, True, seed, tuple(nm for nm in models if b < n_rep[nm]),
                  oob_idx=_oob_rows(cohort.ids, idx) if need_oob else None)
            for b, (idx, seed) in enumerate(plan)
        ]
        arms, unit = ("train", "test", "oob") if need_oob else ("train", "test"), "bootstrap replicates"
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
        centres = tuple(code_order(cohort.centre))  # numeric codes in value order: 1, 2, 10
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

    two_stage = interval == "two-stage" and method in ("bootstrap", "cv") and outer_replicates > 0
    two_stage = two_stage and (replicates > 0 or method == "cv")
    two_stage = two_stage and (method != "cv" or cv_interval == "two-stage")
    # cross-validation without outer samples: the corrected resampled t interval, n_test/n_train = 1/(k-1)
    cv_ratio = (1.0 / (int(folds) - 1) if method == "cv" and not two_stage
                and int(folds) * max(n_rep.values()) >= CV_MIN_FOLD_VALUES else None)
    extra = []
    if two_stage:
        caps = {nm: min(int(outer_replicates), r if model_replicates and nm in model_replicates
                        else int(outer_replicates)) for nm, r in n_rep.items()}
        extra = outer_tasks(method, cohort, outer_replicates, inner_replicates, folds, outer_root,
                            caps, estimators)
    job = _Job(cohort, models, h, grid, kw, bool(reseed_models), own_censoring=method == "by_centre")
    everything = tasks + extra
    chunks = _chunks(everything, workers, backend)
    outputs = [
        o for chunk in run_tasks(
            _run_chunk, [(job, c) for c in chunks], backend=backend, workers=workers,
            scheduler=scheduler, progress=progress, weights=[len(c) for c in chunks])
        for o in chunk
    ]
    outputs, extra_out = outputs[:len(tasks)], outputs[len(tasks):]
    outer = (outer_estimates(method, extra, extra_out, metric_names(h), estimators, gammas, conf_level)
             if two_stage else {})
    outer_nb = outer_net_benefit(method, extra, extra_out, estimators) if two_stage else {}
    outer_pairs = (outer_pair_estimates(method, extra, extra_out, pair_metric_names(h), estimators, conf_level)
                   if two_stage else {})
    parts = _summarise(method, tasks, outputs, models, n_rep, apparent, apparent_pairs, fits, h,
                       arms, conf_level, max_failure_rate, unit, estimators, gammas, outer, cv_ratio, outer_pairs)
    if two_stage:
        notes.append(f"intervals: two-stage bootstrap, {int(outer_replicates)} outer samples x "
                     + (f"{int(inner_replicates)} inner bootstrap replicates" if method == "bootstrap"
                        else f"one {int(folds)}-fold split") + f" ({TWO_STAGE_RULE}).")
    elif cv_ratio is not None:
        notes.append(f"intervals: {CV_RULE}; J = {int(folds)} folds x {max(n_rep.values())} repeats, "
                     f"n_test/n_train = 1/{int(folds) - 1}; no outer resampling.")
    total = max(n_rep.values())
    for nm, r in n_rep.items():
        if 0 < r < total:
            notes.append(f"model {nm!r} was validated on the first {r} of {total} {unit.split()[0]} "
                         f"{'replicates' if method == 'bootstrap' else 'repeats'} (model_replicates).")
    for nm, c in parts["failures"].items():
        if c:
            notes.append(f"model {nm!r} could not be fitted or evaluated in {c} of {n_rep[nm]} {unit}; "
                         "those replicates are left out of its estimates (the reasons: results.json, validation, "
                         "failure_log).")
    return ValidationResult(
        method=method, models=tuple(models), horizons=h, time_unit=cohort.time_unit, n=cohort.n,
        n_events=cohort.n_events, apparent=apparent, apparent_pairs=apparent_pairs, fits=fits,
        n_replicates=n_rep, centres=centres, conf_level=conf_level, seed_entropy=int(root.entropy),
        estimator=estimators, interval=interval if two_stage else (
            "shifted-percentile" if method == "bootstrap" else "corrected-t" if cv_ratio is not None else ""),
        outer_estimates=outer,
        outer_net_benefit=outer_nb,
        settings={"estimator": estimator, "interval": interval, "outer_replicates": int(outer_replicates),
                  "inner_replicates": int(inner_replicates), "cv_interval": cv_interval,
                  "replicates": int(replicates), "folds": int(folds), "repeats": int(repeats),
                  "backend": backend, "workers": int(workers), "calibration": bool(calibration),
                  "reseed_models": bool(reseed_models), "max_failure_rate": float(max_failure_rate)},
        notes=tuple(notes), **parts)
