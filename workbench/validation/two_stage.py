"""Two-stage bootstrap intervals for validated performance (bootstrap estimators).

Cross-validation no longer comes here by default: its interval is the corrected
resampled t interval of the held-out fold values (:func:`.intervals.cv_interval`),
which needs no outer samples. ``validate(..., cv_interval="two-stage")`` still runs
the cross-validated outer stage below, so bench/bench_cv_intervals.py can measure
both side by side (the two-stage one was conservative for a cv C difference).

Estimand
--------
A validated estimate (optimism-corrected, out-of-bootstrap, .632+ or
cross-validated) is a statistic of the data like any other: the interval here
describes its sampling variability, i.e. it is a confidence interval for the
*expected* performance of the modelling process at this sample size
(Err = E[Err_XY] over training sets). The performance of the one model fitted on
these data (the conditional Err_XY) varies around Err, and validated estimates
are known to track Err better than Err_XY (Bates, Hastie & Tibshirani 2024), so
coverage of Err_XY can fall short of nominal; bench/bench_intervals.py reports both.

Method
------
Outer stage: draw ``outer`` bootstrap samples of the patients. Inner stage: in
each outer sample run the SAME estimator as on the data: refit on the outer
sample for the apparent value and on ``inner`` bootstrap samples of it (out-of-
bootstrap rows grouped by patient id, so copies of a patient drawn twice in the
outer sample are never split between training and evaluation) or on one
patient-grouped k-fold split of it (cross-validation). The interval is formed
from the outer estimates around the estimate from the data (the "two-stage
bootstrap" of Noma et al. 2021, from memory) by
:func:`~workbench.validation.intervals.two_stage_interval`: the
bias-corrected normal interval (bootstrap standard error, t on B - 1 df; Efron
& Tibshirani 1993), the rule the simulation showed to cover with the 20 to 100
outer samples a study can afford (percentiles of so few samples cut the tails
short). The bias correction
accounts for the shift of estimates computed on samples whose patients are
partly duplicated. Differences between models use
the same outer samples, paired. The .632+ no-information values of the data are
reused inside outer samples.

Cost: ``outer * (inner + 1)`` refits per model for the bootstrap estimators and
``outer * (folds + 1)`` for cross-validation (only with ``cv_interval="two-stage"``), on top of
the estimate itself.

References
----------
.. [1] Noma H, Shinozaki T, Iba K, Teramukai S, Maruo K. Confidence intervals of
       prediction accuracy measures for multivariable prediction models based on
       the bootstrap-based optimism correction methods. Stat Med 2021;40:5691-701.
.. [2] Efron B. Nonparametric standard errors and confidence intervals. Can J Stat
       1981;9:139-58.
.. [3] Bates S, Hastie T, Tibshirani R. Cross-validation: what does it estimate and
       how well does it do it? J Am Stat Assoc 2024;119:1434-45.
"""

from __future__ import annotations

import warnings

import numpy as np
from sklearn.model_selection import StratifiedGroupKFold

from workbench.cohort.core import Cohort
from workbench.validation.engine import _Task
from workbench.validation.estimators_bootstrap import bootstrap_estimate
from workbench.validation.plans import _oob_rows, _seed_int

__all__ = ["outer_estimates", "outer_net_benefit", "outer_pair_estimates", "outer_tasks"]


def outer_tasks(method: str, cohort: Cohort, outer: int, inner: int, folds: int, seed_ss,
                counts: dict, estimators: dict) -> list[_Task]:
    """Tasks of the two-stage bootstrap. ``fold = -1`` is the apparent fit on an outer sample.

    Bootstrap inner tasks evaluate the refit on the outer sample (``test``, needed
    by the optimism estimator only) and on its out-of-bootstrap rows (``oob``).
    ``counts`` caps the outer samples per model (model_replicates).
    """
    n = cohort.n
    need_o = any(e == "optimism" for e in estimators.values())
    tasks = []
    for s, child in enumerate(seed_ss.spawn(int(outer))):
        idx_ss, inner_ss, model_ss = child.spawn(3)
        idx = np.random.default_rng(idx_ss).integers(0, n, n)
        active = tuple(m for m, r in counts.items() if s < r)
        seeds = [_seed_int(x) for x in model_ss.spawn(max(inner, folds) + 1)]
        tasks.append(_Task(s, -1, idx, idx, False, seeds[-1], active, outer=s))
        if method == "bootstrap":
            rng = np.random.default_rng(inner_ss)
            for b in range(int(inner)):
                pos = rng.integers(0, n, n)
                oob = idx[_oob_rows(cohort.ids[idx], pos)]
                tasks.append(_Task(s, b, idx[pos], idx if need_o else oob, need_o, seeds[b], active,
                                   oob_idx=oob if need_o else None, outer=s))
        else:
            splitter = StratifiedGroupKFold(n_splits=int(folds), shuffle=True,
                                            random_state=_seed_int(inner_ss))
            with warnings.catch_warnings():
                warnings.simplefilter("ignore", UserWarning)
                for f, (tr, te) in enumerate(splitter.split(np.zeros(n), cohort.event[idx], cohort.ids[idx])):
                    tasks.append(_Task(s, f, idx[tr], idx[te], False, seeds[f], active, outer=s))
    return tasks


def _arm(rec, arm, k):
    if not rec.get("ok") or rec.get(arm) is None:
        return np.full(k, np.nan)
    return rec[arm][0]


def outer_estimates(method: str, tasks: list[_Task], outputs: list, names: tuple, estimators: dict,
                    gammas: dict, conf_level: float) -> dict:
    """Each model's estimate in each outer sample: dict model -> (n_outer, n_metrics) array.

    A model that failed its apparent fit or more than half of its inner fits in an
    outer sample gets a NaN row there (left out of the interval).
    """
    k = len(names)
    n_outer = 1 + max((t.outer for t in tasks), default=-1)
    models = sorted({m for o in outputs for m in o["models"]})
    out = {m: np.full((n_outer, k), np.nan) for m in models}
    by_outer: dict[int, list] = {}
    for t, o in zip(tasks, outputs, strict=True):
        by_outer.setdefault(t.outer, []).append((t, o))
    for s, rows in by_outer.items():
        for m in models:
            recs = [(t, o["models"][m]) for t, o in rows if m in o["models"]]
            app = [rec for t, rec in recs if t.fold == -1]
            inner = [(t, rec) for t, rec in recs if t.fold != -1]
            if not app or not app[0]["ok"] or sum(r["ok"] for _, r in inner) * 2 <= len(inner):
                continue
            a = app[0]["test"][0]
            if method == "cv":
                te = np.array([_arm(r, "test", k) for _, r in inner])
                with warnings.catch_warnings():
                    warnings.simplefilter("ignore", RuntimeWarning)
                    out[m][s] = np.nanmean(te, axis=0)
                continue
            est = estimators.get(m, "optimism")
            if est == "optimism":
                b = np.array([_arm(r, "train", k) for _, r in inner])
                o = np.array([_arm(r, "test", k) for _, r in inner])
                u = np.array([_arm(r, "oob", k) for _, r in inner])
            else:
                b = o = None
                u = np.array([_arm(r, "test", k) for _, r in inner])
            g = gammas.get(m)
            for j, nm in enumerate(names):
                out[m][s, j] = bootstrap_estimate(
                    est, nm, float(a[j]), None if b is None else b[:, j], None if o is None else o[:, j],
                    u[:, j], np.nan if g is None else float(g[j]), conf_level)[0]
    return out


def _pair_arm(pair, arm, k):
    v = None if pair is None else pair.get(arm)
    return np.full(k, np.nan) if v is None else np.asarray(v, dtype=float)


def outer_pair_estimates(method: str, tasks: list[_Task], outputs: list, names: tuple, estimators: dict,
                         conf_level: float) -> dict:
    """NRI and IDI (model against baseline) in each outer sample: dict (model, baseline) -> (n_outer, n_metrics).

    The estimator of the pair's estimate on the data (:func:`workbench.validation.estimators._summarise`):
    optimism when both models use it, else the out-of-bootstrap mean; cross-validation the mean over
    folds. A pair whose apparent value is missing in an outer sample, or that has no more than half of
    its inner values, gets a NaN row there (left out of the interval).
    """
    k = len(names)
    n_outer = 1 + max((t.outer for t in tasks), default=-1)
    by_outer: dict[int, list] = {}
    for t, o in zip(tasks, outputs, strict=True):
        by_outer.setdefault(t.outer, []).append((t, o))
    keys = sorted({key for o in outputs for key in o["pairs"]})
    out = {key: np.full((n_outer, k), np.nan) for key in keys}
    for s, rows in by_outer.items():
        for key in keys:
            app = [o["pairs"].get(key) for t, o in rows if t.fold == -1]
            inner = [o["pairs"].get(key) for t, o in rows if t.fold != -1]
            if not app or app[0] is None or sum(p is not None for p in inner) * 2 <= len(inner):
                continue
            a = _pair_arm(app[0], "test", k)
            inner = [p for p in inner if p is not None]
            with warnings.catch_warnings():
                warnings.simplefilter("ignore", RuntimeWarning)
                if method == "cv":
                    out[key][s] = np.nanmean([_pair_arm(p, "test", k) for p in inner], axis=0)
                    continue
                if all(estimators.get(m, "optimism") == "optimism" for m in key):
                    b = np.array([_pair_arm(p, "train", k) for p in inner])
                    o = np.array([_pair_arm(p, "test", k) for p in inner])
                    for j, nm in enumerate(names):
                        out[key][s, j] = bootstrap_estimate("optimism", nm, float(a[j]), b[:, j], o[:, j], None,
                                                            np.nan, conf_level)[0]
                else:  # out-of-bootstrap rows: the "oob" arm, or "test" when no model needed the original rows
                    arm = "oob" if any(p.get("oob") is not None for p in inner) else "test"
                    out[key][s] = np.nanmean([_pair_arm(p, arm, k) for p in inner], axis=0)
    return out


def _nb_arm(rec, arm):
    if not rec.get("ok") or rec.get(arm) is None:
        return None
    return np.asarray(rec[arm][1], dtype=float)


def outer_net_benefit(method: str, tasks: list[_Task], outputs: list, estimators: dict) -> dict:
    """Each model's validated decision curves in each outer sample: model -> (n_outer, n_horizons, n_thresholds).

    The same estimator as the validated curves of :func:`workbench.validation.compare.compare_models`:
    optimism (apparent minus mean inner optimism), out-of-bootstrap (mean over inner
    out-of-bootstrap rows; .632+ has no no-information net benefit and uses it too) or
    cross-validation (mean over folds). NaN rows where :func:`outer_estimates` has them.
    """
    n_outer = 1 + max((t.outer for t in tasks), default=-1)
    by_outer: dict[int, list] = {}
    for t, o in zip(tasks, outputs, strict=True):
        by_outer.setdefault(t.outer, []).append((t, o))
    out = {}
    for s, rows in by_outer.items():
        for m in sorted({m for _, o in rows for m in o["models"]}):
            recs = [(t, o["models"][m]) for t, o in rows if m in o["models"]]
            app = [rec for t, rec in recs if t.fold == -1]
            inner = [rec for t, rec in recs if t.fold != -1]
            if not app or not app[0]["ok"] or sum(r["ok"] for r in inner) * 2 <= len(inner):
                continue
            a = _nb_arm(app[0], "test")
            if a is None:
                continue
            if m not in out:
                out[m] = np.full((n_outer, *a.shape), np.nan)
            with warnings.catch_warnings():
                warnings.simplefilter("ignore", RuntimeWarning)
                if method == "bootstrap" and estimators.get(m, "optimism") == "optimism":
                    pairs = [(_nb_arm(r, "train"), _nb_arm(r, "test")) for r in inner]
                    gaps = [b - o for b, o in pairs if b is not None and o is not None]
                    if gaps:
                        out[m][s] = a - np.nanmean(np.array(gaps), axis=0)
                else:
                    te = [x for x in (_nb_arm(r, "test") for r in inner) if x is not None]
                    if te:
                        out[m][s] = np.nanmean(np.array(te), axis=0)
    return out
