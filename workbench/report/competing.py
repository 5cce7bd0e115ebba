"""Write and print what the competing-risks route measured.

``competing_results.json`` holds the caution, the study, its provenance (seed, data
hash, study hash, versions), the cause counts, the Aalen-Johansen incidence of each
cause at the horizons, and for every target / model / method the apparent, optimism
and optimism-corrected metrics at each horizon (model ``combined_minus_clinical``:
the differences). Patient identifiers never leave the machine.
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np

from workbench.cohort.summary import CAUTION
from workbench.competing.analysis import METRICS, CompetingStudyResult
from workbench.competing.cif import incidence_at
from workbench.competing.fitting import target_outcome
from workbench.competing.metrics import competing_grouped_calibration
from workbench.errors import WorkbenchError

__all__ = ["FORMAT", "competing_results_dict", "format_competing", "write_competing_folder"]

FORMAT = "workbench-competing-results/1"
TARGET_LABELS = {"cause": "cause of interest (competing events as competing)",
                 "all_cause": "all-cause (first event of any cause)"}
METRIC_LABELS = {"auc": "competing AUC (definition 2)", "brier": "IPCW Brier score of the cumulative incidence",
                 "ipa": "IPA (1 - Brier / Aalen-Johansen null Brier)", "ici": "ICI (smoothed calibration)"}


def _num(x) -> float | None:
    x = float(x)
    return round(x, 6) if np.isfinite(x) else None


def _cause_labels(result: CompetingStudyResult) -> dict:
    d = result.spec.data
    return {1: ", ".join(d.event_codes or ("event",)), 2: ", ".join(d.competing_codes or ("competing",))}


def competing_results_dict(result: CompetingStudyResult) -> dict:
    """The result as plain JSON data."""
    h = result.horizons
    cohort = result.cohort
    labels = _cause_labels(result)
    inc = {}
    for k in result.incidence.causes:
        est, lo, hi = incidence_at(result.incidence, h, cause=k)
        inc[labels.get(k, str(k))] = [{"horizon": float(t), "incidence": _num(e), "lower": _num(a), "upper": _num(b)}
                                      for t, e, a, b in zip(h, est, lo, hi, strict=True)]
    rows = []
    for (target, model, method), app in result.apparent.items():
        for m in METRICS:
            for j, t in enumerate(h):
                rows.append({"target": target, "model": model, "method": method, "metric": m, "horizon": float(t),
                             "apparent": _num(app[m][j]),
                             "optimism": _num(result.optimism[(target, model, method)][m][j]),
                             "corrected": _num(result.corrected[(target, model, method)][m][j])})
    return {
        "format": FORMAT,
        "caution": CAUTION,
        "study": {"name": result.spec.name, "horizons": [float(t) for t in h], "file": result.study_text},
        "provenance": result.provenance,
        "cohort": {"n_analysed": cohort.n, "n_read": result.prepared.n_read,
                   "causes": {"censored": int(np.sum(cohort.cause == 0)), labels[1]: int(np.sum(cohort.cause == 1)),
                              labels[2]: int(np.sum(cohort.cause == 2))},
                   "time_unit": cohort.time_unit},
        "aalen_johansen": {"conf_level": result.incidence.conf_level, "interval": "log(-log) pointwise",
                           "by_cause": inc},
        "validation": {"method": "bootstrap optimism correction (Harrell)", "replicates": result.replicates,
                       "failed_replicates": result.failed,
                       "signature": "refitted in every replicate on the bootstrap rows, outcome of the target "
                                    "cause with other causes censored; its coefficient is "
                                    + _coefficient_words(result.spec.models.combined.coefficient)},
        "targets": TARGET_LABELS,
        "metrics": METRIC_LABELS,
        "results": rows,
        "warnings": [{"category": c, "message": m} for c, m in result.warnings],
        "external": _external_dict(result, labels),
    }


def _external_dict(result: CompetingStudyResult, labels: dict) -> dict | None:
    """The external cohort's metrics of the whole-cohort fits, with their intervals (or None)."""
    if result.external is None:
        return None
    from workbench.competing.external import EXTERNAL_INTERVAL_RULE

    ext = result.external_prepared.cohort
    rows = []
    for (target, model, method), block in result.external.items():
        for m, v in block.items():
            for j, t in enumerate(result.horizons):
                row = {"target": target, "model": model, "method": method, "metric": m, "horizon": float(t),
                       "estimate": _num(v["estimate"][j]), "lower": _num(v["lower"][j]),
                       "upper": _num(v["upper"][j])}
                if v["note"][j]:
                    row["interval_note"] = v["note"][j]
                rows.append(row)
    return {"n": ext.n,
            "causes": {"censored": int(np.sum(ext.cause == 0)), labels[1]: int(np.sum(ext.cause == 1)),
                       labels[2]: int(np.sum(ext.cause == 2))},
            "replicates": result.external_replicates, "conf_level": 0.95,
            "interval": EXTERNAL_INTERVAL_RULE + " of the external patients; predictions of the models fitted on "
                        "the whole development cohort, fixed",
            "results": rows}


def _coefficient_words(coefficient: str) -> str:
    if coefficient == "prevalidated":
        return ("estimated on cross-fitted (out-of-fold) signature scores, in the whole cohort and in every "
                "replicate")
    return "the in-sample one (optimistic)"


def _calibration_groups(result: CompetingStudyResult, n_groups: int = 5) -> dict:
    cohort = result.cohort
    y = target_outcome(cohort, "cause")
    out = {}
    for (target, model), arm in result.arms.items():
        if target != "cause":
            continue
        curves = arm.predict(cohort, result.horizons, "cause_specific")
        try:
            out[model] = [competing_grouped_calibration(y, curves, t0, n_groups=n_groups) for t0 in result.horizons]
        except WorkbenchError:
            continue
    return out


def write_competing_folder(result: CompetingStudyResult, out, *, figures: bool = True) -> list[str]:
    """Write competing_results.json and (unless ``figures`` is False) the figures into ``out``.

    Figures: the Aalen-Johansen incidence of every cause, the apparent calibration of the
    cause-specific models, and the Fine-Gray nomograms with their points tables (the
    risk of the cause of interest by each horizon, read from total points).
    """
    from workbench.figures.competing import plot_cause_incidence, plot_incidence_calibration
    from workbench.figures.export import save_figure

    out = Path(out)
    out.mkdir(parents=True, exist_ok=True)
    (out / "competing_results.json").write_text(json.dumps(competing_results_dict(result), indent=2) + "\n",
                                               encoding="utf-8")
    written = ["competing_results.json"]
    if not figures:
        return written
    labels = _cause_labels(result)
    for width in ("single", "double"):
        fig = plot_cause_incidence(result.incidence, labels, horizons=result.horizons,
                                   time_unit=result.cohort.time_unit, width=width)
        save_figure(fig, out / f"cumulative_incidence_{width}", widths=(None,))
        groups = _calibration_groups(result)
        if groups:
            fig = plot_incidence_calibration(groups, cause_label=labels[1], width=width,
                                             time_unit=result.cohort.time_unit,
                                             title="development cohort, apparent (the models were fitted here)")
            save_figure(fig, out / f"incidence_calibration_{width}", widths=(None,))
    written += ["cumulative_incidence_*", "incidence_calibration_*"]
    written += _write_decision_curve(result, out, labels[1])
    written += _write_incidence_nomogram(result, out, f"the event coded '{labels[1]}'")
    return written


DECISION_LABELS = {"clinical": "Clinical (cause-specific Cox)", "combined": "Clinical + signature (cause-specific Cox)"}


def _write_decision_curve(result: CompetingStudyResult, out: Path, cause_label: str) -> list[str]:
    """Net benefit of acting on the predicted risk of the cause of interest (middle horizon, apparent)."""
    from workbench.competing.metrics import competing_net_benefit
    from workbench.figures.decision import plot_decision_curve
    from workbench.figures.export import save_figure

    h = result.horizons
    t0 = float(h[len(h) // 2])
    y = target_outcome(result.cohort, "cause")
    curves = {}
    for model in ("clinical", "combined"):
        arm = result.arms.get(("cause", model))
        if arm is not None:
            try:
                curves[DECISION_LABELS[model]] = competing_net_benefit(
                    y, arm.predict(result.cohort, [t0], "cause_specific"), t0)
            except WorkbenchError:
                continue
    if not curves:
        return []
    unit = result.cohort.time_unit
    title = (f"Risk of event '{cause_label}' by {t0:g} {unit}, other events competing; development cohort, "
             "apparent (the models were fitted here)")
    for width in ("single", "double"):
        fig = plot_decision_curve(curves, time_unit=unit, width=width, title=title)
        save_figure(fig, out / f"incidence_decision_curve_{width}", widths=(None,))
    return ["incidence_decision_curve_*"]


NOMOGRAM_TITLES = {"clinical": "Clinical, Fine-Gray", "combined": "Clinical + signature, Fine-Gray"}


def _write_incidence_nomogram(result: CompetingStudyResult, out: Path, cause_label: str) -> list[str]:
    """The Fine-Gray nomograms (risk of the cause of interest) as figures and points tables."""
    from workbench.competing.nomogram import incidence_nomogram_scales
    from workbench.figures.export import save_figure
    from workbench.figures.nomogram import plot_nomogram
    from workbench.figures.nomogram_table import points_table, write_points_table

    built = {}
    for model in ("clinical", "combined"):
        arm = result.arms.get(("cause", model))
        if arm is None or arm.fine_gray is None:
            continue
        built[model] = incidence_nomogram_scales(arm, result.cohort, result.horizons, cause_label=cause_label,
                                                 time_unit=result.cohort.time_unit,
                                                 name=NOMOGRAM_TITLES[model])
    scales = list(built.values())
    if not scales:
        return []
    for width in ("single", "double"):
        fig = plot_nomogram(scales, layout="rows" if width == "single" and len(scales) > 1 else "columns",
                            width=width)
        save_figure(fig, out / f"incidence_nomogram_{width}", widths=(None,))
    for model, sc in built.items():
        write_points_table(points_table(sc), out / f"incidence_nomogram_points_{model}.csv")
    return ["incidence_nomogram_*"]


def format_competing(result: CompetingStudyResult) -> str:
    """A short console summary ending with the caution."""
    h = result.horizons
    labels = _cause_labels(result)
    c = result.cohort
    lines = ["Competing-risks analysis", "========================",
             f"Patients {c.n}: event of interest ({labels[1]}) {int(np.sum(c.cause == 1))}, competing ({labels[2]}) "
             f"{int(np.sum(c.cause == 2))}, censored {int(np.sum(c.cause == 0))}"]
    for k in result.incidence.causes:
        est, lo, hi = incidence_at(result.incidence, h, cause=k)
        parts = [f"{t:g}: {e:.3f} ({a:.3f}-{b:.3f})" for t, e, a, b in zip(h, est, lo, hi, strict=True)]
        lines.append(f"Cumulative incidence of {labels.get(k, k)} (Aalen-Johansen, 95% CI): " + "; ".join(parts))
    lines.append(f"Optimism-corrected at horizons {', '.join(f'{t:g}' for t in h)} "
                 f"({result.replicates} bootstrap replicates, {result.failed} failed); AUC | Brier | ICI:")
    for (target, model, method), v in result.corrected.items():
        name = f"{'cause ' + labels[1] if target == 'cause' else 'all-cause'} {model} [{method}]"
        cells = ["/".join(f"{x:.3f}" for x in v[m]) for m in ("auc", "brier", "ici")]
        lines.append(f"  {name:<58} {' | '.join(cells)}")
    if result.external is not None:
        e = result.external_prepared.cohort
        lines.append(f"External cohort, {e.n} patients ({int(np.sum(e.cause == 1))} {labels[1]}, "
                     f"{int(np.sum(e.cause == 2))} {labels[2]}); AUC with 95% CI "
                     f"({result.external_replicates} resamples):")
        for (target, model, method), block in result.external.items():
            name = f"{'cause ' + labels[1] if target == 'cause' else 'all-cause'} {model} [{method}]"
            a = block["auc"]
            cells = [f"{x:.3f} ({lo:.3f} to {hi:.3f})" if np.isfinite(lo) else f"{x:.3f} (no interval)"
                     for x, lo, hi in zip(a["estimate"], a["lower"], a["upper"], strict=True)]
            lines.append(f"  {name:<58} {'; '.join(cells)}")
    lines.append(f"Caution: {CAUTION}")
    return "\n".join(lines)
