"""External validation of the competing-risks models: fixed predictions, resampled patients.

The models fitted on the whole development cohort predict the cumulative incidence of
the cause of interest for every external patient once; the metrics of those fixed
predictions (competing AUC, IPCW Brier score, IPA, ICI at each horizon, and the
combined-minus-clinical differences on the same patients) get the interval the main
engine gives external validation (:func:`workbench.validation.intervals.resample_interval`:
a normal interval from the spread over resamples of the external patients), clipped to
each metric's range and withdrawn with a reason where it is unusable
(:func:`~workbench.validation.intervals.guard`). Censoring weights come from the external
cohort itself. Measured in bench/bench_competing_external.py.
"""

from __future__ import annotations

import warnings

import numpy as np

from workbench.competing.metrics import (
    competing_auc,
    competing_brier,
    competing_smoothed_calibration,
)
from workbench.competing.outcome import IncidenceCurves
from workbench.errors import WorkbenchError
from workbench.validation.intervals import RESAMPLE_RULE, guard, resample_interval

__all__ = ["EXTERNAL_INTERVAL_RULE", "METRICS", "external_block", "score_curves", "with_differences"]

METRICS = ("auc", "brier", "ipa", "ici")
"""Per horizon: competing AUC (definition 2), IPCW Brier score, IPA, ICI."""
EXTERNAL_INTERVAL_RULE = RESAMPLE_RULE
DIFFERENCE = "combined_minus_clinical"


def score_curves(y, curves: IncidenceCurves, horizons, metrics=METRICS) -> dict:
    """Metrics of predicted incidences ``curves`` on outcomes ``y``: {metric: array over horizons}.

    NaN where a metric is undefined (e.g. no case by an early horizon); censoring weights
    from ``y`` itself.
    """
    h = np.asarray(horizons, dtype=float)
    out = {m: np.full(h.size, np.nan) for m in METRICS}
    for j, t0 in enumerate(h):
        try:
            out["auc"][j] = competing_auc(y, y, curves, t0).auc
        except WorkbenchError:
            pass
        if "ici" not in metrics:
            continue
        try:
            out["ici"][j] = competing_smoothed_calibration(y, curves, t0).ici
        except WorkbenchError:
            pass
    try:
        b = competing_brier(y, y, curves, h)
        out["brier"], out["ipa"] = np.asarray(b.brier, float), np.asarray(b.ipa, float)
    except WorkbenchError:
        pass
    return out


def with_differences(scores: dict) -> dict:
    out = dict(scores)
    for (target, model, method), s in scores.items():
        base = scores.get((target, "clinical", method))
        if model == "combined" and base is not None:
            out[(target, DIFFERENCE, method)] = {m: s[m] - base[m] for m in METRICS}
    return out


def _score_all(curves: dict, outcomes: dict, h, metrics, idx=None) -> dict:
    scores = {}
    for (target, model, method), c in curves.items():
        y = outcomes[target] if idx is None else outcomes[target][idx]
        cc = c if idx is None else IncidenceCurves(c.times, c.risks[idx], c.cause, c.model)
        scores[(target, model, method)] = score_curves(y, cc, h, metrics)
    return with_differences(scores)


def external_block(curves: dict, outcomes: dict, horizons, *, replicates: int, seed, conf_level: float = 0.95,
                   metrics=METRICS) -> dict:
    """Estimates and intervals of fixed predictions on an external cohort.

    Parameters
    ----------
    curves : dict (target, model, method) -> IncidenceCurves
        Each model's predictions for the external patients (rows in cohort order).
    outcomes : dict target -> competing outcome array
        The external patients' outcome of each target.
    horizons : array-like
    replicates : int
        Resamples of the external patients (fewer than 10: no intervals).
    seed : int or SeedSequence
    conf_level : float

    Returns
    -------
    dict (target, model, method) -> metric -> {"estimate", "lower", "upper": arrays over
    horizons, "note": list of str (why an interval is withdrawn, "" when reported)}, with
    model ``"combined_minus_clinical"`` for the paired differences.
    """
    h = np.asarray(horizons, dtype=float)
    n = len(next(iter(outcomes.values())))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        point = _score_all(curves, outcomes, h, metrics)
        rng = np.random.default_rng(seed)
        reps = [_score_all(curves, outcomes, h, metrics, rng.integers(0, n, n)) for _ in range(int(replicates))]
    out = {}
    for key, est in point.items():
        diff = key[1] == DIFFERENCE
        block = {}
        for m in METRICS:
            lo, hi, notes = np.full(h.size, np.nan), np.full(h.size, np.nan), []
            for j in range(h.size):
                v = np.array([r[key][m][j] for r in reps], dtype=float)
                a, b = resample_interval(v, float(est[m][j]), conf_level)
                lo[j], hi[j], why = guard(m, float(est[m][j]), float(a), float(b), difference=diff)
                notes.append(why)
            block[m] = {"estimate": np.asarray(est[m], float), "lower": lo, "upper": hi, "note": notes}
        out[key] = block
    return out
