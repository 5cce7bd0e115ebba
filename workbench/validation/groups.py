"""Performance in each hospital (or scanner) and its heterogeneity.

Each level of a grouping (a centre, a scanner) is evaluated on its own rows
with censoring weights and the null model from those rows, with a normal
bootstrap interval over resamples of its rows (predictions fixed;
:func:`~.intervals.resample_interval`). The
per-level estimates are pooled by random-effects meta-analysis
(:mod:`workbench.validation.meta`): C on the logit scale, O/E on the log scale,
the calibration slope and the Brier score as they are; the within-level
standard error is the bootstrap SD on the pooling scale.

Used for an external cohort (per centre and per scanner) and for
leave-one-centre-out validation (:func:`loco_groups`: each held-out centre is
scored by the models fitted on the other centres).
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass

import numpy as np

from workbench.errors import MetricError, WorkbenchError
from workbench.validation.intervals import guard, resample_interval
from workbench.validation.meta import POOLING_SCALES, prior_scale_for, random_effects, transform

__all__ = ["GROUP_METRICS", "GroupBlock", "LevelEstimate", "evaluate_groups", "group_metric_names", "loco_groups"]

GROUP_METRICS = ("harrell_c", "brier", "ipa", "oe_ratio", "cal_slope", "ici")
"""Metric families reported per level (per horizon where they have one)."""
POOLED = ("harrell_c", "oe_ratio", "cal_slope", "brier")
"""Metric families pooled across levels."""


def group_metric_names(horizons) -> tuple[str, ...]:
    hs = [f"{float(h):g}" for h in np.atleast_1d(horizons)]
    return ("harrell_c",) + tuple(f"{m}@{h}" for m in GROUP_METRICS[1:] for h in hs)


@dataclass(frozen=True)
class LevelEstimate:
    """One metric of one model at one level: estimate, interval (resample_interval), SE on the pooling scale."""

    estimate: float
    ci_lower: float
    ci_upper: float
    se_pooling_scale: float
    n_used: int
    ci_note: str = ""  # why the interval is withdrawn (NaN), from intervals.guard; "" when reported


@dataclass(frozen=True)
class GroupBlock:
    """Per-level performance of every model and its random-effects pooling.

    Attributes
    ----------
    grouping : str
        "centre" or "scanner".
    levels : tuple of str
    n, n_events : dict of str to int
        Rows and events per level.
    censoring : str
        Censoring model used within each level.
    estimates : dict model -> level -> metric -> LevelEstimate
    pooled : dict model -> metric -> MetaResult
        Only where at least 2 levels have a finite estimate and SE.
    pooling_method : str
    notes : tuple of str
    """

    grouping: str
    levels: tuple
    n: dict
    n_events: dict
    censoring: str
    estimates: dict
    pooled: dict
    pooling_method: str = "dl"
    notes: tuple = ()


def _level_values(preds, y, strata, method, h, grid, kw, names, on_error="nan") -> dict:
    from workbench.validation.external import evaluate_cohort

    with warnings.catch_warnings():
        warnings.simplefilter("ignore", category=Warning)
        try:
            perfs = evaluate_cohort(preds, y, strata, method, h, grid, kw, on_error=on_error)
        except (WorkbenchError, np.linalg.LinAlgError, ValueError):
            return {m: np.full(len(names), np.nan) for m in preds}
    return {m: np.array([p.scalars()[nm] for nm in names]) for m, p in perfs.items()}


def _scale(name: str) -> str:
    return POOLING_SCALES.get(name.split("@")[0], "identity")


def level_block(preds, y, strata, method, h, grid, kw, *, replicates: int, seed, conf_level: float) -> dict:
    """model -> metric -> LevelEstimate for one level's rows (predictions fixed)."""
    names = group_metric_names(h)
    point = _level_values(preds, y, strata, method, h, grid, kw, names)
    n = y.size
    reps = {m: [] for m in preds}
    rng = np.random.default_rng(seed)
    for _ in range(int(replicates)):
        idx = rng.integers(0, n, n)
        taken = {m: (r.take(idx), c.take(idx)) for m, (r, c) in preds.items()}
        vals = _level_values(taken, y[idx], None if strata is None else strata[idx], method, h, grid, kw,
                             names)
        for m in preds:
            reps[m].append(vals[m])
    out = {}
    for m in preds:
        R = np.array(reps[m]).reshape(-1, len(names))
        block = {}
        for j, nm in enumerate(names):
            v = R[:, j][np.isfinite(R[:, j])]
            lo, hi = resample_interval(v, float(point[m][j]), conf_level)
            # the rule of every workbench interval: within the metric's range, never zero width,
            # never excluding its own estimate (few resamples can give either)
            lo, hi, why = guard(nm, float(point[m][j]), float(lo), float(hi))
            tv = transform(v, _scale(nm))
            tv = tv[np.isfinite(tv)]
            se = float(np.std(tv, ddof=1)) if tv.size >= 2 else np.nan
            block[nm] = LevelEstimate(float(point[m][j]), float(lo), float(hi), se, int(v.size), why)
        out[m] = block
    return out


def pool_levels(estimates: dict, models, names, method: str = "dl", conf_level: float = 0.95) -> dict:
    """model -> metric -> MetaResult for the pooled metric families."""
    pooled = {}
    for m in models:
        pooled[m] = {}
        for nm in names:
            if nm.split("@")[0] not in POOLED:
                continue
            lv = [estimates[lev][m][nm] for lev in estimates]
            vals = np.array([e.estimate for e in lv])
            ses = np.array([e.se_pooling_scale for e in lv])
            try:
                pooled[m][nm] = random_effects(vals, ses, scale=_scale(nm), method=method, conf_level=conf_level,
                                               prior_scale=prior_scale_for(nm))
            except MetricError:
                continue
    return pooled


def _by_model(est_by_level: dict, models) -> dict:
    return {m: {lev: est_by_level[lev][m] for lev in est_by_level} for m in models}


def evaluate_groups(preds, y, strata, labels: dict, method: str, h, grid, kw, *, replicates: int, entropy: int,
                    conf_level: float = 0.95, pooling: str = "dl") -> dict[str, GroupBlock]:
    """Per-level blocks for each grouping in ``labels`` (name -> per-row label array or None)."""
    out = {}
    names = group_metric_names(h)
    models = tuple(preds)
    for gi, (grouping, lab) in enumerate(labels.items()):
        if lab is None:
            continue
        lab = np.asarray(lab).astype(str)
        levels = tuple(sorted(np.unique(lab)))
        per_level, n, ev = {}, {}, {}
        inner = method
        for li, lev in enumerate(levels):
            rows = np.flatnonzero(lab == lev)
            sub = {m: (r.take(rows), c.take(rows)) for m, (r, c) in preds.items()}
            s_sub = None if strata is None else strata[rows]
            if inner == "km_by_centre" and (s_sub is None or np.unique(s_sub).size < 2):
                inner_l = "km"
            else:
                inner_l = inner
            seed = np.random.SeedSequence(entropy, spawn_key=(1000 + gi, li))
            per_level[lev] = level_block(sub, y[rows], s_sub, inner_l, h, grid, kw, replicates=replicates,
                                         seed=seed, conf_level=conf_level)
            n[lev], ev[lev] = int(rows.size), int(y["event"][rows].sum())
        pooled = pool_levels(per_level, models, names, pooling, conf_level) if len(levels) >= 2 else {}
        notes = () if len(levels) >= 2 else (f"one {grouping} only: nothing to pool.",)
        out[grouping] = GroupBlock(grouping, levels, n, ev, method, _by_model(per_level, models), pooled,
                                   pooling, notes)
    return out


def loco_groups(models, cohort, horizons, *, replicates: int, entropy: int, conf_level: float = 0.95,
                calibration: bool = True, pooling: str = "dl") -> GroupBlock:
    """Leave-one-centre-out: each centre scored by models fitted on the others, with its own weights.

    Parameters
    ----------
    models : dict of name to unfitted model
    cohort : Cohort with ``centre``
    replicates : int
        Bootstrap resamples of each held-out centre (predictions fixed) for the intervals.

    References
    ----------
    .. [1] Royston P, Parmar MKB, Sylvester R. Construction and validation of a
           prognostic model across several studies. Stat Med 2004;23:907-26.
    .. [2] Debray TPA et al. BMJ 2017;356:i6460.
    """
    from workbench.models.base import clone_model
    from workbench.validation.external import predict_cohort

    if cohort.centre is None:
        raise WorkbenchError("per-centre validation needs a centre column ([data] centre = '...').")
    lab = np.asarray(cohort.centre).astype(str)
    levels = tuple(sorted(np.unique(lab)))
    names = group_metric_names(horizons)
    kw = {"tau": None, "calibration": calibration, "thresholds": None, "time_unit": cohort.time_unit}
    per_level, n, ev, notes = {}, {}, {}, []
    for li, lev in enumerate(levels):
        train, test = cohort.take(np.flatnonzero(lab != lev)), cohort.take(np.flatnonzero(lab == lev))
        fitted = {}
        for nm, m in models.items():
            try:
                fitted[nm] = clone_model(m).fit(train)
            except WorkbenchError as exc:
                notes.append(f"{nm} could not be fitted without {lev}: {exc}")
        preds, h, grid = predict_cohort(fitted, test, horizons)
        seed = np.random.SeedSequence(entropy, spawn_key=(2000, li))
        per_level[lev] = level_block(preds, test.y, None, "km", h, grid, kw, replicates=replicates, seed=seed,
                                     conf_level=conf_level)
        n[lev], ev[lev] = int(test.n), int(test.n_events)
    fitted_names = tuple(nm for nm in models if all(nm in per_level[lev] for lev in levels))
    per_level = {lev: {m: per_level[lev][m] for m in fitted_names} for lev in levels}
    pooled = pool_levels(per_level, fitted_names, names, pooling, conf_level)
    return GroupBlock("centre", levels, n, ev, "km", _by_model(per_level, fitted_names), pooled, pooling,
                      tuple(notes))
