"""Model minus baseline as curves: AUC over time and net benefit over thresholds, with paired bands.

A difference curve is drawn from the SAME resamples for both models, so what the
two models share cancels, replicate by replicate, exactly as for the scalar
differences of :mod:`workbench.validation.compare`:

Net benefit (both settings) reuses the per-replicate decision curves the
validation already holds; nothing is refitted.

* internal: estimate = the validated decision curves of the comparison, subtracted
  (optimism: ``(A_m - A_b) - mean((B_m - B_b) - (O_m - O_b))`` at each threshold;
  out-of-bootstrap, .632+ and cv as there). Band, pointwise: for cross-validation, none
  (withheld with its reason, :data:`~.intervals.CV_WITHHELD_BANDS`: the corrected resampled t
  band of the paired per-fold differences covered 0.99-1.00, too wide, in
  bench/bench_cv_metrics.py --band); with the two-stage interval,
  the two-stage interval (:func:`~.intervals.two_stage_interval`) of the paired
  differences of the validated curves in the outer bootstrap samples (the interval of the scalar differences, per
  threshold; measured mean pointwise coverage 0.932 / 0.925 expected / conditional, worst
  threshold 0.920 / 0.893, 75 cohorts, bench/bench_cv_metrics.py --method bootstrap --band); otherwise,
  for the optimism estimator, the cheap location-shifted
  percentile band of ``B_m - B_b``; none for the other estimators;
* external: estimate on the whole external cohort; band: pointwise normal band
  (:func:`~.intervals.resample_band`) of the differences over the resamples of the
  external patients (predictions fixed), the rule of the external table. Measured
  pointwise coverage at 200 patients (100 resamples): 0.947 (AUC) and 0.959 (net
  benefit); the percentile band it replaced covered 0.924 and 0.894.

bench/bench_difference_bands.py measures the pointwise coverage of each band.

AUC over time:

* internal: the validated ``auc@h`` differences at the study horizons with the
  comparison's own intervals (two-stage where the run has them); replicates hold
  the AUC at the horizons only, so there is no curve between them;
* external: a curve on a grid of times, the resamples of
  :func:`workbench.validation.external.resample_plan` (the very resamples of the
  external table, so the band at a horizon is the table's interval), censoring
  weights re-estimated in every resample as in :func:`validate_external`.

References
----------
.. [1] Vickers AJ, Cronin AM, Elkin EB, Gonen M. Extensions to decision curve
   analysis. BMC Med Inform Decis Mak 2008;8:53 (bootstrap bands for net benefit).
.. [2] Blanche P, Dartigues JF, Jacqmin-Gadda H. Review and comparison of ROC curve
   estimators for a time-dependent outcome with marker-dependent censoring.
   Biom J 2013;55:687-704.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass

import numpy as np

from workbench.errors import SpecError, WorkbenchError
from workbench.metrics.td_auc import time_dependent_auc
from workbench.validation.intervals import (
    CV_RULE,
    CV_WITHHELD_BANDS,
    RESAMPLE_RULE,
    TWO_STAGE_RULE,
    cv_interval,
    guard,
    resample_band,
    two_stage_interval,
)

__all__ = ["DifferenceBand", "auc_difference_external", "auc_difference_internal", "difference_grid",
           "external_auc_band", "net_benefit_difference"]


@dataclass(frozen=True)
class DifferenceBand:
    """A model-minus-baseline curve with a pointwise band.

    Attributes
    ----------
    quantity : {"auc", "net_benefit"}
    setting : {"internal", "external"}
    model, baseline : str
    x : ndarray
        Times (AUC) or threshold risks (net benefit).
    estimate, lower, upper : ndarray
        Difference and its pointwise band (NaN where there is none, and where it would have
        zero width or exclude its estimate: the rule of every workbench interval).
    horizon : float
        Horizon of the net benefit (NaN for AUC).
    n_replicates : int
        Paired resamples behind the band.
    band : str
        How the band was formed ("shifted-percentile", "percentile", "two-stage", or "").
    note : str
    x_max : float
        Net benefit: the right end of a threshold axis, 0.1 past the largest threshold at
        which acting on everyone still has positive net benefit (about the event risk by the
        horizon), at least 0.3; beyond it few patients are acted on and the curves are noise.
        A display choice only: every threshold stays in ``x``. NaN for AUC.
    """

    quantity: str
    setting: str
    model: str
    baseline: str
    x: np.ndarray
    estimate: np.ndarray
    lower: np.ndarray
    upper: np.ndarray
    horizon: float
    n_replicates: int
    band: str
    note: str = ""
    x_max: float = np.nan


def _pct(v: np.ndarray, conf_level: float) -> tuple[np.ndarray, np.ndarray]:
    """Pointwise percentile band over the rows of ``v`` (NaN where fewer than 2 finite rows)."""
    a = (1.0 - conf_level) / 2.0
    lo, hi = np.full(v.shape[1], np.nan), np.full(v.shape[1], np.nan)
    for j in range(v.shape[1]):
        col = v[:, j][np.isfinite(v[:, j])]
        if col.size >= 2:
            lo[j], hi[j] = np.quantile(col, [a, 1.0 - a])
    return lo, hi


def _guarded(quantity: str, est: np.ndarray, lo: np.ndarray, hi: np.ndarray):
    """The interval rule of every workbench interval, point by point (:func:`~.intervals.guard`).

    A band of zero width (the two models pick the same patients in every resample, so the
    resampled differences do not vary) or one that excludes its estimate is withdrawn (NaN).
    """
    out_lo, out_hi = np.full(est.shape, np.nan), np.full(est.shape, np.nan)
    for k in range(est.size):
        out_lo[k], out_hi[k], _ = guard(quantity, float(est[k]), float(lo[k]), float(hi[k]), difference=True)
    return out_lo, out_hi


def _paired_rows(result, model: str, baseline: str):
    """Row positions of replicates in which both models succeeded, matched by (replicate, fold)."""
    from workbench.validation.compare import _keys

    a, b = result.replicates[model], result.replicates[baseline]
    ia = {k: i for i, k in enumerate(_keys(a)) if a.ok[i]}
    ib = {k: i for i, k in enumerate(_keys(b)) if b.ok[i]}
    common = [k for k in ia if k in ib]
    return np.array([ia[k] for k in common], dtype=int), np.array([ib[k] for k in common], dtype=int)


def net_benefit_difference(result, model: str, baseline: str, horizon_index: int) -> DifferenceBand:
    """Net benefit of ``model`` minus ``baseline`` at one horizon, from the validation's replicates.

    Parameters
    ----------
    result : ValidationResult
        Internal (``validate``) or external (``validate_external``) run with both models.
    model, baseline : str
    horizon_index : int
        Position of the horizon in ``result.horizons``.
    """
    for nm in (model, baseline):
        if nm not in result.models:
            raise SpecError(f"model {nm!r} is not in this validation result; it holds {list(result.models)}.")
    j = int(horizon_index)
    am, ab = result.apparent[model], result.apparent[baseline]
    x = np.asarray(am.thresholds, float)
    app = np.asarray(am.net_benefit[j], float) - np.asarray(ab.net_benefit[j], float)
    ra, rb = _paired_rows(result, model, baseline)
    rm, rbm = result.replicates[model], result.replicates[baseline]
    nan = np.full_like(x, np.nan)
    setting = "external" if result.method == "external" else "internal"
    common = dict(quantity="net_benefit", setting=setting, model=model, baseline=baseline, x=x,
                  horizon=float(result.horizons[j]), n_replicates=int(ra.size))
    est_name = {result.estimator.get(m, "optimism") for m in (model, baseline)}
    # display range: acting on everyone pays up to about the event risk; 0.1 past it is shown
    pos = x[np.nan_to_num(np.asarray(am.treat_all[j], float)) > 0]
    common["x_max"] = float(min(x.max(), max(0.3, (pos.max() if pos.size else x.min()) + 0.1)))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)  # thresholds no resample reaches stay NaN
        if result.method == "external":
            if ra.size < 2:
                return DifferenceBand(**common, estimate=app, lower=nan, upper=nan, band="",
                                      note="no band: fewer than 2 resamples")
            d = rm.nb_train[ra, j] - rbm.nb_train[rb, j]
            lo, hi = _guarded("net_benefit", app, *resample_band(d, app, result.conf_level))
            return DifferenceBand(**common, estimate=app, lower=lo, upper=hi, band="normal" if np.isfinite(lo).any() else "",
                                  note=f"resamples of the external patients, predictions fixed; band: {RESAMPLE_RULE}, "
                                       "pointwise; measured pointwise coverage about 0.96 at 200 patients "
                                       "(bench/bench_difference_bands.py)")
        from workbench.validation.compare import _nb_validated

        est = np.asarray(_nb_validated(result, model)[j] - _nb_validated(result, baseline)[j], float)
        outer = getattr(result, "outer_net_benefit", None) or {}
        om, ob = outer.get(model), outer.get(baseline)
        if result.method in ("bootstrap", "cv") and om is not None and ob is not None:
            d = om[:, j] - ob[:, j]
            lo, hi = nan.copy(), nan.copy()
            for k in range(x.size):
                lo[k], hi[k] = two_stage_interval(d[:, k], est[k], result.conf_level)
            lo, hi = _guarded("net_benefit", est, lo, hi)
            return DifferenceBand(**{**common, "n_replicates": int(np.isfinite(d[:, 0]).sum())}, estimate=est,
                                  lower=lo, upper=hi, band="two-stage",
                                  note=f"validated difference; band: {TWO_STAGE_RULE} of the paired "
                                       "differences of the validated curves in the outer bootstrap samples")
        if result.method == "cv" and getattr(result, "interval", "") == "corrected-t":
            from workbench.validation.estimators import cv_test_train_ratio

            if CV_WITHHELD_BANDS.get("net_benefit"):
                return DifferenceBand(**common, estimate=est, lower=nan, upper=nan, band="",
                                      note=f"cross-validated difference; {CV_WITHHELD_BANDS['net_benefit']}")
            d = rm.nb_test[ra, j] - rbm.nb_test[rb, j]
            lo, hi = nan.copy(), nan.copy()
            for k in range(x.size):
                lo[k], hi[k] = cv_interval(d[:, k], est[k], cv_test_train_ratio(result), result.conf_level)
            lo, hi = _guarded("net_benefit", est, lo, hi)
            return DifferenceBand(**common, estimate=est, lower=lo, upper=hi,
                                  band="corrected-t" if np.isfinite(lo).any() else "",
                                  note=f"cross-validated difference; band: {CV_RULE}, of the paired per-fold "
                                       "differences, pointwise")
        if result.method == "bootstrap" and est_name == {"optimism"} and ra.size >= 2:
            b = rm.nb_train[ra, j] - rbm.nb_train[rb, j]
            lo, hi = _pct(b, result.conf_level)
            shift = est - np.nanmean(b, axis=0)
            lo, hi = _guarded("net_benefit", est, lo + shift, hi + shift)
            return DifferenceBand(**common, estimate=est, lower=lo, upper=hi,
                                  band="shifted-percentile",
                                  note="optimism-corrected; band: percentiles of the paired bootstrap-sample "
                                       "differences shifted to the corrected estimate")
    what = {"none": "apparent (no internal validation), optimistic"}.get(result.method, "validated")
    why = ("no band: leave-one-centre-out gives an event-weighted mean over held-out centres, not an interval"
           if result.method == "by_centre" else
           "no band: this estimator's intervals need the two-stage bootstrap ([validation] interval = 'two-stage')")
    return DifferenceBand(**common, estimate=est, lower=nan, upper=nan, band="", note=f"{what}; {why}")


def auc_difference_internal(comparison) -> DifferenceBand:
    """The validated AUC differences at the study horizons, with the comparison's own intervals."""
    h = np.asarray(comparison.horizons, float)
    rows = [comparison.differences.get(f"auc@{t:g}") for t in h]
    est = np.array([np.nan if r is None else r.estimate for r in rows], float)
    lo = np.array([np.nan if r is None else r.ci_lower for r in rows], float)
    hi = np.array([np.nan if r is None else r.ci_upper for r in rows], float)
    kinds = sorted({r.interval for r in rows if r is not None and r.interval})
    return DifferenceBand("auc", "internal", comparison.model, comparison.baseline, h, est, lo, hi, np.nan,
                          int(comparison.n_paired), "/".join(kinds),
                          "validated differences at the study horizons (the replicates hold the AUC there only)")


def difference_grid(y, horizons, n: int = 13) -> np.ndarray:
    """Times for an AUC curve: from the 20th percentile of event times to the last usable horizon.

    Every usable horizon (an event before it, follow-up after it) is on the grid, so the
    curve passes through the table's values.
    """
    t_ev = y["time"][y["event"]]
    if t_ev.size == 0:
        raise WorkbenchError("no events in the cohort: there is no AUC to draw over time.")
    last = float(np.max(y["time"]))
    h = np.asarray([t for t in np.atleast_1d(horizons) if float(t_ev.min()) < float(t) < last], float)
    hi = min(float(np.quantile(y["time"], 0.95)), float(h.max()) if h.size else last)
    lo = float(np.quantile(t_ev, 0.2))  # before that, too few cases for a stable AUC
    if hi <= lo:
        hi = float(h.max()) if h.size else float(np.quantile(y["time"], 0.9))
    return np.unique(np.r_[np.linspace(lo, hi, int(n)), h])


def _auc_pair(y, strata, method, r_m, r_b, grid) -> tuple[np.ndarray, np.ndarray]:
    from workbench.validation.external import censoring_for

    out = []
    for r in (r_m, r_b):
        cens = censoring_for(y, strata, method, r)
        try:
            out.append(np.asarray(time_dependent_auc(y, y, r, grid, censoring=cens).auc, float))
        except (WorkbenchError, ValueError, np.linalg.LinAlgError):
            vals = np.full(grid.size, np.nan)  # some grid time lies outside this resample's follow-up
            for k, t in enumerate(grid):
                try:
                    vals[k] = time_dependent_auc(y, y, r, [t], censoring=cens).auc[0]
                except (WorkbenchError, ValueError, np.linalg.LinAlgError):
                    pass
            out.append(vals)
    return out[0], out[1]


def external_auc_band(risk_model, risk_baseline, y, strata, censoring_method: str, grid, *, replicates: int,
                      random_state, conf_level: float = 0.95, model: str = "model",
                      baseline: str = "baseline") -> DifferenceBand:
    """AUC(t) of ``risk_model`` minus ``risk_baseline`` on an external cohort with a paired normal band.

    Parameters
    ----------
    risk_model, risk_baseline : RiskScores
        Fixed predictions of the two models for the external rows.
    y : structured ndarray
    strata : ndarray or None
        Centre of each row (censoring by centre, and Cox censoring covariates).
    censoring_method : {"km", "km_by_centre", "cox"}
        The resolved censoring model of the external validation.
    grid : array-like
        Times strictly inside the follow-up.
    replicates : int
    random_state : int or SeedSequence
        The external validation's seed: the resamples are those of its table.
    """
    grid = np.asarray(grid, float)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        em, eb = _auc_pair(y, strata, censoring_method, risk_model, risk_baseline, grid)
        est = em - eb
        from workbench.validation.external import resample_plan

        diffs = []
        for idx in resample_plan(random_state, y.size, replicates):
            s = None if strata is None else strata[idx]
            m, b = _auc_pair(y[idx], s, censoring_method, risk_model.take(idx), risk_baseline.take(idx), grid)
            diffs.append(m - b)
    d = np.array(diffs, float).reshape(-1, grid.size)
    lo, hi = resample_band(d, est, conf_level) if d.shape[0] >= 2 else (np.full(grid.size, np.nan),) * 2
    lo, hi = _guarded("auc", est, lo, hi)
    return DifferenceBand("auc", "external", model, baseline, grid, est, lo, hi, np.nan, int(d.shape[0]),
                          "normal" if np.isfinite(lo).any() else "",
                          "resamples of the external patients (those of the external table), predictions fixed; "
                          f"band: {RESAMPLE_RULE}, pointwise; measured pointwise coverage about 0.95 at 200 "
                          "patients (bench/bench_difference_bands.py)")


def auc_difference_external(external, fitted_models: dict, cohort, model: str, baseline: str) -> DifferenceBand:
    """:func:`external_auc_band` for a study's external validation (its seed, censoring and replicates)."""
    grid = difference_grid(cohort.y, external.horizons)
    strata = None if cohort.centre is None else np.asarray(cohort.centre).astype(str)
    method = external.censoring.method if external.censoring is not None else "km"
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        rm, rb = fitted_models[model].predict_risk(cohort), fitted_models[baseline].predict_risk(cohort)
    return external_auc_band(rm, rb, cohort.y, strata, method, grid,
                             replicates=int(external.settings.get("replicates", 0)),
                             random_state=np.random.SeedSequence(external.seed_entropy),
                             conf_level=external.conf_level, model=model, baseline=baseline)


def study_difference_bands(validation, comparisons: dict, external=None, external_comparisons=None,
                           fitted_models=None, external_cohort=None, horizon_index: int | None = None) -> dict:
    """Every difference curve of a study: model -> quantity -> setting -> DifferenceBand.

    Net benefit at ``horizon_index`` (default: the middle horizon, the one of the decision
    curves); AUC internal at the horizons, external on a grid.
    """
    j = len(validation.horizons) // 2 if horizon_index is None else int(horizon_index)
    out = {}
    for name, comp in comparisons.items():
        base = comp.baseline
        block = {"auc": {"internal": auc_difference_internal(comp)},
                 "net_benefit": {"internal": net_benefit_difference(validation, name, base, j)}}
        if external is not None and name in (external_comparisons or {}):
            try:
                block["auc"]["external"] = auc_difference_external(external, fitted_models, external_cohort,
                                                                   name, base)
            except WorkbenchError:
                block["auc"]["external"] = None
            block["net_benefit"]["external"] = net_benefit_difference(external, name, base, j)
        out[name] = block
    return out
