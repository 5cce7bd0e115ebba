"""Write and print what the competing-risks route measured.

``competing_results.json`` holds the caution, the study, its provenance (seed, data
hash, study hash, versions), the cause counts, the Aalen-Johansen incidence of each
cause at the horizons, and for every target / model / method the apparent, optimism
and validated ("corrected", by the estimator named under "validation") metrics at each
horizon with the validated metric's 95% interval where one is reported (model
``combined_minus_clinical``: the differences). Patient identifiers never leave the machine.
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np

from workbench.cohort.summary import CAUTION
from workbench.competing.analysis import METRICS, CompetingStudyResult
from workbench.competing.cif import incidence_at
from workbench.competing.estimates import INTERVAL_RULE, withheld_notes
from workbench.report.competing_figures import cause_labels
from workbench.units import unit_after_list

__all__ = ["FORMAT", "competing_results_dict", "format_competing", "write_competing_folder"]

FORMAT = "workbench-competing-results/1"
TARGET_LABELS = {"cause": "cause of interest (competing events as competing)",
                 "all_cause": "all-cause (first event of any cause)"}
METRIC_LABELS = {"auc": "competing AUC (definition 2)", "brier": "IPCW Brier score of the cumulative incidence",
                 "ipa": "IPA (1 - Brier / Aalen-Johansen null Brier)", "ici": "ICI (smoothed calibration)"}


def _num(x) -> float | None:
    x = float(x)
    return round(x, 6) if np.isfinite(x) else None


def _any_interval(result: CompetingStudyResult) -> bool:
    return any(np.any(np.isfinite(v)) for block in result.lower.values() for v in block.values())


def _interval(result: CompetingStudyResult, key, m: str, j: int) -> dict:
    """The validated estimate's 95% interval and, where there is none, why."""
    lo, hi = result.lower.get(key, {}).get(m), result.upper.get(key, {}).get(m)
    if lo is None:
        return {"lower": None, "upper": None, "interval_note": "no interval"}
    note = result.interval_note.get(key, {}).get(m, [""] * (j + 1))[j]
    return {"lower": _num(lo[j]), "upper": _num(hi[j]), "interval_note": note}


def competing_results_dict(result: CompetingStudyResult) -> dict:
    """The result as plain JSON data."""
    h = result.horizons
    cohort = result.cohort
    labels = cause_labels(result)
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
                             "corrected": _num(result.corrected[(target, model, method)][m][j]),
                             **_interval(result, (target, model, method), m, j)})
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
        "validation": {"method": result.estimator_label, "estimator": result.estimator,
                       "interval": INTERVAL_RULE if _any_interval(result) else None,
                       "replicates": result.replicates,
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


def write_competing_folder(result: CompetingStudyResult, out, *, figures: bool = True) -> list[str]:
    """Write competing_results.json and (unless ``figures`` is False) the figures into ``out``.

    Figures (:func:`workbench.report.competing_figures.competing_figures`) at both journal
    widths, and the Fine-Gray nomograms' points tables.
    """
    from workbench.figures.export import save_figure
    from workbench.figures.nomogram_table import points_table, write_points_table

    out = Path(out)
    out.mkdir(parents=True, exist_ok=True)
    (out / "competing_results.json").write_text(json.dumps(competing_results_dict(result), indent=2) + "\n",
                                               encoding="utf-8")
    written = ["competing_results.json"]
    if not figures:
        return written
    from workbench.report.competing_figures import competing_figures, nomogram_scales_by_model

    names: list[str] = []
    for width in ("single", "double"):
        figs = competing_figures(result, width)
        for name, fig in figs.items():
            save_figure(fig, out / f"{name}_{width}", widths=(None,))
        names = list(figs)
    written += [f"{n}_*" for n in names]
    for model, sc in nomogram_scales_by_model(result).items():
        write_points_table(points_table(sc), out / f"incidence_nomogram_points_{model}.csv")
    return written


def withheld_lines(result: CompetingStudyResult) -> list[str]:
    """One line per reason an interval was withheld: the metrics and models it applies to, then the reason."""
    if not result.replicates:
        return []
    words = {"auc": "AUC", "brier": "Brier", "ipa": "IPA", "ici": "ICI"}
    out = []
    for why, cells in withheld_notes(result.interval_note).items():
        arms: dict = {}
        for t, _model, meth, m in cells:
            how = {"cause_specific": "cause-specific Cox", "fine_gray": "Fine-Gray"}.get(meth, meth)
            arms.setdefault(f"{'all-cause' if t == 'all_cause' else 'cause of interest'}, {how}", {})[m] = None
        where = "; ".join(f"{arm} ({', '.join(words.get(m, m) for m in ms)})" for arm, ms in arms.items())
        out.append(f"{where}: {why}")
    return out


def format_competing(result: CompetingStudyResult) -> str:
    """A short console summary ending with the caution."""
    h = result.horizons
    labels = cause_labels(result)
    c = result.cohort
    lines = ["Competing-risks analysis", "========================",
             f"Patients {c.n}: event of interest ({labels[1]}) {int(np.sum(c.cause == 1))}, competing ({labels[2]}) "
             f"{int(np.sum(c.cause == 2))}, censored {int(np.sum(c.cause == 0))}"]
    for k in result.incidence.causes:
        est, lo, hi = incidence_at(result.incidence, h, cause=k)
        parts = [f"{t:g}: {e:.3f} ({a:.3f}-{b:.3f})" for t, e, a, b in zip(h, est, lo, hi, strict=True)]
        lines.append(f"Cumulative incidence of {labels.get(k, k)} (Aalen-Johansen, 95% CI): " + "; ".join(parts))
    unit = unit_after_list(h, result.cohort.time_unit or "")
    lines.append(f"Validated at horizons {', '.join(f'{t:g}' for t in h)} {unit} by {result.estimator_label} "
                 f"({result.replicates} bootstrap replicates, {result.failed} failed); AUC | Brier | ICI:")
    for (target, model, method), v in result.corrected.items():
        name = f"{'cause ' + labels[1] if target == 'cause' else 'all-cause'} {model} [{method}]"
        cells = ["/".join(f"{x:.3f}" for x in v[m]) for m in ("auc", "brier", "ici")]
        lines.append(f"  {name:<58} {' | '.join(cells)}")
    auc_rows = [(k, result.lower[k]["auc"], result.upper[k]["auc"]) for k in result.corrected
                if k in result.lower and np.any(np.isfinite(result.lower[k]["auc"]))]
    if auc_rows:
        lines.append(f"AUC with 95% interval ({INTERVAL_RULE}):")
        for (target, model, method), lo, hi in auc_rows:
            name = f"{'cause ' + labels[1] if target == 'cause' else 'all-cause'} {model} [{method}]"
            est = result.corrected[(target, model, method)]["auc"]
            cells = [f"{x:.3f} ({a:.3f} to {b:.3f})" if np.isfinite(a) else f"{x:.3f} (no interval)"
                     for x, a, b in zip(est, lo, hi, strict=True)]
            lines.append(f"  {name:<58} {'; '.join(cells)}")
    withheld = withheld_lines(result)
    if withheld:
        lines.append("Validated estimates shown without an interval, and why:")
        lines += [f"  {x}" for x in withheld]
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
