"""Numbers and labels as the report prints them (shared by the report text and its figures)."""

from __future__ import annotations

import math
from contextvars import ContextVar

from workbench.models.labels import MODEL_LABELS
from workbench.units import time_phrase

_LABELS = {
    "harrell_c": "Harrell C", "uno_c": "Uno C", "mean_auc": "Mean AUC over the horizons", "ibs": "Integrated Brier score",
    "null_ibs": "Integrated Brier, Kaplan-Meier null", "ipa_integrated": "IPA, integrated",
    "auc": "AUC", "brier": "Brier score", "ipa": "IPA", "ici": "ICI", "e50": "E50", "e90": "E90",
    "cal_slope": "Calibration slope", "oe_ratio": "Observed / expected",
}


def _finite(x) -> bool:
    return isinstance(x, (int, float)) and not isinstance(x, bool) and math.isfinite(x)


def fmt_num(x, digits: int = 3) -> str:
    """A number with fixed decimals, or "n/a"."""
    return f"{x:.{digits}f}".replace("-", "\u2212") if _finite(x) else "n/a"


def fmt_time(x) -> str:
    """A horizon or time as written in the study (0.5, 1, 730), or "n/a"."""
    return f"{x:g}".replace("-", "\u2212") if _finite(x) else "n/a"


def fmt_sig(x, digits: int = 6) -> str:
    """A number to ``digits`` significant digits (reproduction parameters of very different sizes), or "n/a"."""
    return f"{x:.{digits}g}".replace("-", "\u2212") if _finite(x) else "n/a"


def fmt_p(p) -> str:
    """A p-value as usually printed."""
    if not _finite(p):
        return "n/a"
    return "<0.001" if p < 0.001 else f"{p:.3f}"


# Labels of the run being rendered (a model equal to another says so); set by render_report only.
_RUN_LABELS: ContextVar[dict | None] = ContextVar("run_labels", default=None)


def _label(name: str) -> str:
    return (_RUN_LABELS.get() or {}).get(name) or MODEL_LABELS.get(name, name)


def metric_label(name: str, unit: str) -> str:
    """"auc@12" -> "AUC at 12 months"."""
    base, _, h = name.partition("@")
    text = _LABELS.get(base, base)
    return f"{text} at {time_phrase(float(h), unit)}" if h else text


def _metric_order(names, horizons) -> list[str]:
    hs = [f"{h:g}" for h in horizons]
    order = ["harrell_c", "uno_c", *[f"auc@{h}" for h in hs], "mean_auc", *[f"brier@{h}" for h in hs], "ibs",
             "null_ibs", *[f"ipa@{h}" for h in hs], "ipa_integrated"]
    return [n for n in order if n in names]
