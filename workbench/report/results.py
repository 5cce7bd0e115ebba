"""The results folder of a study run: ``results.json``, CSV tables and a log.

``results.json`` holds every number of the run with its apparent value,
optimism, corrected estimate and interval, plus the study file, seed, input data
hash and package versions (see ``docs/results-file.md``). Patient identifiers
are never written to it.
"""

from __future__ import annotations

import dataclasses
import json
import math
from pathlib import Path

import numpy as np
import pandas as pd

from workbench.cohort.summary import CAUTION, format_summary
from workbench.models.registry import MODEL_LABELS

FORMAT = "workbench-results/1"


def jsonable(obj):
    """Dataclasses, numpy values and tuple-keyed dicts to plain JSON types (NaN/inf to null)."""
    if dataclasses.is_dataclass(obj) and not isinstance(obj, type):
        return {f.name: jsonable(getattr(obj, f.name)) for f in dataclasses.fields(obj)}
    if isinstance(obj, dict):
        return {(" vs ".join(map(str, k)) if isinstance(k, tuple) else str(k)): jsonable(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [jsonable(v) for v in obj]
    if isinstance(obj, np.ndarray):
        return [jsonable(v) for v in obj.tolist()]
    if isinstance(obj, (np.bool_, bool)):
        return bool(obj)
    if isinstance(obj, (np.integer, int)):
        return int(obj)
    if isinstance(obj, (np.floating, float)):
        x = float(obj)
        return x if math.isfinite(x) else None
    if isinstance(obj, pd.DataFrame):
        return jsonable(obj.to_dict(orient="records"))
    if obj is None or isinstance(obj, str):
        return obj
    return str(obj)


def _metric_block(estimates: dict) -> dict:
    return {name: jsonable(e) for name, e in estimates.items()}


def _comparison_block(comp) -> dict:
    return {
        "model": comp.model,
        "baseline": comp.baseline,
        "method": comp.method,
        "n_paired": comp.n_paired,
        "differences": {k: jsonable(v) for k, v in comp.differences.items()},
        "likelihood_ratio_test": jsonable(comp.lr_test),
        "reclassification": jsonable(comp.reclassification),
        "decision_curves": jsonable(comp.decision),
        "notes": list(comp.notes),
    }


def _model_block(result, name: str) -> dict:
    m = result.models[name]
    desc = m.describe()
    block = {
        "label": MODEL_LABELS.get(name, name),
        "kind": desc.kind,
        "n_train": desc.n_train,
        "n_events": desc.n_events,
        "details": jsonable(desc.details),
        "coefficients": jsonable(desc.terms),
    }
    if hasattr(m, "hazard_ratio_table"):
        block["hazard_ratios"] = jsonable(m.hazard_ratio_table())
    if hasattr(m, "fit_") and hasattr(m.fit_, "baseline_times"):
        horizons = np.asarray(result.spec.horizons, float)
        from workbench.stats.coxph import baseline_survival_at

        block["baseline_survival"] = {
            "note": "S0(t) for a patient at the training means of the design columns (x_mean); "
            "S(t|x) = S0(t) ** exp((x - x_mean) @ coef)",
            "horizons": jsonable(horizons),
            "survival": jsonable(baseline_survival_at(m.fit_, horizons)),
            "x_mean": dict(zip(m.fit_.names, jsonable(m.fit_.x_mean), strict=True)),
        }
    if name in result.ph_tests:
        ph = result.ph_tests[name]
        block["proportional_hazards"] = jsonable(ph.to_frame().reset_index())
    sig = getattr(m, "signature_", None)
    if sig is not None:
        block["signature"] = {
            "steps": [
                {"step": s.step, "n_in": s.n_in, "n_out": s.n_out} for s in sig.steps_
            ],
            "selected": list(sig.selected_features_),
            "coefficients_per_sd": jsonable(sig.coef_.to_dict()),
            "penalty": None
            if sig.path_ is None
            else {
                "alpha": float(sig.path_.alpha),
                "alpha_over_max": float(sig.path_.alpha / sig.path_.alpha_max),
                "rule": sig.path_.rule,
                "n_alphas_fitted": int(sig.path_.alphas.size),
                "extensions": int(sig.path_.n_extensions),
            },
        }
    if name in result.volume:
        block["volume_correlation"] = jsonable(result.volume[name])
    if name in result.validation.selection:
        sel = result.validation.selection[name]
        block["selection_frequency"] = {"n_fits": sel.n_fits, "frequency": jsonable(sel.frequency)}
    block["performance"] = _metric_block(result.validation.estimates[name])
    if result.external is not None and name in result.external.estimates:
        block["external_performance"] = _metric_block(result.external.estimates[name])
    return block


def results_dict(result) -> dict:
    """Everything of a :class:`~workbench.workflow.StudyResult` as plain JSON data."""
    v = result.validation
    prep = result.prepared
    summary = jsonable(result.summary)
    summary.pop("dropped_ids", None)  # identifiers never leave the machine in results
    out = {
        "format": FORMAT,
        "caution": CAUTION,
        "study": {"name": result.spec.name, "horizons": list(result.spec.horizons), "file": result.study_text},
        "provenance": jsonable(result.provenance),
        "cohort": {
            "summary": summary,
            "n_read": prep.n_read,
            "n_analysed": prep.cohort.n,
            "n_incomplete_dropped": len(prep.incomplete_ids),
            "incomplete_by_column": prep.incomplete_by_column,
            "n_imaging_pool": len(prep.pool),
            "n_excluded_features": len(prep.excluded_features),
            "n_ids_only_in_one_table": len(prep.cohort.source.dropped_ids),
        },
        "validation": {
            "method": v.method,
            "settings": jsonable(v.settings),
            "n_replicates": jsonable(v.n_replicates),
            "failures": jsonable(v.failures),
            "dropped_metrics": jsonable(v.dropped_metrics),
            "warning_counts": jsonable(v.warning_counts),
            "notes": list(v.notes),
            "conf_level": v.conf_level,
            "estimator": jsonable(getattr(v, "estimator", {})),
            "interval": getattr(v, "interval", ""),
        },
        "models": {name: _model_block(result, name) for name in result.models},
        "baseline": result.spec.models.baseline,
        "comparison": {name: _comparison_block(c) for name, c in result.comparisons.items()},
        "external": None,
        "warnings": [{"category": c, "message": m} for c, m in result.warnings],
    }
    if result.external is not None:
        ext = result.external_prepared
        out["external"] = {
            "n": ext.cohort.n,
            "n_events": ext.cohort.n_events,
            "n_incomplete_dropped": len(ext.incomplete_ids),
            "batches": jsonable(dict(zip(*np.unique(ext.cohort.batch, return_counts=True), strict=True)))
            if ext.cohort.batch is not None
            else {},
            "comparison": {name: _comparison_block(c) for name, c in result.external_comparisons.items()},
        }
    return out


def performance_table(result, which: str = "internal") -> pd.DataFrame:
    """One row per model and metric: apparent, optimism, estimate, SD and interval."""
    v = result.validation if which == "internal" else result.external
    return v.summary_frame()


def comparison_table(comparisons: dict) -> pd.DataFrame:
    rows = []
    for name, c in comparisons.items():
        for d in c.differences.values():
            rows.append({"model": name, "baseline": c.baseline, **dataclasses.asdict(d)})
    return pd.DataFrame(rows)


def write_results(result, out_dir) -> Path:
    """Write ``results.json``, CSV tables and ``run.log`` into ``out_dir``; returns the JSON path."""
    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    data = results_dict(result)
    path = out / "results.json"
    path.write_text(json.dumps(data, indent=2, allow_nan=False))
    performance_table(result).to_csv(out / "performance.csv", index=False)
    comparison_table(result.comparisons).to_csv(out / "comparison.csv", index=False)
    if result.external is not None:
        performance_table(result, "external").to_csv(out / "external_performance.csv", index=False)
        comparison_table(result.external_comparisons).to_csv(out / "external_comparison.csv", index=False)
    for name, m in result.models.items():
        if hasattr(m, "hazard_ratio_table"):
            m.hazard_ratio_table().to_csv(out / f"hazard_ratios_{name}.csv", index=False)
        sel = result.validation.selection.get(name)
        if sel is not None:
            sel.to_frame().to_csv(out / f"selection_{name}.csv", index=False)
    from workbench.study import dumps_study

    # paths relative to the results folder, so the copy runs from there and names no machine path
    (out / "study.toml").write_text(dumps_study(result.spec, base=out))
    log = [format_summary(result.summary), "", "Warnings during the run:"]
    log += [f"  {c}: {m}" for c, m in result.warnings] or ["  none"]
    log += ["", f"Provenance: {json.dumps(data['provenance'])}"]
    (out / "run.log").write_text("\n".join(log) + "\n")
    return path


def fmt_estimate(e, digits: int = 3) -> str:
    if e is None or not np.isfinite(e.estimate):
        return "n/a"
    ci = ""
    if np.isfinite(e.ci_lower) and np.isfinite(e.ci_upper):
        ci = f" ({e.ci_lower:.{digits}f} to {e.ci_upper:.{digits}f})"
    return f"{e.estimate:.{digits}f}{ci}"


def _replicate_text(n_replicates: dict) -> str:
    counts = sorted(set(n_replicates.values()), reverse=True)
    if len(counts) == 1:
        return f"{counts[0]} replicates"
    main = counts[0]
    fewer = ", ".join(f"{k} {n}" for k, n in n_replicates.items() if n != main)
    return f"{main} replicates ({fewer}: budgeted separately, slower to refit)"


def format_results(result) -> str:
    """A short plain-text digest of a run for the terminal."""
    v = result.validation
    u = result.spec.data.time_unit
    horizons = [f"{h:g}" for h in result.spec.horizons]
    ests = set(getattr(v, "estimator", {}).values()) or {"optimism"}
    boot = {frozenset({"optimism"}): "optimism-corrected (bootstrap)", frozenset({"632plus"}): ".632+ (bootstrap)",
            frozenset({"oob"}): "out-of-bootstrap"}.get(frozenset(ests), "bootstrap")
    method = {"bootstrap": boot, "cv": "cross-validated",
              "by_centre": "leave-one-centre-out"}.get(v.method, v.method)
    lines = [
        f"Study: {result.spec.name}",
        f"{result.prepared.cohort.n} patients, {result.prepared.cohort.n_events} events; "
        f"validation {method}, {_replicate_text(v.n_replicates)}",
        "",
        f"{'model':<40s}{'Harrell C':>24s}{'Uno C':>24s}{'IBS':>24s}",
    ]
    for name in result.models:
        est = v.estimates[name]
        lines.append(
            f"{MODEL_LABELS.get(name, name):<40s}{fmt_estimate(est.get('harrell_c')):>24s}"
            f"{fmt_estimate(est.get('uno_c')):>24s}{fmt_estimate(est.get('ibs')):>24s}"
        )
    lines.append("")
    lines.append(f"AUC and calibration (ICI) at {', '.join(horizons)} {u}:")
    for name in result.models:
        est = v.estimates[name]
        aucs = "  ".join(fmt_estimate(est.get(f"auc@{h}"), 2) for h in horizons)
        icis = "  ".join(fmt_estimate(est.get(f"ici@{h}"), 3).split(" ")[0] for h in horizons)
        lines.append(f"  {name:<16s} AUC {aucs}   ICI {icis}")
    for name, comp in result.comparisons.items():
        d = comp.differences.get("harrell_c")
        lr = comp.lr_test
        lines.append("")
        lines.append(f"{MODEL_LABELS.get(name, name)} vs {MODEL_LABELS.get(comp.baseline, comp.baseline)}:")
        lines.append(f"  difference in Harrell C {fmt_estimate(d)}")
        if lr.nested and np.isfinite(lr.statistic):
            lines.append(f"  likelihood-ratio test {lr.statistic:.1f} on {lr.df} df, p = {lr.p_value:.2g} "
                         "(apparent: the signature was built on the same patients)")
    if result.external is not None:
        lines.append("")
        lines.append(f"External cohort ({result.external_prepared.cohort.n} patients):")
        for name in result.models:
            lines.append(f"  {name:<16s} Harrell C {fmt_estimate(result.external.estimates[name].get('harrell_c'))}")
    lines += ["", f"Caution: {CAUTION}"]
    return "\n".join(lines)
