"""Sentences about external calibration built from the numbers of ``results.json``.

Which model is furthest off on the external cohort, at which horizon, by how much
(observed/expected with its interval, ICI), and which centre or scanner departs most
- so the limitations say what the tables show instead of a general warning.
Nothing here computes a metric: it reads the external estimates and the per-centre /
per-scanner blocks that the validation wrote.
"""

from __future__ import annotations

import math

from workbench.units import time_phrase

__all__ = ["CALIBRATED_OE", "worst_horizon", "external_calibration_sentences", "worst_external_calibration"]

CALIBRATED_OE = (0.9, 1.1)
"""Observed/expected ratios read as calibrated in the large (common practice, a rule of thumb); a model
is called miscalibrated when its ratio lies outside and its interval, if any, excludes 1."""


def _ok(x) -> bool:
    return isinstance(x, (int, float)) and not isinstance(x, bool) and math.isfinite(x) and x > 0


def _get(block: dict | None, key: str) -> dict:
    return (block or {}).get(key) or {}


def worst_external_calibration(d: dict, model: str | None = None) -> dict | None:
    """The model (or, given ``model``, that model's horizon) whose external observed/expected is furthest from 1.

    Distance on the log scale. Returns None when the run has no external cohort or no finite O/E.
    """
    if not d.get("external"):
        return None
    best = None
    for name, m in d["models"].items():
        if model is not None and name != model:
            continue
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


def worst_horizon(d: dict, models, default: float) -> float:
    """The horizon at which the given models depart most from observed/expected 1 (``default`` if none)."""
    ws = [w for w in (worst_external_calibration(d, m) for m in models) if w is not None]
    return max(ws, key=lambda w: w["gap"])["horizon"] if ws else float(default)


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


def _off(w: dict) -> bool:
    """Outside the calibrated range, and (when there is one) an interval that excludes 1."""
    lo, hi = CALIBRATED_OE
    outside = not lo <= w["oe"] <= hi
    if _ok(w["oe_lower"]) and _ok(w["oe_upper"]):
        outside = outside and not w["oe_lower"] <= 1.0 <= w["oe_upper"]
    return outside


def external_calibration_sentences(d: dict, labels: dict, unit: str, unseen=()) -> list[str]:
    """Limitation sentences on external calibration, from the numbers (empty without an external cohort).

    One sentence per miscalibrated model (its worst horizon: observed/expected with interval,
    ICI), most miscalibrated first, each followed by the centre or scanner departing most;
    one sentence naming the models whose calibration in the large held.
    """
    if worst_external_calibration(d) is None:
        return []
    per_model = [w for w in (worst_external_calibration(d, m) for m in d["models"]) if w is not None]
    per_model.sort(key=lambda w: -w["gap"])
    n = d["external"]["n"]
    out, held = [], []
    for w in per_model:
        label = labels.get(w["model"], w["model"])
        ici = w["ici"]
        ici_text = f", ICI {ici:.3f}{_ci(w['ici_lower'], w['ici_upper'], 3)}" if _ok(ici) else ""
        if not _off(w):
            held.append(w)
            continue
        side, surv = ("more", "too high") if w["oe"] > 1 else ("fewer", "too low")
        out.append(f"The {label} model was miscalibrated on the external cohort ({n} patients): at {time_phrase(w['horizon'], unit)} "
                   f"observed/expected was {w['oe']:.2f}{_ci(w['oe_lower'], w['oe_upper'])}, "
                   f"{abs(w['oe'] - 1) * 100:.0f}% {side} events than predicted (predicted survival {surv}){ici_text}.")
        lev = _worst_level(d, w["model"], w["horizon"])
        if lev is not None:
            flag = (", a scanner absent from the development data" if lev["grouping"] == "scanner"
                    and str(lev["level"]) in {str(u) for u in unseen} else "")
            out.append(f"By {lev['grouping']}, the largest departure for the {label} model at {time_phrase(w['horizon'], unit)} "
                       f"was {lev['level']} ({lev['n']} patients{flag}): observed/expected {lev['oe']:.2f}"
                       f"{_ci(lev['lower'], lev['upper'])}; its predictions should not be used there without "
                       "recalibration.")
    if held:
        names = [labels.get(w["model"], w["model"]) for w in held]
        names = names[0] if len(names) == 1 else ", ".join(names[:-1]) + " and " + names[-1]
        w = held[0]
        out.append(f"On the external cohort ({n} patients) calibration in the large held for the {names} "
                   f"model{'s' if len(held) > 1 else ''}: the largest departure was {w['oe']:.2f}"
                   f"{_ci(w['oe_lower'], w['oe_upper'])} at {time_phrase(w['horizon'], unit)} "
                   f"({labels.get(w['model'], w['model'])}).")
    return out
