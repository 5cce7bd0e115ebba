"""Display tables built from a finished study result (formatting only; every number comes from the library)."""

from __future__ import annotations

import math

import pandas as pd

from workbench.models.labels import MODEL_LABELS
from workbench.units import time_phrase

METRIC_LABELS = {
    "harrell_c": "Harrell C",
    "uno_c": "Uno C",
    "mean_auc": "Mean AUC",
    "auc": "AUC",
    "brier": "Brier score",
    "ipa": "IPA (scaled Brier)",
    "ibs": "Integrated Brier score",
    "null_ibs": "Integrated Brier, no-information model",
    "ipa_integrated": "Integrated IPA",
    "ici": "ICI",
    "e50": "E50",
    "e90": "E90",
    "cal_slope": "Calibration slope",
    "oe_ratio": "Observed / expected",
}

DISCRIMINATION = ("harrell_c", "uno_c", "auc", "mean_auc")
CALIBRATION = ("cal_slope", "oe_ratio", "ici", "e50", "e90")
OVERALL = ("brier", "ipa", "ibs", "null_ibs", "ipa_integrated")


def label(model: str) -> str:
    return MODEL_LABELS.get(model, model)


def metric_label(name: str, time_unit: str = "") -> str:
    base, _, h = name.partition("@")
    text = METRIC_LABELS.get(base, base)
    return f"{text} at {time_phrase(float(h), time_unit)}" if h else text


def num(x, digits: int = 3) -> str:
    if x is None:
        return "-"
    try:
        x = float(x)
    except (TypeError, ValueError):
        return str(x)
    return "-" if not math.isfinite(x) else f"{x:.{digits}f}"


def interval(lo, hi, digits: int = 3) -> str:
    a, b = num(lo, digits), num(hi, digits)
    return "-" if a == "-" or b == "-" else f"{a} to {b}"


def _ci(e) -> str:
    if int(getattr(e, "n_used", MIN_CI_REPLICATES)) < MIN_CI_REPLICATES:
        return "-"
    return interval(e.ci_lower, e.ci_upper)


def _ordered(names, families) -> list[str]:
    out = []
    for fam in families:
        out += [n for n in names if n.split("@")[0] == fam]
    return out


def metric_table(validation, families, *, time_unit: str = "", labels: dict | None = None) -> pd.DataFrame:
    """One row per model and metric: validated estimate with its interval, apparent value and optimism.

    ``labels``: the run's model labels (:func:`workbench.models.labels.model_labels`, which say when
    the combined model equals the clinical one); by default the plain labels."""
    labels = labels or {}
    rows = []
    for m in validation.models:
        est = validation.estimates.get(m, {})
        for name in _ordered(list(est), families):
            e = est[name]
            rows.append({
                "Model": labels.get(m, label(m)),
                "Measure": metric_label(name, time_unit),
                "Validated": num(e.estimate),
                f"{round(100 * validation.conf_level)}% CI": _ci(e),
                "Apparent": num(e.apparent),
                "Optimism": num(e.optimism),
                "Replicates": int(e.n_used),
            })
    return pd.DataFrame(rows)


HEADLINE = ("harrell_c", "uno_c", "auc", "ibs", "ipa_integrated")
MIN_CI_REPLICATES = 10
"""Fewer replicates than this give no interval (the interval rules need 10); the tables then show none."""


def difference_table(comparison, *, time_unit: str = "", headline: bool = False) -> pd.DataFrame:
    """Model minus baseline with intervals and which direction is better (headline measures, or all)."""
    rows = []
    fams = HEADLINE if headline else DISCRIMINATION + OVERALL + CALIBRATION
    names = _ordered(list(comparison.differences), fams)
    for name in names:
        d = comparison.differences[name]
        rows.append({
            "Measure": metric_label(name, time_unit),
            "Difference (validated)": num(d.estimate),
            f"{round(100 * comparison.conf_level)}% CI": _ci(d),
            "Apparent difference": num(d.apparent),
            "Better when": d.better,
            "Paired replicates": int(d.n_used),
        })
    return pd.DataFrame(rows)


def reclassification_table(comparison, *, time_unit: str = "") -> pd.DataFrame:
    rows = []
    for r in comparison.reclassification:
        for key, text in (("nri", "NRI (category-free)"), ("nri_events", "NRI, events"),
                          ("nri_nonevents", "NRI, non-events"), ("idi", "IDI"),
                          ("idi_events", "IDI, events"), ("idi_nonevents", "IDI, non-events")):
            e = getattr(r, key)
            rows.append({
                "Horizon": time_phrase(r.horizon, time_unit),
                "Measure": text,
                "Validated": num(e.estimate),
                "CI": _ci(e),
                "Apparent": num(e.apparent),
            })
    return pd.DataFrame(rows)


def selection_table(selection, top: int = 30) -> pd.DataFrame:
    df = selection.to_frame().head(top)
    return df.rename(columns={"feature": "Feature", "frequency": "Share kept",
                              "in_apparent_fit": "In final fit"})


def steps_table(steps, prepared=None, reproducibility=None) -> pd.DataFrame:
    """The signature's reduction steps; with a repeat table, the reproducibility filter first.

    ``prepared`` (PreparedCohort) and ``reproducibility`` (the study's ReproducibilitySpec):
    the filter ran once before any modelling, on all features of the pool.
    """
    rows = []
    icc = getattr(prepared, "reproducibility", None)
    if icc is not None and reproducibility is not None:
        n_in, n_out = len(icc), len(icc) - len(prepared.unreproducible)
        rows.append({"Step": f"Reproducibility ({reproducibility.form} >= {reproducibility.min_icc:g}, "
                             f"{int(icc['n'].max())} repeat patients)",
                     "Features in": n_in, "Features out": n_out, "Dropped": n_in - n_out})
    rows += [{"Step": s.step, "Features in": int(s.n_in), "Features out": int(s.n_out),
              "Dropped": int(s.n_in) - int(s.n_out)} for s in steps]
    return pd.DataFrame(rows)


def wide_metric_table(validation, families, *, time_unit: str = "", labels: dict | None = None) -> pd.DataFrame:
    """One row per measure, one column per model: validated estimate with its interval (``labels``: as
    :func:`metric_table`)."""
    labels = labels or {}
    models = list(validation.models)
    names: list[str] = []
    for m in models:
        for n in _ordered(list(validation.estimates.get(m, {})), families):
            if n not in names:
                names.append(n)
    rows = []
    for n in names:
        row = {"Measure": metric_label(n, time_unit)}
        for m in models:
            e = validation.estimates.get(m, {}).get(n)
            head = labels.get(m, label(m))
            if e is None:
                row[head] = "-"
                continue
            ci = _ci(e)
            row[head] = num(e.estimate) + ("" if ci == "-" else f" ({ci})")
        rows.append(row)
    return pd.DataFrame(rows)
