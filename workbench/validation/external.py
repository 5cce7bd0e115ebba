"""External validation: fitted models applied unchanged to another cohort.

This is the one external-validation function: ``workbench run`` (a study's
[external] block), ``workbench apply`` (a saved bundle), the app and the
figures all go through :func:`validate_external` or :func:`evaluate_cohort`.

Censoring weights and the Kaplan-Meier null model of the Brier score come
from the EVALUATION cohort (the hospital where the model is judged), never from
the development cohort, and they are re-estimated in every bootstrap resample
of it. The censoring model is chosen by :func:`workbench.metrics.censoring.choose_censoring`
once, on the whole evaluation cohort ("auto": Kaplan-Meier stratified by
centre when censoring differs between its centres, else one curve).
"""

from __future__ import annotations

from collections import Counter
from collections.abc import Callable, Mapping

import numpy as np

from workbench.cohort.core import Cohort
from workbench.errors import SpecError
from workbench.metrics.censoring import choose_censoring, row_censoring
from workbench.validation.backends import run_tasks
from workbench.validation.engine import _chunks, _fit_summary, _pairs, _Task
from workbench.validation.estimators import _summarise
from workbench.validation.evaluate import (
    evaluate_pair,
    evaluate_predictions,
    ibs_grid,
    prediction_times,
)
from workbench.validation.plans import _copy_seed, _root
from workbench.validation.results import ValidationResult

__all__ = ["censoring_for", "evaluate_cohort", "predict_cohort", "resample_plan", "validate_external"]


def resample_plan(random_state, n: int, replicates: int) -> list[np.ndarray]:
    """Row indices of each bootstrap resample of an external cohort of ``n`` patients.

    The one plan of :func:`validate_external`: anything else resampling the same
    cohort with the same seed (the difference bands of
    :mod:`workbench.validation.difference_bands`) draws exactly these resamples.
    """
    root = _copy_seed(_root(random_state))
    return [np.random.default_rng(s).integers(0, n, n) for s in root.spawn(2)[1].spawn(int(replicates))]


def predict_cohort(fitted_models: Mapping, cohort: Cohort, horizons) -> tuple[dict, np.ndarray, np.ndarray]:
    """Risk scores and survival curves of every model for ``cohort``; returns (preds, horizons, grid)."""
    h = np.unique(np.asarray(horizons, dtype=float))
    grid = ibs_grid(cohort.y, h)
    times = prediction_times(h, grid)
    preds = {nm: (m.predict_risk(cohort), m.predict_survival(cohort, times)) for nm, m in fitted_models.items()}
    return preds, h, grid


def censoring_for(y, strata, method: str, risk=None):
    """The per-row censoring weights of :func:`evaluate_cohort` (None: one KM curve of ``y``)."""
    if method == "km_by_centre":
        return row_censoring(y, method, strata=strata)
    if method == "cox":
        return row_censoring(y, "cox", strata=strata, covariates=np.asarray(risk.values)[:, None])
    return None


def evaluate_cohort(preds: Mapping, y, strata, method: str, horizons, grid, kw: Mapping, *,
                    on_error: str = "raise") -> dict:
    """Every metric of fixed predictions with censoring weights and null model from ``y`` itself.

    Parameters
    ----------
    preds : dict of name to (RiskScores, SurvivalCurves)
    y : structured ndarray
        Outcome of the evaluation rows (also the censoring and null-model data).
    strata : ndarray or None
        Centre of each row (``km_by_centre``, and indicator covariates of ``cox``).
    method : {"km", "km_by_centre", "cox"}
        Resolved censoring model.
    """
    shared = censoring_for(y, strata, method) if method == "km_by_centre" else None
    out = {}
    for name, (risk, curv) in preds.items():
        cens = censoring_for(y, strata, method, risk) if method == "cox" else shared
        out[name] = evaluate_predictions(risk, curv, y, y, horizons, ibs_times=grid, on_error=on_error,
                                         model=name, censoring=cens, **kw)
    return out


def _run_external_chunk(payload) -> list:
    preds, y_ext, strata, method, horizons, grid, kw, tasks = payload
    out = []
    for idx, _ in tasks:
        y_b = y_ext[idx]
        s_b = None if strata is None else strata[idx]
        taken = {name: (risk.take(idx), curv.take(idx)) for name, (risk, curv) in preds.items()}
        rec_models, msg = {}, ""
        try:
            perfs = evaluate_cohort(taken, y_b, s_b, method, horizons, grid, kw, on_error="nan")
        except Exception as exc:  # noqa: BLE001 - a failed resample is counted, not fatal
            perfs, msg = {}, f"{type(exc).__name__}: {exc}"
        for name in preds:
            if name in perfs:
                rec_models[name] = {"ok": True, "stage": "", "message": "", "selected": None,
                                    "warnings": Counter(),
                                    "train": (perfs[name].vector(), perfs[name].net_benefit, ())}
            else:
                rec_models[name] = {"ok": False, "stage": "evaluate", "message": msg, "selected": None,
                                    "warnings": Counter()}
        names = list(preds)
        pairs = {(new, base): {"train": evaluate_pair(taken[new][1], taken[base][1], y_b, horizons).vector()}
                 for i, base in enumerate(names) for new in names[i + 1:]}
        out.append({"models": rec_models, "pairs": pairs, "events": {"train": int(y_b["event"].sum())}})
    return out


def validate_external(
    fitted_models: Mapping[str, object],
    external_cohort: Cohort,
    horizons,
    *,
    replicates: int = 200,
    random_state=None,
    tau: float | None = None,
    calibration: bool = True,
    thresholds=None,
    conf_level: float = 0.95,
    censoring: str = "auto",
    pooling: str = "dl",
    by_group: bool = True,
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
    external cohort and are re-estimated in every resample.

    Parameters
    ----------
    fitted_models : dict of name to fitted model
    external_cohort : Cohort
    horizons : array-like
    replicates : int, default 200
        Bootstrap resamples of the external rows; 0 gives no intervals.
    censoring : {"auto", "km", "km_by_centre", "cox"}
        Censoring model of the weights (see :mod:`workbench.metrics.censoring`);
        the choice and its test are in ``result.censoring``.
    by_group : bool, default True
        Also evaluate each centre and each scanner (batch) of the cohort
        separately, with intervals and random-effects pooling
        (:mod:`workbench.validation.groups`); stored in ``result.groups``.
    pooling : {"dl", "reml"}
        Estimator of the between-group variance tau^2.
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
    .. [2] Gerds TA, Schumacher M. Biom J 2006;48:1029-40 (censoring weights).
    """
    fitted_models = dict(fitted_models)
    if not fitted_models:
        raise SpecError("fitted_models is empty; give at least one fitted model.")
    kw = {"tau": tau, "calibration": calibration, "thresholds": thresholds,
          "time_unit": external_cohort.time_unit}
    preds, h, grid = predict_cohort(fitted_models, external_cohort, horizons)
    y = external_cohort.y
    strata = None if external_cohort.centre is None else np.asarray(external_cohort.centre).astype(str)
    choice = choose_censoring(y, strata, censoring)
    apparent = evaluate_cohort(preds, y, strata, choice.method, h, grid, kw)
    apparent_pairs = _pairs({nm: c for nm, (_, c) in preds.items()}, y, h)
    fits = {nm: _fit_summary(nm, m) for nm, m in fitted_models.items()}
    root = _copy_seed(_root(random_state))
    n = external_cohort.n
    plan = [(idx, b) for b, idx in enumerate(resample_plan(root, n, replicates))]
    tasks = [_Task(b, 0, idx, None, True, 0, tuple(fitted_models)) for idx, b in plan]
    chunks = _chunks(plan, workers, backend)
    outputs = [
        o for chunk in run_tasks(
            _run_external_chunk,
            [(preds, y, strata, choice.method, h, grid, kw, c) for c in chunks],
            backend=backend, workers=workers, scheduler=scheduler, progress=progress,
            weights=[len(c) for c in chunks])
        for o in chunk
    ]
    parts = _summarise("external", tasks, outputs, fitted_models, {}, apparent, apparent_pairs, fits,
                       h, ("train",), conf_level, 1.0, "external resamples")
    groups = {}
    if by_group:
        from workbench.validation.groups import evaluate_groups

        labels = {"centre": external_cohort.centre, "scanner": external_cohort.batch}
        groups = evaluate_groups(preds, y, strata, labels, choice.method, h, grid, kw,
                                 replicates=int(replicates), entropy=int(root.entropy),
                                 conf_level=conf_level, pooling=pooling)
    return ValidationResult(
        method="external", models=tuple(fitted_models), horizons=h,
        time_unit=external_cohort.time_unit, n=n, n_events=external_cohort.n_events,
        apparent=apparent, apparent_pairs=apparent_pairs, fits=fits,
        n_replicates={nm: int(replicates) for nm in fitted_models}, conf_level=conf_level,
        seed_entropy=int(root.entropy),
        settings={"replicates": int(replicates), "backend": backend, "workers": int(workers),
                  "calibration": bool(calibration), "censoring": choice.method},
        notes=("Predictions fixed; intervals resample the external patients only; censoring weights "
               "and the Kaplan-Meier null model are re-estimated on the external cohort in every resample.",
               f"Censoring weights: {choice.reason}."),
        censoring=choice, groups=groups, **parts)
