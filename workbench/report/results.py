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

from workbench.cohort.codes import code_order
from workbench.cohort.summary import CAUTION, format_summary
from workbench.figures.wording import chi_squared_text
from workbench.models.labels import equal_models, model_labels
from workbench.report.naming import coefficient_rows, hazard_ratio_frame, ph_frame
from workbench.units import time_phrase, unit_after_list

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


def _added_value_block(t) -> dict:
    block = jsonable(t)
    block.pop("null")  # the K permutation statistics: summarised, not listed
    block.pop("seconds")  # run time is not a result (same seed, same results.json)
    null = np.asarray(t.null, float)
    block["null_quantiles"] = {q: jsonable(float(np.quantile(null, float(q)))) for q in ("0.5", "0.95", "0.99")} \
        if null.size else {}
    return block


def _model_block(result, name: str) -> dict:
    m = result.models[name]
    desc = m.describe()
    block = {
        "label": model_labels(result.models)[name],
        "equal_to": equal_models(result.models).get(name),
        "kind": desc.kind,
        "n_train": desc.n_train,
        "n_events": desc.n_events,
        "details": jsonable(desc.details),
        "coefficients": coefficient_rows(jsonable(desc.terms)),
    }
    if hasattr(m, "hazard_ratio_table"):
        block["hazard_ratios"] = jsonable(hazard_ratio_frame(m.hazard_ratio_table()))
    if hasattr(m, "fit_") and hasattr(m.fit_, "baseline_times"):
        horizons = np.asarray(result.spec.horizons, float)
        from workbench.stats.coxph import baseline_survival_at

        block["baseline_survival"] = {
            "note": "S0(t) for a patient at the training means of the design columns (x_mean); "
            "S(t|x) = S0(t) ** exp((x - x_mean) @ coef)",
            "horizons": jsonable(horizons),
            "survival": jsonable(baseline_survival_at(m.fit_, horizons)),
            "x_mean": dict(zip(m.fit_.names, jsonable(m.fit_.x_mean), strict=True)),
            # the whole step function: S0 just after each training event time
            "curve": {"times": jsonable(m.fit_.baseline_times),
                      "survival": jsonable(baseline_survival_at(m.fit_, m.fit_.baseline_times))},
        }
    if name in result.ph_tests:
        ph = result.ph_tests[name]
        block["proportional_hazards"] = jsonable(ph_frame(ph.to_frame().reset_index()))
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
            "stability": _stability_block(getattr(sig, "stability_", None)),
        }
    if sig is not None or name in result.volume:
        # null: not applicable (no volume feature named, or a signature that kept no feature)
        block["volume_correlation"] = jsonable(result.volume.get(name))
    coll = (getattr(result, "collinearity", None) or {}).get(name)
    if coll is not None:
        block["collinearity"] = _collinearity_block(coll)
    if name in result.validation.selection:
        sel = result.validation.selection[name]
        block["selection_frequency"] = {"n_fits": sel.n_fits, "frequency": jsonable(sel.frequency),
                                        "unstable": list(sel.unstable)}
    block["risk_groups"] = _risk_group_block(result, name)
    block["performance"] = _metric_block(result.validation.estimates[name])
    if result.external is not None and name in result.external.estimates:
        block["external_performance"] = _metric_block(result.external.estimates[name])
    return block


def _collinearity_block(t) -> dict:
    return {
        "cohort": "development",
        "score": t.score,
        "n": t.n,
        "score_vif": jsonable(t.score_vif),
        "score_r2": jsonable(t.score_r2),
        "rows": [{"design_column": r.column, "term": r.term, "correlation": jsonable(r.correlation),
                  "vif_without_signature": jsonable(r.vif_without), "vif_with_signature": jsonable(r.vif_with)}
                 for r in t.rows],
        "terms": [{"term": k, "r2_of_signature": jsonable(v)} for k, v in getattr(t, "term_r2", ())],
        "note": "Pearson correlation of the signature score with each clinical design column; variance inflation "
                "factor 1/(1 - R^2) of each column (least squares on the other columns, with intercept) without "
                "and with the signature in the design; score_vif: the signature's own; terms: R^2 of the signature "
                "regressed on each term's columns alone.",
    }


def _risk_group_block(result, name: str) -> dict | None:
    """Cut-points learned on the training rows, with the one assignment rule (stats/riskgroups.py)."""
    from workbench.stats.riskgroups import group_labels, learn_cutpoints

    k = getattr(result.spec.models, "risk_groups", 3)
    try:
        cuts = learn_cutpoints(result.models[name].predict_risk(result.cohort), k)
    except Exception:  # noqa: BLE001 - e.g. too many tied scores: no groups rather than no results
        return None
    out = {"n_groups": int(k), "cutpoints": jsonable(cuts), "labels": list(group_labels(k)),
           "learned_on": "training rows (quantiles of the risk score)",
           "rule": "a score exactly on a cut-point joins the lower group"}
    out["conditional_survival"] = {"development": conditional_rows(result.models[name], result.cohort, cuts,
                                                                   result.spec.horizons)}
    if result.external_prepared is not None and name in (result.external.estimates if result.external else {}):
        out["conditional_survival"]["external"] = conditional_rows(
            result.models[name], result.external_prepared.cohort, cuts, result.spec.horizons)
    return out


CONDITIONAL_MIN_AT_RISK = 10
"""Fewest of a group's patients still followed at the visit for its conditional survival to be given
(the same rule as the risk-group curves' default min_at_risk; common practice)."""


def conditional_rows(model, cohort, cuts, horizons, min_at_risk: int = CONDITIONAL_MIN_AT_RISK) -> list[dict]:
    """Observed conditional survival per risk group: alive at one horizon, the chance of reaching each
    later one (Kaplan-Meier within the group, Greenwood log(-log) 95% limits; Zabor et al. 2013).
    Groups from the model's risk with the training cut-points; on the development cohort the
    separation of the groups is apparent (the model was fitted there). A group with fewer than
    ``min_at_risk`` patients still followed at the visit gets no estimate (null, with a note)."""
    from workbench.competing.conditional import conditional_survival_km
    from workbench.stats.riskgroups import assign_groups, group_labels

    labels = group_labels(len(cuts) + 1)
    g = assign_groups(model.predict_risk(cohort).values, cuts)
    last = float(cohort.time.max())
    hz = [float(h) for h in horizons if float(h) < last]
    rows = []
    for i, s in enumerate(hz[:-1]):
        cs = conditional_survival_km(cohort.time, cohort.event, hz[i + 1:], s, groups=g)
        for r, lab in enumerate(cs.labels):
            at_risk = int(np.sum((g == lab) & (cohort.time > s)))
            few = at_risk < min_at_risk
            for j, t in enumerate(cs.times):
                rows.append({"group": labels[int(lab)], "alive_at": s, "horizon": float(t), "at_risk": at_risk,
                             "survival": None if few else jsonable(float(cs.survival[r, j])),
                             "ci_lower": None if few else jsonable(float(cs.lower[r, j])),
                             "ci_upper": None if few else jsonable(float(cs.upper[r, j])),
                             "note": f"fewer than {min_at_risk} patients at risk" if few else ""})
    return rows


def _group_digest(result) -> list[str]:
    from workbench.report.heterogeneity import digest_lines

    lead = "combined" if "combined" in result.models else next(iter(result.models))
    h = result.spec.horizons[-1]
    lines = []
    for v, title in ((result.validation, "Leave-one-centre-out"), (result.external, "External cohort")):
        block = getattr(v, "groups", None) if v is not None else None
        if block:
            lines += [""] + digest_lines(block, lead, h, title)
    for name, rows in (getattr(result, "new_site", None) or {}).items():
        if rows:
            r = rows[-1]
            lines.append(f"To validate {name} at a new site (horizon {time_phrase(r.horizon, result.spec.data.time_unit)}): "
                         f"{r.n_required} patients, about {r.events_expected:.0f} events (the most of: {r.n_oe} for "
                         f"the O/E ratio, {r.n_slope} for the calibration slope, {r.n_c} for the C-index).")
    ch = getattr(result.external, "censoring", None) if result.external is not None else None
    if ch is not None:
        lines.append(f"External censoring weights: {ch.method} ({ch.reason}).")
    return lines


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
            # of those: a clinical row but no imaging row, and the reverse (the patient flow's reasons)
            "n_without_imaging_row": len(prep.cohort.source.only_in_clinical),
            "n_without_clinical_row": len(prep.cohort.source.only_in_features),
        },
        "validation": {
            "method": v.method,
            "settings": jsonable(v.settings),
            "n_replicates": jsonable(v.n_replicates),
            "failures": jsonable(v.failures),
            "failure_log": [{"model": f.model, "replicate": int(f.replicate),
                             "fold": None if f.fold is None else int(f.fold), "stage": f.stage, "message": f.message}
                            for f in v.failure_log],
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
        "added_value": {name: _added_value_block(t) for name, t in getattr(result, "added_value", {}).items()},
        "external": None,
        "volume_comparison": _volume_comparison_block(result),
        "warnings": [{"category": c, "message": m} for c, m in result.warnings],
    }
    if result.external is not None:
        ext = result.external_prepared
        out["external"] = {
            "n": ext.cohort.n,
            "n_events": ext.cohort.n_events,
            "n_incomplete_dropped": len(ext.incomplete_ids),
            "batches": {c: int(np.sum(np.asarray(ext.cohort.batch).astype(str) == c))
                        for c in code_order(ext.cohort.batch)}
            if ext.cohort.batch is not None
            else {},
            "comparison": {name: _comparison_block(c) for name, c in result.external_comparisons.items()},
            "new_batches": result.new_batches,
        }
    out["reproducibility"] = _reproducibility_block(result)
    out["harmonisation"] = jsonable(getattr(result, "harmonisation", None))
    _heterogeneity_blocks(result, out)
    _difference_blocks(result, out)
    if getattr(result, "new_site", None):
        out["new_site_sample_size"] = jsonable(result.new_site)
    return out


def _stability_block(st) -> dict | None:
    """Stability selection of the signature (None when the penalty was chosen by cross-validation)."""
    if st is None:
        return None
    order = np.argsort(-np.asarray(st.probability), kind="stable")
    return {"pairs": st.pairs, "threshold": st.threshold, "max_false": st.max_false, "q": st.q,
            "bound": st.bound, "selected": list(st.selected),
            "probability": {st.feature_names[j]: float(st.probability[j]) for j in order}}


def harmonisation_digest(result) -> list[str]:
    """Console lines: ComBat before/after (share of features with a scanner effect, classifier AUC), new scanners."""
    h = getattr(result, "harmonisation", None)
    if not h:
        return []

    def pair(block):
        b, a = block["before"], block["after"]
        return (f"features with a scanner location effect {b['location_share']:.0%} -> {a['location_share']:.0%}, "
                f"scanner classifier AUC {b['classifier_auc']:.2f} -> {a['classifier_auc']:.2f}")

    lines = [f"Harmonisation (ComBat), development: {pair(h['development'])}."]
    if "external" in h:
        lines.append(f"Harmonisation, external cohort: {pair(h['external'])}.")
    if result.external_prepared is not None:
        nb = result.new_batches or {}
        for r in (r for r in nb.get("scanners", []) if r["model"] == h["model"]):
            lines.append(f"  new scanner {r['scanner']} ({r['n']} patients): "
                         + (f"harmonised from its own features (mean shift {r['mean_abs_shift_sd']:.2f} SD, "
                            f"SD ratio {r['median_sd_ratio']:.2f})" if r["adjusted"] else "left unadjusted"))
            cal = [c for c in nb.get("calibration", []) if c["scanner"] == r["scanner"] and c["model"] == h["model"]]
            if cal:
                unit = result.spec.data.time_unit
                hs = "/".join(f"{c['horizon']:g}" for c in cal)
                lines.append(f"    its O/E at {hs} {unit_after_list([c['horizon'] for c in cal], unit)}: " + "/".join(f"{c['oe_unadjusted']:.2f}" for c in cal)
                             + " left unadjusted -> " + "/".join(f"{c['oe_harmonised']:.2f}" for c in cal)
                             + " harmonised")
    return lines


def _volume_comparison_block(result) -> dict | None:
    """The combined model against the clinical + tumour volume model (None when not run)."""
    vc = getattr(result, "volume_comparisons", None) or {}
    if not vc:
        return None
    return {"volume_feature": result.spec.imaging.volume_feature,
            **{k: _comparison_block(c) for k, c in vc.items()}}


def _heterogeneity_blocks(result, out: dict) -> None:
    """Censoring model, per-centre/per-scanner blocks and their pooling (see report/heterogeneity.py)."""
    from workbench.report.heterogeneity import censoring_dict, groups_dict

    v = result.validation
    if getattr(v, "groups", None):
        out["validation"]["by_group"] = groups_dict(v.groups)
    if getattr(v, "censoring", None) is not None:
        out["validation"]["censoring"] = censoring_dict(v.censoring)
    ext = result.external
    if ext is not None and out.get("external") is not None:
        out["external"]["censoring"] = censoring_dict(getattr(ext, "censoring", None))
        out["external"]["by_group"] = groups_dict(getattr(ext, "groups", None))


def _difference_blocks(result, out: dict) -> None:
    """Model-minus-baseline AUC and net-benefit curves with their bands (validation/difference_bands.py)."""
    for name, block in (getattr(result, "difference_bands", None) or {}).items():
        for setting, target in (("internal", out["comparison"]), ("external", (out.get("external") or {}).get(
                "comparison", {}))):
            if name in target:
                target[name]["difference_curves"] = {q: jsonable(block[q].get(setting)) for q in block}


def performance_table(result, which: str = "internal") -> pd.DataFrame:
    """One row per model and metric: apparent, optimism, estimate, SD and interval."""
    v = result.validation if which == "internal" else result.external
    return v.summary_frame()


def comparison_table(comparisons: dict) -> pd.DataFrame:
    rows = []
    for name, c in comparisons.items():
        for d in c.differences.values():
            rows.append({"model": getattr(c, "model", name), "baseline": c.baseline, **dataclasses.asdict(d)})
    return pd.DataFrame(rows)


def _reproducibility_block(result) -> dict | None:
    """ICC of each pool feature on the repeat table and what the filter removed (None: no repeat table)."""
    prep = result.prepared
    table = getattr(prep, "reproducibility", None)
    if table is None:
        return None
    from workbench.preprocess.reproducibility import family_counts

    r = result.spec.imaging.reproducibility
    fam = family_counts(table, r.min_icc)
    return {
        "form": r.form, "min_icc": r.min_icc, "n_patients": int(table["n"].max()),
        "n_features": int(len(table)), "n_removed": len(prep.unreproducible),
        "removed": list(prep.unreproducible),
        "by_family": {f: {k: int(v) for k, v in row.items()} for f, row in fam.iterrows()},
        "features": {f: {"icc": jsonable(row["icc"]), "ci_lower": jsonable(row["lower"]),
                         "ci_upper": jsonable(row["upper"]), "n": int(row["n"])} for f, row in table.iterrows()},
    }


def write_results(result, out_dir) -> Path:
    """Write ``results.json``, CSV tables and ``run.log`` into ``out_dir``; returns the JSON path."""
    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    data = results_dict(result)
    path = out / "results.json"
    path.write_text(json.dumps(data, indent=2, allow_nan=False))
    performance_table(result).to_csv(out / "performance.csv", index=False)
    icc_table = getattr(result.prepared, "reproducibility", None)
    if icc_table is not None:
        icc_table.assign(kept=icc_table["icc"] >= result.spec.imaging.reproducibility.min_icc).rename(
            columns={"lower": "ci_lower", "upper": "ci_upper"}).to_csv(out / "feature_icc.csv")
    vc = getattr(result, "volume_comparisons", None) or {}
    extra = {"combined vs volume": vc["internal"]} if "internal" in vc else {}
    comparison_table({**result.comparisons, **extra}).to_csv(out / "comparison.csv", index=False)
    if result.external is not None:
        performance_table(result, "external").to_csv(out / "external_performance.csv", index=False)
        extra = {"combined vs volume": vc["external"]} if "external" in vc else {}
        comparison_table({**result.external_comparisons, **extra}).to_csv(out / "external_comparison.csv",
                                                                          index=False)
    from workbench.report.heterogeneity import group_table

    for which, v in (("external", result.external), ("internal", result.validation)):
        if v is not None and getattr(v, "groups", None):
            group_table(v.groups).to_csv(out / f"{which}_by_group.csv", index=False)
    for name, m in result.models.items():
        if hasattr(m, "hazard_ratio_table"):
            hazard_ratio_frame(m.hazard_ratio_table(), for_csv=True).to_csv(out / f"hazard_ratios_{name}.csv", index=False)
        sel = result.validation.selection.get(name)
        if sel is not None:
            sel.to_frame().to_csv(out / f"selection_{name}.csv", index=False)
    from workbench.study import dumps_study

    # paths relative to the results folder, so the copy runs from there and names no machine path
    (out / "study.toml").write_text(dumps_study(result.spec, base=out))
    log = [format_summary(result.summary), "", "Settings taken by default:"]
    log += run_notes(result.spec) or ["  none"]
    log += ["", "Warnings during the run:"]
    log += [f"  {c}: {m}" for c, m in result.warnings] or ["  none"]
    log += ["", f"Provenance: {json.dumps(data['provenance'])}"]
    (out / "run.log").write_text("\n".join(log) + "\n")
    return path


def run_notes(spec) -> list[str]:
    """Lines for the run log about settings the study left to a default that depends on the data."""
    notes = []
    if not spec.data.batch and spec.imaging.harmonise.method == "none":
        notes.append("  harmonisation: none, because the study names no batch column ([data] batch); "
                     "name one and set [imaging.harmonise] method = 'combat' to harmonise by scanner.")
    if spec.validation.uno_tau is None:
        notes.append(f"  Uno's C truncated at the last horizon ({time_phrase(spec.horizons[-1], spec.data.time_unit)}); "
                     "set [validation] uno_tau to choose another time.")
    return notes


def fmt_estimate(e, digits: int = 3, *, apparent_only: bool = False) -> str:
    """A validated estimate with its interval; with ``apparent_only`` the apparent value, marked so."""
    if apparent_only and e is not None and np.isfinite(getattr(e, "apparent", np.nan)):
        return f"{e.apparent:.{digits}f} (apparent)"
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
    labels = model_labels(result.models)
    same = equal_models(result.models)
    horizons = [f"{h:g}" for h in result.spec.horizons]
    ests = set(getattr(v, "estimator", {}).values()) or {"optimism"}
    boot = {frozenset({"optimism"}): "optimism-corrected (bootstrap)", frozenset({"632plus"}): ".632+ (bootstrap)",
            frozenset({"oob"}): "out-of-bootstrap"}.get(frozenset(ests), "bootstrap")
    method = {"bootstrap": boot, "cv": "cross-validated",
              "by_centre": "leave-one-centre-out",
              "none": "none (apparent performance only, optimistic)"}.get(v.method, v.method)
    app = v.method == "none"
    lines = [
        f"Study: {result.spec.name}",
        f"{result.prepared.cohort.n} patients, {result.prepared.cohort.n_events} events; "
        f"validation {method}" + ("" if app else f", {_replicate_text(v.n_replicates)}"),
    ]
    icc_table = getattr(result.prepared, "reproducibility", None)
    if icc_table is not None:
        r = result.spec.imaging.reproducibility
        lines.append(f"Reproducibility: {len(result.prepared.unreproducible)} of {len(icc_table)} imaging features "
                     f"removed ({r.form} below {r.min_icc:g} on {int(icc_table['n'].max())} repeat measurements; "
                     "feature_icc.csv).")
    lines += harmonisation_digest(result)
    sel = result.validation.selection.get("combined")
    if sel is not None and sel.n_fits and sel.apparent:
        shaky = sel.unstable
        lines.append(f"Signature: {len(sel.apparent)} feature{'s' if len(sel.apparent) != 1 else ''}; "
                     + (f"kept by fewer than half of the {sel.n_fits} refits (unstable): {', '.join(shaky)}."
                        if shaky else f"each kept by at least half of the {sel.n_fits} refits."))
    lines += [
        "",
        f"{'model':<40s}{'Harrell C':>24s}{'Uno C':>24s}{'IBS':>24s}",
    ]
    for name in result.models:
        est = v.estimates[name]
        lines.append(
            f"{labels[name]:<40s}{fmt_estimate(est.get('harrell_c'), apparent_only=app):>24s}"
            f"{fmt_estimate(est.get('uno_c'), apparent_only=app):>24s}{fmt_estimate(est.get('ibs'), apparent_only=app):>24s}"
        )
    cs = [v.estimates[m].get("harrell_c") for m in result.models]
    why = sorted({c.note for c in cs if c is not None and not np.isfinite(c.ci_lower) and c.note})
    if not app and why and all(c is None or not np.isfinite(c.ci_lower) for c in cs):
        lines.append(f"No intervals: {'; '.join(why)} (more replicates, or [validation] outer_replicates, "
                     "give them).")
    lines.append("")
    lines.append(f"AUC and calibration (ICI) at {', '.join(horizons)} {unit_after_list(result.spec.horizons, u)}:")
    for name in result.models:
        est = v.estimates[name]
        aucs = "  ".join(fmt_estimate(est.get(f"auc@{h}"), 2, apparent_only=app) for h in horizons)
        icis = "  ".join(fmt_estimate(est.get(f"ici@{h}"), 3, apparent_only=app).split(" ")[0] for h in horizons)
        lines.append(f"  {name:<16s} AUC {aucs}   ICI {icis}")
    for name, comp in result.comparisons.items():
        d = comp.differences.get("harrell_c")
        lr = comp.lr_test
        lines.append("")
        lines.append(f"{labels.get(name, name)} vs {labels.get(comp.baseline, comp.baseline)}:")
        lines.append(f"  difference in Harrell C {fmt_estimate(d, apparent_only=app)}")
        av = getattr(result, "added_value", {}).get(name)
        if name in same:
            lines.append("  the signature kept no feature: this model is the clinical model, so the comparison "
                         "says nothing about imaging")
        elif av is not None:
            lines.append(f"  added value of imaging given clinical (permutation test): CV log-likelihood gain "
                         f"{av.observed:.1f}, p = {av.p_value:.3g} (MC SE {av.mc_se:.3f}, {av.permutations} permutations)")
        if name not in same and lr.nested and np.isfinite(lr.statistic) and lr.df > 0 and np.isfinite(lr.p_value):
            lines.append(f"  likelihood-ratio {chi_squared_text(lr.statistic, lr.df, lr.p_value)} "
                         "(prespecified terms)")
    vc = (getattr(result, "volume_comparisons", None) or {}).get("internal")
    if vc is not None:
        lines.append("")
        lines.append(f"{labels.get(vc.model, vc.model)} vs {labels.get(vc.baseline, vc.baseline)} "
                     "(is the signature more than volume?):")
        lines.append(f"  difference in Harrell C {fmt_estimate(vc.differences.get('harrell_c'), apparent_only=app)}")
    if result.external is not None:
        lines.append("")
        lines.append(f"External cohort ({result.external_prepared.cohort.n} patients):")
        for name in result.models:
            lines.append(f"  {name:<16s} Harrell C {fmt_estimate(result.external.estimates[name].get('harrell_c'))}")
    lines += _group_digest(result)
    lines += ["", f"Caution: {CAUTION}"]
    return "\n".join(lines)
