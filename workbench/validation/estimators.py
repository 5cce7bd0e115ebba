"""Turning replicate metrics into estimates and intervals (see :mod:`.resample` for the methods).

The estimator families live in their own modules (:mod:`.estimators_bootstrap`,
:mod:`.estimators_cv`, :mod:`.two_stage` for intervals); this module dispatches
to them and collects the replicate records of the engine.
"""

from __future__ import annotations

from collections import Counter

import numpy as np

from workbench.errors import ModelError
from workbench.validation.estimators_bootstrap import bootstrap_estimate
from workbench.validation.estimators_cv import by_centre_estimate, cv_estimate, external_estimate
from workbench.validation.evaluate import metric_names, pair_metric_names
from workbench.validation.intervals import (
    CV_MIN_FOLD_VALUES,
    cv_interval,
    cv_withheld,
    guard,
    two_stage_interval,
    two_stage_withheld,
)
from workbench.validation.results import (
    MetricEstimate,
    ReplicateFailure,
    ReplicateMetrics,
    SelectionSummary,
)

INTERVALS = ("two-stage", "shifted-percentile")

_NO_INTERVAL = {
    "bootstrap": "no interval: the out-of-bootstrap and .632+ estimates need the two-stage "
                 "bootstrap for an interval ([validation] interval = 'two-stage')",
    "cv": f"no interval: fewer than {CV_MIN_FOLD_VALUES} held-out fold values (more folds or repeats "
          "give one)",
    "by_centre": "no interval: the leave-one-centre-out estimate is an event-weighted mean over the held-out "
                 "centres and its SD is their heterogeneity, not a standard error; see the per-centre values with "
                 "their intervals and the random-effects pooling (by_group)",
    "external": "no interval: fewer than 10 usable resamples of the external patients (more replicates "
                "give one)",
}


def _estimates(method: str, apparent: np.ndarray, rm: ReplicateMetrics, conf_level: float,
               estimator: str = "optimism", gamma: np.ndarray | None = None,
               outer: np.ndarray | None = None, difference: bool = False,
               cv_ratio: float | None = None) -> dict:
    """One MetricEstimate per metric of ``rm``.

    ``estimator`` (bootstrap only): "optimism", "oob" or "632plus"; ``gamma``: the
    no-information values for .632+; ``outer``: estimates of the same estimator in
    each outer sample of the two-stage bootstrap (rows) for the interval;
    ``difference``: the values are model-minus-baseline differences (range checks);
    ``cv_ratio`` (cv without outer samples): n_test / n_train of the folds, for the
    corrected resampled t interval (:func:`~.intervals.cv_interval`) of the held-out
    fold values.
    """
    out = {}
    for j, name in enumerate(rm.names):
        a = float(apparent[j])
        opt, est, sd, lo, hi, used, label, note = np.nan, np.nan, np.nan, np.nan, np.nan, 0, method, ""
        ilabel = withheld = ""
        if method == "bootstrap":
            est, opt, sd, (lo, hi), used, label = bootstrap_estimate(
                estimator, name, a, rm.train[:, j][rm.ok] if rm.train is not None else None,
                rm.test[:, j][rm.ok] if rm.test is not None else None,
                rm.oob[:, j][rm.ok] if rm.oob is not None else None,
                np.nan if gamma is None else float(gamma[j]), conf_level)
            ilabel = "shifted-percentile" if np.isfinite(lo) else ""
        elif method == "external":
            est, sd, (lo, hi), used = external_estimate(a, rm.train[rm.ok, j], conf_level)
            ilabel = "normal"
        elif method == "cv":
            est, sd, used = cv_estimate(rm.test[:, j], rm.replicate, rm.ok)
            if outer is None and cv_ratio is not None:
                withheld = cv_withheld(name, difference)
                if not withheld:
                    lo, hi = cv_interval(rm.test[rm.ok, j], est, cv_ratio, conf_level)
                    ilabel = "corrected-t"
        else:
            est, sd, used = by_centre_estimate(rm.test[:, j], rm.events, rm.ok)
        withheld_2s = two_stage_withheld(name, difference) if method == "bootstrap" else ""
        if outer is not None and outer.shape[0] and withheld_2s:
            lo = hi = np.nan
            note = withheld_2s
        elif outer is not None and outer.shape[0]:
            lo, hi = two_stage_interval(outer[:, j], est, conf_level)
            ilabel = "two-stage"
            if not np.isfinite(lo):
                note = "interval not computable: too few usable outer bootstrap samples"
        elif not np.isfinite(lo) and np.isfinite(est):
            note = withheld or _NO_INTERVAL.get(method, "")
        lo, hi, why = guard(name, est, lo, hi, difference)
        note = why or note
        out[name] = MetricEstimate(name, a, opt, float(est), float(sd), float(lo), float(hi), int(used),
                                   estimator=label, interval=ilabel if np.isfinite(lo) else "", note=note)
    return out


def _model_metrics(name, tasks, outputs, arms, names, k, m, with_fold) -> ReplicateMetrics:
    rows = [(t, o["models"][name], o["events"]) for t, o in zip(tasks, outputs, strict=True)
            if name in o["models"]]
    vals = {a: np.full((len(rows), len(names)), np.nan) for a in arms}
    nbs = {a: np.full((len(rows), k, m), np.nan) for a in arms}
    for i, (_, rec, _) in enumerate(rows):
        if rec["ok"]:
            for a in arms:
                if rec.get(a) is not None:
                    vals[a][i], nbs[a][i] = rec[a][0], rec[a][1]
    ev_arm = "test" if "test" in arms else "train"
    return ReplicateMetrics(
        names=names, train=vals.get("train"), test=vals.get("test"),
        nb_train=nbs.get("train"), nb_test=nbs.get("test"), oob=vals.get("oob"), nb_oob=nbs.get("oob"),
        replicate=np.array([t.index for t, _, _ in rows], dtype=int),
        fold=np.array([t.fold for t, _, _ in rows], dtype=int) if with_fold else None,
        ok=np.array([rec["ok"] for _, rec, _ in rows], dtype=bool),
        events=np.array([ev[ev_arm] for _, _, ev in rows], dtype=int),
    )


def _pair_metrics(key, tasks, outputs, arms, names, with_fold) -> ReplicateMetrics:
    # A pair row exists only where both models were fitted and evaluated.
    rows = [(t, o["pairs"][key], o["events"]) for t, o in zip(tasks, outputs, strict=True)
            if key in o["pairs"]]
    nan = np.full(len(names), np.nan)
    vals = {a: np.array([nan if p.get(a) is None else p[a] for _, p, _ in rows]).reshape(len(rows), len(names))
            for a in arms}
    ev_arm = "test" if "test" in arms else "train"
    return ReplicateMetrics(
        names=names, train=vals.get("train"), test=vals.get("test"), nb_train=None, nb_test=None,
        oob=vals.get("oob"),
        replicate=np.array([t.index for t, _, _ in rows], dtype=int),
        fold=np.array([t.fold for t, _, _ in rows], dtype=int) if with_fold else None,
        ok=np.ones(len(rows), dtype=bool),
        events=np.array([ev[ev_arm] for _, _, ev in rows], dtype=int),
    )


def _summarise(method, tasks, outputs, models, n_rep, apparent, apparent_pairs, fits, horizons,
               arms, conf_level, max_failure_rate, unit, estimator=None, gammas=None, outer=None,
               cv_ratio=None, outer_pairs=None):
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
        est_name = (estimator or {}).get(name, "optimism")
        estimates[name] = _estimates(method, apparent[name].vector(), rm, conf_level, est_name,
                                     (gammas or {}).get(name), (outer or {}).get(name), cv_ratio=cv_ratio)
        recs = [(t, o["models"][name]) for t, o in zip(tasks, outputs, strict=True) if name in o["models"]]
        for t, rec in recs:
            if not rec["ok"]:
                log.append(ReplicateFailure(name, t.index, t.fold, rec["stage"], rec["message"]))
        failures[name] = int((~rm.ok).sum())
        nan_counts = Counter()
        used_arms = ("oob",) if method == "bootstrap" and est_name != "optimism" else arms
        for a in (x for x in used_arms if x != "oob" or "oob" in arms):
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
        ests = {(estimator or {}).get(nm, "optimism") for nm in key}
        pair_est[key] = _estimates(method, pp.vector(), rm, conf_level,
                                   "optimism" if ests == {"optimism"} else "oob",
                                   outer=(outer_pairs or {}).get(key), difference=True, cv_ratio=cv_ratio)
    return dict(metric_names=names, pair_metric_names=pnames, replicates=replicates,
                estimates=estimates, failures=failures, failure_log=tuple(log),
                dropped_metrics=dropped, selection=selection, warning_counts=warn,
                pair_replicates=pair_reps, pair_estimates=pair_est)


def cv_test_train_ratio(result) -> float | None:
    """n_test / n_train = 1 / (k - 1) of a cross-validation run whose interval is :func:`~.intervals.cv_interval`."""
    if result.method != "cv" or getattr(result, "interval", "") != "corrected-t":
        return None
    return 1.0 / (int(result.settings["folds"]) - 1)


def difference_estimates(result, model: str, baseline: str, paired: ReplicateMetrics,
                         a_diff: np.ndarray) -> dict:
    """Validated model-minus-baseline differences, one estimator for both arms.

    Optimism, cv and by_centre: the estimator applied to the paired per-replicate
    differences (for the optimism correction this equals the difference of the two
    corrected estimates). Out-of-bootstrap and .632+: the difference of the two
    models' estimates (the .632+ weights are not linear in the values). Two-stage
    intervals: :func:`~.intervals.two_stage_interval` of the paired differences of
    the outer-sample estimates. Cross-validation without outer samples: the corrected
    resampled t interval (:func:`~.intervals.cv_interval`) of the paired per-fold differences.
    """
    ests = {result.estimator.get(m, "optimism") for m in (model, baseline)}
    if len(ests) > 1:
        raise ModelError(f"models {model!r} and {baseline!r} were validated with different estimators "
                         f"({sorted(ests)}); a comparison needs one estimator for both.")
    est_name = ests.pop()
    om, ob = result.outer_estimates.get(model), result.outer_estimates.get(baseline)
    outer = None if om is None or ob is None else om - ob
    if result.method != "bootstrap" or est_name == "optimism":
        return _estimates(result.method, a_diff, paired, result.conf_level, est_name,
                          outer=outer, difference=True, cv_ratio=cv_test_train_ratio(result))
    out = {}
    for j, nm in enumerate(paired.names):
        em, eb = result.estimates[model][nm], result.estimates[baseline][nm]
        est = em.estimate - eb.estimate
        lo, hi, note = np.nan, np.nan, _NO_INTERVAL["bootstrap"]
        if outer is not None:
            lo, hi = two_stage_interval(outer[:, j], est, result.conf_level)
            note = "" if np.isfinite(lo) else "interval not computable: too few usable outer bootstrap samples"
        lo, hi, why = guard(nm, est, lo, hi, difference=True)
        label = em.estimator if em.estimator == eb.estimator else f"{em.estimator}/{eb.estimator}"
        out[nm] = MetricEstimate(nm, float(a_diff[j]), float(a_diff[j]) - est, est, np.nan, lo, hi,
                                 min(em.n_used, eb.n_used), estimator=label,
                                 interval="two-stage" if np.isfinite(lo) else "", note=why or note)
    return out
