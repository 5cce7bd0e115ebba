"""Turning replicate metrics into estimates and intervals (see :mod:`.resample` for the methods)."""

from __future__ import annotations

from collections import Counter

import numpy as np

from workbench.errors import ModelError
from workbench.validation.evaluate import metric_names, pair_metric_names
from workbench.validation.results import (
    MetricEstimate,
    ReplicateFailure,
    ReplicateMetrics,
    SelectionSummary,
)


def _percentiles(v: np.ndarray, conf_level: float) -> tuple[float, float]:
    if v.size < 2:
        return np.nan, np.nan
    a = (1.0 - conf_level) / 2.0
    lo, hi = np.quantile(v, [a, 1.0 - a])
    return float(lo), float(hi)


def _sd(v: np.ndarray) -> float:
    return float(np.std(v, ddof=1)) if v.size >= 2 else np.nan


def _estimates(method: str, apparent: np.ndarray, rm: ReplicateMetrics, conf_level: float) -> dict:
    out = {}
    for j, name in enumerate(rm.names):
        a = float(apparent[j])
        opt, est, sd, lo, hi, used = np.nan, np.nan, np.nan, np.nan, np.nan, 0
        if method == "bootstrap":
            b, o = rm.train[rm.ok, j], rm.test[rm.ok, j]
            keep = np.isfinite(b) & np.isfinite(o)
            b, o, used = b[keep], o[keep], int(keep.sum())
            if used:
                opt = float(np.mean(b - o))
                est, sd = a - opt, _sd(b)
                tiny = 1e-9 * max(1.0, abs(a))
                if sd > tiny:
                    # percentile interval of B, moved so that it is centred where B's mean
                    # maps to the corrected estimate (see the module notes)
                    lo, hi = (x - float(np.mean(b)) + est for x in _percentiles(b, conf_level))
                elif not _sd(o) > tiny:
                    lo = hi = est  # nothing varies at all (e.g. a model compared with itself)
                # else B has no spread but O does (an unpenalised Cox model's slope on its own
                # training rows is always 1): a zero-width interval would mislead, leave NaN.
        elif method == "external":
            b = rm.train[rm.ok, j]
            b = b[np.isfinite(b)]
            used, est, sd = b.size, a, _sd(b)
            lo, hi = _percentiles(b, conf_level)
        elif method == "cv":
            v, rep = rm.test[:, j], rm.replicate
            keep = rm.ok & np.isfinite(v)
            used = int(keep.sum())
            means = np.array([v[keep & (rep == r)].mean() for r in np.unique(rep[keep])])
            if means.size:
                est, sd = float(means.mean()), _sd(means)
        else:  # by_centre: event-weighted over held-out centres
            v, w = rm.test[:, j], rm.events.astype(float)
            keep = rm.ok & np.isfinite(v) & (w > 0)
            used = int(keep.sum())
            if used:
                est = float(np.average(v[keep], weights=w[keep]))
                sd = float(np.sqrt(np.average((v[keep] - est) ** 2, weights=w[keep]))) if used > 1 else np.nan
        out[name] = MetricEstimate(name, a, opt, float(est), float(sd), float(lo), float(hi), int(used))
    return out


def _model_metrics(name, tasks, outputs, arms, names, k, m, with_fold) -> ReplicateMetrics:
    rows = [(t, o["models"][name], o["events"]) for t, o in zip(tasks, outputs, strict=True)
            if name in o["models"]]
    vals = {a: np.full((len(rows), len(names)), np.nan) for a in arms}
    nbs = {a: np.full((len(rows), k, m), np.nan) for a in arms}
    for i, (_, rec, _) in enumerate(rows):
        if rec["ok"]:
            for a in arms:
                vals[a][i], nbs[a][i] = rec[a][0], rec[a][1]
    ev_arm = "test" if "test" in arms else "train"
    return ReplicateMetrics(
        names=names, train=vals.get("train"), test=vals.get("test"),
        nb_train=nbs.get("train"), nb_test=nbs.get("test"),
        replicate=np.array([t.index for t, _, _ in rows], dtype=int),
        fold=np.array([t.fold for t, _, _ in rows], dtype=int) if with_fold else None,
        ok=np.array([rec["ok"] for _, rec, _ in rows], dtype=bool),
        events=np.array([ev[ev_arm] for _, _, ev in rows], dtype=int),
    )


def _pair_metrics(key, tasks, outputs, arms, names, with_fold) -> ReplicateMetrics:
    # A pair row exists only where both models were fitted and evaluated.
    rows = [(t, o["pairs"][key], o["events"]) for t, o in zip(tasks, outputs, strict=True)
            if key in o["pairs"]]
    vals = {a: np.array([p[a] for _, p, _ in rows]).reshape(len(rows), len(names)) for a in arms}
    ev_arm = "test" if "test" in arms else "train"
    return ReplicateMetrics(
        names=names, train=vals.get("train"), test=vals.get("test"), nb_train=None, nb_test=None,
        replicate=np.array([t.index for t, _, _ in rows], dtype=int),
        fold=np.array([t.fold for t, _, _ in rows], dtype=int) if with_fold else None,
        ok=np.ones(len(rows), dtype=bool),
        events=np.array([ev[ev_arm] for _, _, ev in rows], dtype=int),
    )


def _summarise(method, tasks, outputs, models, n_rep, apparent, apparent_pairs, fits, horizons,
               arms, conf_level, max_failure_rate, unit):
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
        estimates[name] = _estimates(method, apparent[name].vector(), rm, conf_level)
        recs = [(t, o["models"][name]) for t, o in zip(tasks, outputs, strict=True) if name in o["models"]]
        for t, rec in recs:
            if not rec["ok"]:
                log.append(ReplicateFailure(name, t.index, t.fold, rec["stage"], rec["message"]))
        failures[name] = int((~rm.ok).sum())
        nan_counts = Counter()
        for a in arms:
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
        pair_est[key] = _estimates(method, pp.vector(), rm, conf_level)
    return dict(metric_names=names, pair_metric_names=pnames, replicates=replicates,
                estimates=estimates, failures=failures, failure_log=tuple(log),
                dropped_metrics=dropped, selection=selection, warning_counts=warn,
                pair_replicates=pair_reps, pair_estimates=pair_est)
