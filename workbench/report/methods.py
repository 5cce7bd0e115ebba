"""Generated prose of the study report: the methods paragraph, predictor handling, limitations.

Every sentence is built from what the run recorded -- the numbers of
:func:`workbench.report.results.results_dict` and the frozen records of the
apparent fits -- so the text cannot drift from the analysis. Where the run does
not know something (study dates, how patients were recruited), the text says so
instead of guessing.

References
----------
.. [1] Collins GS, Reitsma JB, Altman DG, Moons KGM. Transparent reporting of a
   multivariable prediction model for individual prognosis or diagnosis
   (TRIPOD): the TRIPOD statement. BMJ 2015;350:g7594.
.. [2] Collins GS, Moons KGM, Dhiman P, et al. TRIPOD+AI statement: updated
   guidance for reporting clinical prediction models that use regression or
   machine learning methods. BMJ 2024;385:e078378.
.. [3] Harrell FE Jr, Lee KL, Mark DB. Multivariable prognostic models. Stat Med
   1996;15:361-87 (bootstrap optimism correction).
.. [4] Riley RD, Snell KIE, Ensor J, et al. Minimum sample size for developing a
   multivariable prediction model: Part II - binary and time-to-event outcomes.
   Stat Med 2019;38:1276-96.
.. [5] Johnson WE, Li C, Rabinovic A. Adjusting batch effects in microarray
   expression data using empirical Bayes methods. Biostatistics 2007;8:118-27 (ComBat).
.. [6] Verweij PJM, van Houwelingen HC. Cross-validation in survival analysis.
   Stat Med 1993;12:2305-14.
.. [7] Austin PC, Harrell FE Jr, van Klaveren D. Graphical calibration curves and
   the integrated calibration index (ICI) for survival models. Stat Med 2020;39:2714-42.
.. [8] Nadeau C, Bengio Y. Inference for the generalization error. Machine Learning
   2003;52:239-81 (corrected resampled t interval of cross-validation).
"""

from __future__ import annotations

import numpy as np

from workbench.models.registry import MODEL_LABELS
from workbench.report.results import results_dict
from workbench.validation.intervals import CV_MIN_FOLD_VALUES, CV_RULE, TWO_STAGE_RULE

REPLICATES_COMMON = 200
"""Bootstrap replicates usually asked of a final analysis (common practice)."""

EPP_COMMON = 10
"""Events per candidate parameter below which a Cox model is unstable (common practice)."""


def _n(x: float, digits: int = 1) -> str:
    return "not reached" if x is None else f"{x:.{digits}f}"


def _join(items) -> str:
    items = [str(i) for i in items]
    if len(items) <= 1:
        return "".join(items)
    return ", ".join(items[:-1]) + " and " + items[-1]


def _label(name: str) -> str:
    return MODEL_LABELS.get(name, name)


def _cox_with_terms(result):
    """The first apparent fit that carries the clinical transformer (its learned term records)."""
    for m in result.models.values():
        if hasattr(m, "transformer_"):
            return m
    return None


def predictor_handling(result) -> list[dict]:
    """One record per clinical predictor: kind, transform, detection limit and missing-value handling.

    Values learned from data (reference level, detection limit, imputation
    value) come from the apparent fit on all analysis rows; inside every
    validation replicate they are learned again on the resampled rows.
    """
    fitted = _cox_with_terms(result)
    infos = {t.column: t for t in fitted.transformer_.terms_} if fitted is not None else {}
    by_col = result.prepared.incomplete_by_column
    rows = []
    for p in result.spec.predictors:
        t = infos.get(p.column)
        unit = f" {p.unit}" if p.unit else ""
        kind = {"linear": "continuous, linear", "spline": "continuous, restricted cubic spline",
                "categorical": "categorical", "ordinal": "ordinal, one score per step"}[p.kind]
        if p.kind == "spline" and t is not None and t.knots_raw:
            kind += f" with {len(t.knots_raw)} knots at " + ", ".join(f"{k:.3g}" for k in t.knots_raw)
        if p.kind in ("categorical", "ordinal") and t is not None:
            kind += f"; levels {', '.join(map(str, t.levels))}; reference {t.reference}"
        transform = {None: "none", "log": "natural log", "log2": "log2 (hazard ratio per doubling)"}[p.transform]
        if p.detection_limit is None:
            limit = "not applicable" if p.kind in ("categorical", "ordinal") else "none declared"
        elif t is not None and t.detection_limit is not None:
            how = "read from the '<x' cells" if p.detection_limit == "auto" else "as declared"
            limit = (f"limit {t.detection_limit:g}{unit} ({how}); {t.n_below_limit_train} patients below it "
                     "enter at the limit with a below-limit indicator term")
        else:
            limit = "declared, but no value below a limit was found"
        if p.missing == "impute":
            what = "training median" if p.kind in ("linear", "spline") else "most frequent training level"
            val = f" (all rows: {t.impute_value})" if t is not None and t.impute_value is not None else ""
            n_miss = t.n_missing_train if t is not None else 0
            missing = f"{n_miss} missing, imputed with the {what}{val}, relearned in every replicate"
        else:
            k = by_col.get(p.column, 0)
            missing = f"complete cases only; {k} patients excluded" if k else "complete cases only (none missing)"
        rows.append({"column": p.column, "label": p.label or p.column, "unit": p.unit, "kind": kind,
                     "transform": transform if p.kind in ("linear", "spline") else "not applicable",
                     "detection_limit": limit, "missing": missing})
    return rows


def _steps_text(steps: list[dict]) -> str:
    names = {"ComBat harmonisation": "ComBat harmonisation",
             "near-zero variance": "removal of near-zero-variance features",
             "redundancy": "removal of redundant features (one of each highly correlated pair)",
             "penalised Cox": "the penalised Cox model"}
    return "; ".join(f"{names.get(s['step'], s['step'])} {s['n_in']} -> {s['n_out']}" for s in steps)


def estimate_label(d: dict) -> str:
    """What the validated numbers of a run are, in a few words (for table captions)."""
    v = d["validation"]
    if v["method"] == "cv":
        return "Cross-validated estimate"
    if v["method"] == "by_centre":
        return "Leave-one-centre-out estimate"
    ests = set((v.get("estimator") or {}).values()) or {"optimism"}
    if ests == {"optimism"}:
        return "Optimism-corrected estimate (Harrell's bootstrap)"
    if ests == {"632plus"}:
        return ".632+ bootstrap estimate (calibration and NRI/IDI: out-of-bootstrap)"
    if ests == {"oob"}:
        return "Out-of-bootstrap estimate"
    return "Bootstrap estimate (" + ", ".join(sorted(ests)) + ")"


def _interval_text(v: dict) -> str:
    level = f"{100 * v['conf_level']:.0f}%"
    s = v.get("settings", {})
    if v.get("interval") == "two-stage":
        k = s.get("inner_replicates")
        inner = (f"{k} inner bootstrap replicate{'' if k == 1 else 's'}" if v["method"] == "bootstrap"
                 else f"one {s.get('folds')}-fold split")
        return (f"{level} intervals come from a two-stage bootstrap (Noma et al. 2021): the whole "
                f"validation was repeated in {s.get('outer_replicates')} bootstrap samples of the patients "
                f"({inner} each), and the interval is the {TWO_STAGE_RULE} (Efron & "
                "Tibshirani 1993); it describes the expected performance of the modelling process "
                "at this sample size. Intervals are limited to each measure's possible range and are "
                "not reported where they cannot be computed."
                + (" In simulation (our benchmark) the interval of the IDI among non-events fell short of "
                   "the 92-98% coverage target for a nominal 95%, so none is given for it; nor for one "
                   "model's calibration slope and observed/expected ratio, whose intervals were too wide "
                   "for the expected calibration and too narrow for that of the model fitted here. The "
                   "ICI, E50 and E90 intervals covered the expected calibration (94-96%) but the "
                   "calibration of the model fitted here less often (83-87%)."
                   if v["method"] == "bootstrap" else ""))
    if v.get("interval") == "corrected-t":
        k, r = s.get("folds"), s.get("repeats")
        return (f"{level} intervals of the cross-validated estimates are the {CV_RULE}, here J = {k} x {r} "
                f"and n_test/n_train = 1/{int(k or 2) - 1}; differences between models use "
                "the paired per-fold differences. The correction term accounts for the overlap of the "
                "training sets of the folds, which makes the fold values correlated. The interval "
                "describes the expected performance of the modelling process at this sample size. "
                f"Intervals need at least {CV_MIN_FOLD_VALUES} fold values, are limited to each measure's "
                "possible range and are not reported where they cannot be computed. In simulation (our "
                "benchmark) some cross-validated measures did not meet the 92-98% coverage target for a "
                "nominal 95%, so no interval is given for them: the calibration error (ICI, E50, E90), "
                "which measured on held-out folds of about n/k patients is biased upward and overstates "
                "the error; the integrated Brier score, for which each fold integrates from its own first "
                "follow-up time, so it is biased upward; the calibration slope and the observed/expected "
                "ratio, whose fold values are too unstable (the interval would be far too wide); and, for "
                "differences between models, the calibration measures and the IDI (its components keep theirs); "
                "nor a band for the difference in net benefit between models, whose per-fold values are too "
                "unstable (the band would be too wide: coverage 99-100%). Intervals of the other "
                "differences between models were conservative (coverage up to 99%).")
    if v.get("interval") == "shifted-percentile":
        return (f"{level} intervals are the percentile intervals of the bootstrap-sample performance, "
                "moved so that their centre maps to the corrected estimate (an approximate interval "
                "known to be too narrow; about 87% coverage for a nominal 95% in simulation).")
    return "No intervals were computed for these estimates."


def validation_text(result, data: dict | None = None) -> str:
    """How the run was validated and what was refitted inside each replicate (see methods_text.py)."""
    from workbench.report.methods_text import validation_claims

    d = data if data is not None else results_dict(result)
    return " ".join(c.text for c in validation_claims(result, d))


def methods_paragraph(result, data: dict | None = None) -> str:
    """A methods description of the run in plain scientific English, with its real numbers.

    Built from :func:`workbench.report.methods_text.methods_claims`: every sentence is a
    claim made from the run's records, and each claim has its own test.

    Parameters
    ----------
    result : StudyResult
    data : dict, optional
        ``results_dict(result)`` if already computed.

    Returns
    -------
    str
        Paragraphs separated by blank lines.
    """
    from workbench.report.methods_text import methods_claims

    return "\n\n".join(" ".join(c.text for c in para) for para in methods_claims(result, data))


def limitations(result, data: dict | None = None) -> tuple[str, ...]:
    """Limitations that follow from what the run shows, most general first."""
    d = data if data is not None else results_dict(result)
    s = d["cohort"]["summary"]
    out = ["The data are existing (retrospective) records: the way patients were selected, measured and "
           "followed was not designed for this model, and the authors must describe it."]
    if s["events_per_clinical_parameter"] < EPP_COMMON:
        out.append(f"Only {s['events_per_clinical_parameter']:.1f} events per candidate clinical parameter "
                   f"(fewer than {EPP_COMMON}, common practice): the clinical model may be unstable.")
    if not s["sample_size"]["adequate"]:
        ss = s["sample_size"]
        out.append(f"The cohort ({ss['n_available']} patients) is smaller than the {ss['n_required']} the Riley "
                   "criteria ask for: expect overfitting and read the optimism-corrected numbers.")
    if (s["events_per_feature"] is not None and s["events_per_feature"] < EPP_COMMON
            and any("signature" in m for m in d["models"].values())):
        out.append(f"With {s['events_per_feature']:.2f} events per imaging feature the signature had to be "
                   "selected by penalisation; which features are kept varies between resamples (see the selection "
                   "frequencies).")
    for w in d["warnings"]:
        if w["category"] == "VolumeDominanceWarning":
            out.append("Volume dominance: " + w["message"])
        elif w["category"] == "ProportionalHazardsWarning":
            out.append("Proportional hazards: " + w["message"])
        elif w["category"] == "LevelOrderWarning":
            out.append("Order of a categorical effect: " + w["message"])
    v = d["validation"]
    for name, k in v["failures"].items():
        if k:
            out.append(f"The model {_label(name)} failed in {k} of {v['n_replicates'][name]} replicates; its "
                       "estimates use the remaining ones.")
    reps = v["n_replicates"]
    if v["method"] == "bootstrap" and reps:
        top = max(reps.values())
        for name, r in reps.items():
            if r < top:
                out.append(f"The model {_label(name)} was validated with fewer replicates ({r} of {top}) to "
                           "keep the run time in budget; its intervals are less precise.")
        if 0 < top < REPLICATES_COMMON:
            out.append(f"Only {top} bootstrap replicates were run ({REPLICATES_COMMON} is common practice for a "
                       "final analysis); intervals and optimism estimates are rough.")
    for n in v["notes"]:
        out.append("Validation note: " + n)
    if d["external"] is None:
        out.append("There was no external validation; the estimates describe patients like the development "
                   "cohort only.")
    elif unseen_batches(result):
        out.append(unseen_batch_sentence(result))
    if d["external"] is not None:
        from workbench.report.external_text import external_calibration_sentences

        labels = {k: m.get("label") or _label(k) for k, m in d["models"].items()}
        out += external_calibration_sentences(d, labels, s["time_unit"], unseen_batches(result))
    if not d.get("added_value"):
        out.append("No added-value permutation test was run ([added_value] permutations = 0): there is no "
                   "test of whether imaging adds to the clinical model, only the validated differences.")
    return tuple(out)


def _censoring_clause(c) -> str:
    if not c:
        return ""
    names = {"km": "one Kaplan-Meier curve of the censoring times",
             "km_by_centre": "Kaplan-Meier curves of the censoring times stratified by centre",
             "cox": "a Cox model of the censoring hazard (Gerds & Schumacher 2006)"}
    return f", using {names.get(c.get('method'), c.get('method'))} ({c.get('reason', '')})"
def _imaging_sample_size(s: dict) -> str:
    si = s.get("sample_size_imaging")
    if not si:
        return ""
    return (f" Counting the {s['n_imaging_candidates']} candidate imaging features as parameters "
            f"({si['n_parameters']} in all, {s['events_per_candidate_parameter']:.2f} events per parameter), "
            f"{si['n_required']} patients would be required for an unpenalised imaging model; the imaging "
            "models therefore rest on penalisation and resampling validation.")


def added_value_text(d: dict) -> str:
    """Methods sentences for the added-value permutation test and the signature coefficient ('' if not run)."""
    parts = []
    for name, av in (d.get("added_value") or {}).items():
        within = " within scanner batch" if av["within"] else ""
        parts.append(
            f"Whether imaging adds prognostic information given the clinical predictors ({_label(name)} against "
            f"{_label(av['baseline'])}) was tested by permutation: each imaging feature was regressed on the "
            f"clinical terms{' and scanner batch' if av['within'] else ''} by least squares, and the residuals "
            f"(whole rows) were permuted among patients{within} and added back to the fitted values, which keeps "
            "the correlation of imaging with the clinical predictors and breaks any further link with outcome "
            "(residual permutation, Freedman and Lane 1983). The statistic was the cross-validated partial "
            f"log-likelihood (Verweij and van Houwelingen 1993; {av['folds']} folds split by patient, the same in "
            "every permutation) of the combined model minus that of the clinical model, with every signature step "
            f"refitted in every training fold. With {av['permutations']} permutations the p-value was "
            "(1 + number of permuted statistics at least as large as the observed) / (1 + permutations) "
            "(Phipson and Smyth 2010), reported with its Monte Carlo standard error. The likelihood-ratio "
            "statistic of the combined against the clinical model is reported as descriptive only, because the "
            "signature was selected on the same patients.")
    comb = d["models"].get("combined")
    if comb and comb.get("details", {}).get("signature_coefficient") == "prevalidated":
        parts.append("The coefficient of the signature in the combined model was estimated on pre-validated "
                     "signature scores (each patient scored by a signature refitted without the patient's fold; "
                     "Tibshirani and Efron 2002), so its hazard ratio is not the in-sample one.")
    shrink = (comb or {}).get("details", {}).get("shrinkage_factor")
    if shrink is not None and shrink < 1:
        parts.append(f"All coefficients of the combined model were multiplied by the cross-validated calibration "
                     f"slope {shrink:.3f} and the baseline hazard re-estimated (van Houwelingen and le Cessie 1990).")
    return " ".join(parts)


def unseen_handling(result) -> dict[str, tuple[str, int]]:
    """Each external scanner absent from development: ("estimated" | "unadjusted", its patients).

    Read from what the run recorded (``result.new_batches``, one row per harmonising model and
    scanner); a scanner no harmonising model adjusted - or any, without ComBat - is "unadjusted".
    """
    rows = (getattr(result, "new_batches", None) or {}).get("scanners", [])
    labels = np.asarray(result.external_prepared.cohort.batch).astype(str) if unseen_batches(result) else ()
    out = {}
    for b in unseen_batches(result):
        done = any(r["adjusted"] for r in rows if r["scanner"] == b)
        out[b] = ("estimated" if done else "unadjusted", int(np.sum(labels == b)))
    return out


def unseen_batch_sentence(result) -> str:
    """One paragraph on how external scanners absent from development were handled."""
    how = unseen_handling(result)
    est = [f"{b}, {n} patients" for b, (k, n) in how.items() if k == "estimated"]
    raw = [b for b, (k, _) in how.items() if k == "unadjusted"]
    parts = []
    if est:
        parts.append(f"External patients imaged on scanners absent from the development data ({'; '.join(est)}) "
                     "were harmonised from their own features: each new scanner's location and scale per feature "
                     "were estimated from its patients (empirical Bayes as for the development scanners, no "
                     "outcomes used), with the development scanners' parameters held fixed. ComBat cannot tell a "
                     "scanner effect from a difference in case mix, so imaging-based predictions for these "
                     "patients remain less certain than for the development scanners.")
    if raw:
        parts.append(f"External patients imaged on scanners absent from the development data ({', '.join(raw)}) "
                     "were standardised without a batch adjustment; imaging-based predictions for them are the "
                     "least reliable.")
    return " ".join(parts)


def unseen_batches(result) -> tuple[str, ...]:
    """External scanners (batches) that the development cohort did not have."""
    if result.external_prepared is None or result.external_prepared.cohort.batch is None:
        return ()
    seen = set(result.summary.batches)
    return tuple(sorted({str(b) for b in result.external_prepared.cohort.batch} - seen))
