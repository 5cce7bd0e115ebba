"""External validation: fitted models applied unchanged to another cohort."""

from __future__ import annotations

from collections import Counter
from collections.abc import Callable, Mapping

import numpy as np

from workbench.cohort.core import Cohort
from workbench.errors import SpecError
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

__all__ = ["validate_external"]


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
