"""The report's appendix: what a reader needs to compute the models' predictions without the software.

* the whole baseline survival curve S0(t) of each Cox model (a step at every training
  event time) -- drawn, tabulated at regular times, and given in full in results.json;
* the values the clinical terms learned from the training rows (spline knots, reference
  levels, detection limits, imputation values);
* for the imaging signature: the ComBat location and scale of every training scanner
  for each kept feature, the pooled mean and SD it standardises with, the scaling
  (mean, SD after harmonisation) and the weight per SD.

All values are read from the fits on all analysis rows (the models the bundle holds).
"""

from __future__ import annotations

import numpy as np

from workbench.figures.ticks import time_ticks
from workbench.models.labels import model_labels
from workbench.stats.coxph import baseline_survival_at


def baseline_curves(result) -> dict[str, tuple[np.ndarray, np.ndarray]]:
    """Model name -> (event times, S0 after each) for every Cox model with a baseline hazard."""
    out = {}
    for name, m in result.models.items():
        fit = getattr(m, "fit_", None)
        if fit is not None and hasattr(fit, "baseline_times") and hasattr(m, "transformer_"):
            t = np.asarray(fit.baseline_times, float)
            out[name] = (t, np.asarray(baseline_survival_at(fit, t), float))
    return out


def baseline_table(result, curves=None) -> dict:
    """S0(t) of every Cox model at regular times of the study's unit (header row and rows)."""
    curves = baseline_curves(result) if curves is None else curves
    if not curves:
        return {"models": [], "rows": []}
    t_max = max(float(t[-1]) for t, _ in curves.values())
    ticks = time_ticks(t_max, result.spec.data.time_unit, max_ticks=14)
    times = np.unique(np.r_[ticks[ticks > 0], np.asarray(result.spec.horizons, float)])
    times = times[times <= t_max]
    labels = model_labels(result.models)
    rows = [{"time": float(x), "cells": [float(baseline_survival_at(result.models[k].fit_, [x])[0]) for k in curves]}
            for x in times]
    return {"models": [labels[k] for k in curves], "rows": rows}


def clinical_parameters(result) -> list[dict]:
    """Learned values of each clinical term (from the first model that has the clinical terms)."""
    fitted = next((m for m in result.models.values() if hasattr(m, "transformer_")), None)
    if fitted is None:
        return []
    rows = []
    for t in fitted.transformer_.terms_:
        bits = []
        if getattr(t, "knots_raw", ()):
            bits.append("spline knots at " + ", ".join(f"{k:.4g}" for k in t.knots_raw))
        if getattr(t, "levels", None):
            bits.append("levels " + ", ".join(map(str, t.levels)) + f"; reference {t.reference}")
        if getattr(t, "detection_limit", None) is not None:
            bits.append(f"detection limit {t.detection_limit:g} (below-limit indicator term)")
        if getattr(t, "impute_value", None) is not None:
            bits.append(f"missing values set to {t.impute_value}")
        rows.append({"term": t.column, "columns": list(fitted.transformer_.columns_[t.start:t.stop]),
                     "learned": "; ".join(bits) or "used as recorded (after its transform)"})
    return rows


def signature_parameters(result) -> dict | None:
    """ComBat location/scale per training scanner, scaling and weights of the kept signature features."""
    m = result.models.get("combined")
    sig = getattr(m, "signature_", None)
    if sig is None or not len(sig.selected_features_):
        return None
    kept = list(sig.selected_features_)
    pos = [list(sig.feature_names_in_).index(f) for f in kept]
    rows = [{"feature": f, "mean": float(sig.scaler_.mean_[j]), "sd": float(sig.scaler_.scale_[j]),
             "weight": float(sig.coef_[f])} for f, j in zip(kept, pos, strict=True)]
    cb = sig.combat_
    combat = None
    if cb is not None:
        cpos = [list(map(str, cb.feature_names_in_)).index(f) for f in kept]
        batches = [str(b) for b in cb.batches_]
        names = _covariate_names(m, cb.n_covariates_)
        combat = {
            "batches": batches,
            "covariates": names,
            "n_covariates": int(cb.n_covariates_),
            "rows": [{"feature": f, "grand_mean": float(cb.grand_mean_[j]), "pooled_sd": float(np.sqrt(cb.var_pooled_[j])),
                      "passthrough": bool(cb.passthrough_[j]),
                      "covariate_coef": [float(b) for b in np.atleast_2d(cb.beta_)[:, j]] if cb.n_covariates_ else [],
                      "per_batch": [(float(cb.gamma_star_[k, j]), float(cb.delta_star_[k, j]))
                                    for k in range(len(batches))]}
                     for f, j in zip(kept, cpos, strict=True)],
        }
    coef = float(m.fit_.coef[list(m.fit_.names).index(next(n for n in m.fit_.names if "signature" in n))]) \
        if any("signature" in n for n in m.fit_.names) else None
    return {"rows": rows, "combat": combat, "signature_coef": coef}


def _covariate_names(model, k: int) -> list[str]:
    """Design columns of the clinical terms ComBat preserved, in the order it used them."""
    protect = tuple(getattr(model, "protect", ()) or ())
    tr = getattr(model, "transformer_", None)
    names = ([tr.columns_[j] for t in tr.terms_ if t.column in protect for j in range(t.start, t.stop)]
             if tr is not None else [])
    return names if len(names) == k else [f"covariate {i + 1}" for i in range(k)]


def appendix_context(result) -> dict:
    """Everything the appendix shows, as plain data."""
    curves = baseline_curves(result)
    return {"baseline": baseline_table(result, curves), "clinical": clinical_parameters(result),
            "signature": signature_parameters(result), "has_curves": bool(curves),
            "wide_models": wide_models_note(result)}


def wide_models_note(result) -> str | None:
    """Where the fitted models that use the whole feature pool keep their learned values (None: none fitted)."""
    wide = {"penalised_all": "the penalised model with all imaging features", "forest": "the random survival forest"}
    fitted = [wide[k] for k in result.models if k in wide]
    if not fitted:
        return None
    parts = (["ComBat parameters"] if result.spec.imaging.harmonise.method != "none" else []) + (
        ["coefficients"] if "penalised_all" in result.models else []) + (
        ["fitted trees"] if "forest" in result.models else [])
    who = " and ".join(fitted)
    verb = "uses" if len(fitted) == 1 else "use"
    return (f"{who[0].upper()}{who[1:]} {verb} every feature of the pool; {'its' if len(fitted) == 1 else 'their'} "
            f"{' and '.join(parts)} are in the model bundle rather than printed here.")
