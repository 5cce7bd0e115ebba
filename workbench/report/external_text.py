"""Sentences about external calibration built from the numbers of ``results.json``.

Which model is furthest off on the external cohort, at which horizon, by how much
(observed/expected with its interval, ICI), and which centre or scanner departs most
- so the limitations say what the tables show instead of a general warning.
Nothing here computes a metric: it reads the external estimates and the per-centre /
per-scanner blocks that the validation wrote.
"""

from __future__ import annotations

import math

__all__ = ["CALIBRATED_OE", "CALIBRATED_ICI", "external_calibration_sentences", "worst_external_calibration"]

CALIBRATED_OE = (0.9, 1.1)
"""Observed/expected ratios read as calibrated in the large (common practice, a rule of thumb)."""
CALIBRATED_ICI = 0.05
"""ICI below which calibration is read as close (common practice, a rule of thumb)."""


def _ok(x) -> bool:
    return isinstance(x, (int, float)) and not isinstance(x, bool) and math.isfinite(x) and x > 0


def _get(block: dict | None, key: str) -> dict:
    return (block or {}).get(key) or {}


def worst_external_calibration(d: dict) -> dict | None:
    """The model and horizon whose external observed/expected is furthest from 1 (log scale).

    Returns None when the run has no external cohort or no finite O/E.
    """
    if not d.get("external"):
        return None
    best = None
    for name, m in d["models"].items():
        perf = m.get("external_performance") or {}
        for h in d["study"]["horizons"]:
            e = perf.get(f"oe_ratio@{float(h):g}") or {}
            oe = e.get("estimate")
            if not _ok(oe):
                continue
            gap = abs(math.log(oe))
            if best is None or gap > best["gap"] + 1e-12:
                ici = (perf.get(f"ici@{float(h):g}") or {})
                best = {"model": name, "horizon": float(h), "oe": oe, "oe_lower": e.get("ci_lower"),
                        "oe_upper": e.get("ci_upper"), "ici": ici.get("estimate"), "ici_lower": ici.get("ci_lower"),
                        "ici_upper": ici.get("ci_upper"), "gap": gap}
    return best


def _worst_level(d: dict, model: str, horizon: float) -> dict | None:
    groups = _get(d["external"], "by_group")
    key = f"oe_ratio@{horizon:g}"
    best = None
    for grouping, g in groups.items():
        if len(g.get("levels") or []) < 2:
            continue  # one centre is the whole cohort: nothing beyond the overall numbers
        for lev, metrics in (_get(g.get("estimates"), model)).items():
            e = (metrics or {}).get(key) or {}
            oe = e.get("estimate")
            if _ok(oe) and (best is None or abs(math.log(oe)) > best["gap"] + 1e-12):
                best = {"grouping": grouping, "level": lev, "oe": oe, "lower": e.get("ci_lower"),
                        "upper": e.get("ci_upper"), "n": (g.get("n") or {}).get(lev), "gap": abs(math.log(oe))}
    return best


def _ci(lo, hi, digits: int = 2) -> str:
    return f" (95% CI {lo:.{digits}f} to {hi:.{digits}f})" if _ok(lo) and _ok(hi) else ""


def external_calibration_sentences(d: dict, labels: dict, unit: str, unseen=()) -> list[str]:
    """Limitation sentences on external calibration, from the numbers (empty without an external cohort)."""
    w = worst_external_calibration(d)
    if w is None:
        return []
    label = labels.get(w["model"], w["model"])
    n = d["external"]["n"]
    ici = w["ici"]
    ici_text = f", ICI {ici:.3f}{_ci(w['ici_lower'], w['ici_upper'], 3)}" if _ok(ici) else ""
    lo, hi = CALIBRATED_OE
    if lo <= w["oe"] <= hi and (not _ok(ici) or ici < CALIBRATED_ICI):
        return [f"On the external cohort ({n} patients) calibration in the large held: the largest departure was "
                f"the {label} model at {w['horizon']:g} {unit}, observed/expected {w['oe']:.2f}"
                f"{_ci(w['oe_lower'], w['oe_upper'])}{ici_text}."]
    side, surv = ("more", "too high") if w["oe"] > 1 else ("fewer", "too low")
    out = [f"The {label} model was miscalibrated on the external cohort ({n} patients): at {w['horizon']:g} {unit} "
           f"observed/expected was {w['oe']:.2f}{_ci(w['oe_lower'], w['oe_upper'])}, "
           f"{abs(w['oe'] - 1) * 100:.0f}% {side} events than predicted (predicted survival {surv}){ici_text}."]
    lev = _worst_level(d, w["model"], w["horizon"])
    if lev is not None:
        flag = (", a scanner absent from the development data" if lev["grouping"] == "scanner"
                and str(lev["level"]) in {str(u) for u in unseen} else "")
        out.append(f"By {lev['grouping']}, the largest departure for this model at {w['horizon']:g} {unit} was "
                   f"{lev['level']} ({lev['n']} patients{flag}): observed/expected {lev['oe']:.2f}"
                   f"{_ci(lev['lower'], lev['upper'])}; its predictions should not be used there without "
                   "recalibration.")
    return out
