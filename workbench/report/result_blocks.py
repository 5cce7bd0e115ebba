"""The sections of ``results.json``, one builder a section.

Each model's block (description, coefficients, hazard ratios, baseline survival,
proportional-hazards test, signature and its stability selection, collinearity,
selection frequency, risk groups with their observed conditional survival, validated
performance), and the run-level blocks: model comparisons, the added-value permutation
test, the volume comparison, per-centre heterogeneity and censoring, difference curves
and feature reproducibility. :func:`workbench.report.results.results_dict` assembles them.
"""

from __future__ import annotations

import numpy as np

from workbench.models.labels import equal_models, model_labels
from workbench.report.jsonable import jsonable
from workbench.report.naming import coefficient_rows, hazard_ratio_frame, ph_frame


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


def _stability_block(st) -> dict | None:
    """Stability selection of the signature (None when the penalty was chosen by cross-validation)."""
    if st is None:
        return None
    order = np.argsort(-np.asarray(st.probability), kind="stable")
    return {"pairs": st.pairs, "threshold": st.threshold, "max_false": st.max_false, "q": st.q,
            "bound": st.bound, "selected": list(st.selected),
            "probability": {st.feature_names[j]: float(st.probability[j]) for j in order}}


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
