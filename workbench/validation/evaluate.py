"""Every performance measure of fitted models on one set of evaluation rows.

One call gives, per model: Harrell's and Uno's C, the cumulative/dynamic AUC at
each horizon and its mean, the Brier score and index of prediction accuracy at
each horizon, the integrated Brier score, and calibration (ICI, E50, E90,
calibration slope, observed/expected) at each horizon, plus decision-curve net
benefit. Inverse-probability-of-censoring weights come from ``y_train``: the
training rows in internal validation; the evaluation rows themselves in
external and leave-one-centre-out validation (see
:mod:`workbench.validation.external`), optionally per row (``censoring``).

This runs hundreds of times in a validation (every replicate, every model, on
two sets of rows), so it avoids repeated work: one prediction call per model on
a time grid that holds the horizons and the integration grid, one Brier-score
pass over that grid, one Kaplan-Meier curve for all observed/expected ratios, and
calibration Cox fits done by the workbench's own Cox fitter (a few milliseconds
each) with exactly the estimator of :mod:`workbench.metrics.calibration`.

Horizons outside follow-up
--------------------------
A horizon is usable for a set of evaluation rows when it lies strictly between
0 and the longest follow-up of those rows and at least one event has occurred by
then. With ``on_error="raise"`` (the default) an unusable horizon is a
:class:`~workbench.errors.MetricError` naming the horizon and the follow-up range.
With ``on_error="nan"`` (what the resampling engine uses inside replicates) the
metrics at that horizon, and the summaries that need every horizon (mean AUC,
integrated Brier score), are NaN and the reason is listed in
``ModelPerformance.dropped``; the engine counts them per metric.
"""

from __future__ import annotations

import warnings
from collections.abc import Mapping

import numpy as np

from workbench.cohort.core import Cohort
from workbench.cohort.outcome import check_outcome, split_outcome
from workbench.errors import MetricError, WorkbenchError
from workbench.metrics.brier import brier_score
from workbench.metrics.calibration_cox import _cloglog, _rcs_basis, _rcs_knots
from workbench.metrics.concordance import harrell_c, uno_c
from workbench.metrics.decision import net_benefit
from workbench.metrics.reclassification import continuous_nri, integrated_discrimination
from workbench.metrics.td_auc import time_dependent_auc
from workbench.predictions import RiskScores, SurvivalCurves
from workbench.stats.coxph import fit_coxph, linear_predictor
from workbench.stats.km import kaplan_meier, survival_at
from workbench.validation.performance import (
    _ON_ERROR,
    _PAIR_METRICS,
    DEFAULT_THRESHOLDS,
    ModelPerformance,
    PairPerformance,
    _as_horizons,
    check_horizons,
    ibs_grid,
    metric_names,
    pair_metric_names,
    prediction_times,
)

__all__ = [
    "ModelPerformance",
    "PairPerformance",
    "check_horizons",
    "evaluate_models",
    "evaluate_pair",
    "evaluate_predictions",
    "ibs_grid",
    "metric_names",
    "pair_metric_names",
    "prediction_times",
]

# ----------------------------------------------------------------- calibration


def _breslow_h0(lp: np.ndarray, time: np.ndarray, event: np.ndarray, t0: float) -> float:
    order = np.argsort(time, kind="stable")
    ts, es = time[order], event[order]
    w = np.exp(lp[order])
    s0 = np.cumsum(w[::-1])[::-1]
    starts = np.flatnonzero(np.r_[True, ts[1:] != ts[:-1]])
    d = np.add.reduceat(es.astype(float), starts)
    keep = (ts[starts] <= t0) & (d > 0)
    return float(np.sum(d[keep] / s0[starts][keep]))


def _calibration_at(time, event, risk, t0, knots: int = 3) -> tuple[float, float, float, float]:
    """ICI, E50, E90 and horizon-specific calibration slope at ``t0``.

    The estimator of :func:`workbench.metrics.calibration.smoothed_calibration`
    (Cox model on a restricted cubic spline of log(-log(1 - risk)), Breslow
    baseline at t0, all follow-up) and of ``calibration_slope`` (follow-up
    censored at t0, so the slope is specific to the horizon); the Cox fits use
    :func:`workbench.stats.coxph.fit_coxph` (Efron ties) for speed.
    """
    x = _cloglog(risk)
    kp = _rcs_knots(x, knots)
    if kp.size < 3:
        kp = kp[:0]  # too few distinct predictions for a spline: linear term only
    B = _rcs_basis(x, kp)
    fit = fit_coxph(B, time, event, min_events_per_parameter=0)
    lp = linear_predictor(fit, B)
    observed = -np.expm1(-_breslow_h0(lp, time, event, t0) * np.exp(lp))
    diff = np.abs(observed - risk)
    slope = fit_coxph(x[:, None], np.minimum(time, t0), event & (time <= t0),
                      min_events_per_parameter=0).coef[0]
    return float(diff.mean()), float(np.median(diff)), float(np.quantile(diff, 0.9)), float(slope)


# ------------------------------------------------------------------ evaluation


def _nan(k: int) -> np.ndarray:
    return np.full(k, np.nan)


def evaluate_predictions(
    risk: RiskScores,
    curves: SurvivalCurves,
    y_train,
    y_eval,
    horizons,
    *,
    tau: float | None = None,
    ibs_times=None,
    thresholds=None,
    calibration: bool = True,
    on_error: str = "raise",
    time_unit: str = "",
    model: str = "",
    censoring=None,
) -> ModelPerformance:
    """All metrics of one model's predictions for the evaluation rows.

    Parameters
    ----------
    risk : RiskScores
        Risk scores of the evaluation rows (higher = worse).
    curves : SurvivalCurves
        Predicted survival of the same rows on a grid containing ``horizons``
        and ``ibs_times`` (see :func:`prediction_times`).
    y_train : structured ndarray
        Outcome of the training rows: censoring weights and the null model.
    y_eval : structured ndarray
        Outcome of the evaluation rows.
    horizons : array-like of shape (k,)
        Strictly increasing horizons, in the cohort's time unit.
    tau : float, optional
        Truncation time of Uno's C; the last horizon by default.
    ibs_times : array-like, optional
        Integration grid of the integrated Brier score; by default
        :func:`ibs_grid` of ``y_eval``. Grid times before the first follow-up
        time of ``y_eval`` are left out (the range shrinks accordingly).
    thresholds : array-like, optional
        Decision-curve thresholds; 0.01 to 0.99 by default.
    calibration : bool, default True
        Compute ICI, E50, E90 and the calibration slope (two small Cox fits per
        horizon); False leaves them NaN.
    on_error : {"raise", "nan"}
        What to do with a horizon outside the follow-up of ``y_eval`` (see the
        module notes).
    time_unit, model : str
        For messages and labels.
    censoring : RowCensoring, optional
        Per-row censoring weights of the evaluation rows
        (:func:`workbench.metrics.censoring.row_censoring`); ``y_train`` then
        gives only the Kaplan-Meier null model of the Brier score.

    Returns
    -------
    ModelPerformance

    References
    ----------
    .. [1] Harrell FE et al. JAMA 1982;247:2543-6 (C-index).
    .. [2] Uno H et al. Stat Med 2011;30:1105-17 (IPCW C-index).
    .. [3] Uno H et al. J Am Stat Assoc 2007;102:527-37 (cumulative/dynamic AUC).
    .. [4] Graf E et al. Stat Med 1999;18:2529-45 (Brier score).
    .. [5] Kattan MW, Gerds TA. Diagn Progn Res 2018;2:7 (IPA).
    .. [6] Austin PC, Harrell FE, van Klaveren D. Stat Med 2020;39:2714-42 (ICI).
    .. [7] Vickers AJ et al. BMC Med Inform Decis Mak 2008;8:53 (net benefit).
    """
    if on_error not in _ON_ERROR:
        raise MetricError(f"on_error must be one of {_ON_ERROR}, got {on_error!r}.")
    y_train = check_outcome(y_train, "y_train")
    y_eval = check_outcome(y_eval, "y_eval")
    h = _as_horizons(horizons)
    k = h.size
    time, event = split_outcome(y_eval)
    bad = check_horizons(y_eval, h, time_unit=time_unit)
    if bad and on_error == "raise":
        raise MetricError(f"model {model!r}: " + " ".join(bad.values()))
    dropped = list(bad.values())
    ok = np.array([float(x) not in bad for x in h])
    hv = h[ok]
    tau = float(h[-1]) if tau is None else float(tau)

    def guarded(what, fn, default):
        try:
            return fn()
        except (MetricError, np.linalg.LinAlgError) as exc:
            if on_error == "raise":
                raise
            dropped.append(f"{what}: {exc}")
            return default

    hc = guarded("Harrell's C", lambda: harrell_c(y_eval, risk), None)
    uc = guarded("Uno's C", lambda: uno_c(y_train, y_eval, risk, tau=tau, censoring=censoring).c_index, np.nan)

    auc, mean_auc = _nan(k), np.nan
    if hv.size:
        res = guarded("AUC", lambda: time_dependent_auc(y_train, y_eval, risk, hv, censoring=censoring), None)
        if res is not None:
            auc[ok] = res.auc
            mean_auc = res.mean_auc if ok.all() else np.nan

    grid = ibs_grid(y_eval, h) if ibs_times is None else np.asarray(ibs_times, dtype=float)
    grid = grid[(grid >= time.min()) & (grid <= h[-1])]
    brier, null_brier, ipa = _nan(k), _nan(k), _nan(k)
    ibs = null_ibs = ipa_int = np.nan
    rng = (float(grid[0]), float(grid[-1])) if grid.size else (np.nan, np.nan)
    if hv.size:
        both = np.unique(np.r_[hv, grid if ok.all() else []])
        res = guarded("Brier score", lambda: brier_score(y_train, y_eval, curves, both, censoring=censoring), None)
        if res is not None:
            pos = np.searchsorted(both, hv)
            brier[ok], null_brier[ok], ipa[ok] = res.brier[pos], res.null_brier[pos], res.ipa[pos]
            if ok.all() and grid.size >= 2:
                gpos = np.searchsorted(both, grid)
                span = grid[-1] - grid[0]
                ibs = float(np.trapezoid(res.brier[gpos], grid) / span)
                null_ibs = float(np.trapezoid(res.null_brier[gpos], grid) / span)
                ipa_int = 1.0 - ibs / null_ibs if null_ibs > 0 else np.nan

    ici, e50, e90, slope, oe = _nan(k), _nan(k), _nan(k), _nan(k), _nan(k)
    thr = DEFAULT_THRESHOLDS if thresholds is None else np.asarray(thresholds, dtype=float)
    nb, treat_all = np.full((k, thr.size), np.nan), np.full((k, thr.size), np.nan)
    km = kaplan_meier(time, event)
    for j in np.flatnonzero(ok):
        t0 = float(h[j])
        r = curves.risk_at(t0)
        with warnings.catch_warnings():
            # Horizon checks were made above; the per-metric follow-up notes would repeat them.
            warnings.simplefilter("ignore", category=Warning)
            dc = guarded(f"net benefit at {t0:g}", lambda t0=t0: net_benefit(y_eval, curves, t0, thr), None)
            if dc is not None:
                nb[j], treat_all[j] = dc.net_benefit, dc.treat_all
            if r.mean() > 0:
                oe[j] = (1.0 - float(survival_at(km, t0))) / float(r.mean())
            if calibration:
                try:
                    ici[j], e50[j], e90[j], slope[j] = _calibration_at(time, event, r, t0)
                except (WorkbenchError, np.linalg.LinAlgError) as exc:
                    # Undefined (e.g. every patient has the same predicted risk): NaN in any mode.
                    dropped.append(f"calibration at {t0:g}: {exc}")
    return ModelPerformance(
        model=model or risk.model,
        n=int(time.size),
        n_events=int(event.sum()),
        horizons=h,
        harrell_c=np.nan if hc is None else hc.c_index,
        harrell_c_se=np.nan if hc is None else hc.std_err,
        uno_c=float(uc),
        tau=tau,
        auc=auc,
        mean_auc=float(mean_auc),
        brier=brier,
        null_brier=null_brier,
        ipa=ipa,
        ibs=float(ibs),
        null_ibs=float(null_ibs),
        ipa_integrated=float(ipa_int),
        ibs_range=rng,
        ici=ici,
        e50=e50,
        e90=e90,
        cal_slope=slope,
        oe_ratio=oe,
        thresholds=thr,
        net_benefit=nb,
        treat_all=treat_all,
        dropped=tuple(dropped),
    )


def evaluate_pair(
    curves_model: SurvivalCurves,
    curves_baseline: SurvivalCurves,
    y_eval,
    horizons,
    *,
    model: str = "",
    baseline: str = "",
) -> PairPerformance:
    """Category-free NRI and IDI of one model against a baseline at each horizon.

    Horizons outside the follow-up of ``y_eval`` give NaN (listed in ``dropped``).
    See :func:`workbench.metrics.reclassification.continuous_nri` and
    :func:`~workbench.metrics.reclassification.integrated_discrimination`.

    References
    ----------
    .. [1] Pencina MJ, D'Agostino RB Sr, Steyerberg EW. Stat Med 2011;30:11-21.
    .. [2] Kerr KF et al. Epidemiology 2014;25:114-21 (cautions).
    """
    h = _as_horizons(horizons)
    bad = check_horizons(y_eval, h)
    vals = {m: _nan(h.size) for m in _PAIR_METRICS}
    dropped = list(bad.values())
    for j, t0 in enumerate(h):
        if float(t0) in bad:
            continue
        try:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore", category=Warning)
                nri = continuous_nri(y_eval, curves_baseline, curves_model, float(t0))
                idi = integrated_discrimination(y_eval, curves_baseline, curves_model, float(t0))
        except MetricError as exc:
            dropped.append(f"NRI/IDI at {t0:g}: {exc}")
            continue
        vals["nri"][j], vals["nri_events"][j], vals["nri_nonevents"][j] = (
            nri.nri, nri.nri_events, nri.nri_nonevents)
        vals["idi"][j], vals["idi_events"][j], vals["idi_nonevents"][j] = (
            idi.idi, idi.idi_events, idi.idi_nonevents)
    return PairPerformance(model=model, baseline=baseline, horizons=h, dropped=tuple(dropped), **vals)


def evaluate_models(
    fitted: Mapping[str, object],
    y_train,
    cohort_eval: Cohort,
    horizons,
    *,
    tau: float | None = None,
    ibs_times=None,
    thresholds=None,
    calibration: bool = True,
    on_error: str = "raise",
) -> dict[str, ModelPerformance]:
    """Evaluate fitted models on a cohort.

    Parameters
    ----------
    fitted : mapping of name to fitted model
        Models following :class:`workbench.models.base.SurvivalModel`.
    y_train : structured ndarray
        Outcome of the rows the models were fitted on (censoring weights, null model).
    cohort_eval : Cohort
        Evaluation rows.
    horizons : array-like
        Strictly increasing horizons in ``cohort_eval.time_unit``.
    tau, ibs_times, thresholds, calibration, on_error
        See :func:`evaluate_predictions`.

    Returns
    -------
    dict of name to ModelPerformance
    """
    h = _as_horizons(horizons)
    grid = ibs_grid(cohort_eval.y, h) if ibs_times is None else np.asarray(ibs_times, dtype=float)
    times = prediction_times(h, grid)
    out = {}
    for name, m in fitted.items():
        out[name] = evaluate_predictions(
            m.predict_risk(cohort_eval),
            m.predict_survival(cohort_eval, times),
            y_train,
            cohort_eval.y,
            h,
            tau=tau,
            ibs_times=grid,
            thresholds=thresholds,
            calibration=calibration,
            on_error=on_error,
            time_unit=cohort_eval.time_unit,
            model=name,
        )
    return out
