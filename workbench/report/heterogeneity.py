"""Per-centre / per-scanner performance and its pooling: results.json blocks, digest lines, report rows.

Every key read here is optional (older results, runs without a centre column):
missing pieces give empty blocks, never errors.
"""

from __future__ import annotations

import math

import pandas as pd

from workbench.report.jsonable import jsonable

__all__ = ["censoring_dict", "digest_lines", "group_table", "groups_dict", "heterogeneity_context"]

_SHOWN = ("harrell_c", "oe_ratio", "cal_slope", "ici", "brier")
_LABEL = {"harrell_c": "Harrell C", "oe_ratio": "O/E", "cal_slope": "Calibration slope", "ici": "ICI",
          "brier": "Brier", "ipa": "IPA"}


def censoring_dict(choice) -> dict | None:
    """The censoring model of the IPCW weights and the test behind it."""
    return None if choice is None else jsonable(choice)


def groups_dict(groups: dict | None) -> dict:
    """results.json block: grouping -> levels, counts, per-level estimates, pooled results."""
    out = {}
    for name, g in (groups or {}).items():
        out[name] = {
            "levels": list(g.levels), "n": jsonable(g.n), "n_events": jsonable(g.n_events),
            "censoring": g.censoring, "pooling_method": g.pooling_method, "notes": list(g.notes),
            "estimates": jsonable(g.estimates), "pooled": jsonable(g.pooled),
        }
    return out


def group_table(groups: dict | None) -> pd.DataFrame:
    """One row per grouping, level (or "pooled"), model and metric (CSV)."""
    rows = []
    for name, g in (groups or {}).items():
        for model, by_level in g.estimates.items():
            for lev, metrics in by_level.items():
                for metric, e in metrics.items():
                    rows.append({"grouping": name, "level": lev, "model": model, "metric": metric,
                                 "n": g.n[lev], "n_events": g.n_events[lev], "estimate": e.estimate,
                                 "ci_lower": e.ci_lower, "ci_upper": e.ci_upper,
                                 "ci_note": getattr(e, "ci_note", "")})
            for metric, p in g.pooled.get(model, {}).items():
                rows.append({"grouping": name, "level": "pooled", "model": model, "metric": metric,
                             "estimate": p.estimate, "ci_lower": p.ci_lower, "ci_upper": p.ci_upper,
                             "pi_lower": p.pi_lower, "pi_upper": p.pi_upper, "tau2": p.tau2, "i2": p.i2})
    return pd.DataFrame(rows)


def _f(x, d=2) -> str:
    return "-" if x is None or (isinstance(x, float) and not math.isfinite(x)) else f"{x:.{d}f}"


def digest_lines(groups: dict | None, model: str, horizon, title: str) -> list[str]:
    """A few terminal lines: C and O/E per level and their pooling, for one model at one horizon."""
    lines = []
    h = f"{float(horizon):g}"
    for name, g in (groups or {}).items():
        est = g.estimates.get(model)
        if not est:
            continue
        lines.append(f"{title}, per {name} ({model}; O/E at {h}):")
        for lev in g.levels:
            c, oe = est[lev].get("harrell_c"), est[lev].get(f"oe_ratio@{h}")
            lines.append(f"  {lev:<16s} n={g.n[lev]:<4d} C {_f(c.estimate)} ({_f(c.ci_lower)}-{_f(c.ci_upper)})"
                         f"   O/E {_f(oe.estimate)} ({_f(oe.ci_lower)}-{_f(oe.ci_upper)})")
        pc, po = g.pooled.get(model, {}).get("harrell_c"), g.pooled.get(model, {}).get(f"oe_ratio@{h}")
        if pc is not None:
            lines.append(f"  pooled C {_f(pc.estimate)} ({_f(pc.ci_lower)}-{_f(pc.ci_upper)}), "
                         f"95% prediction interval {_f(pc.pi_lower)}-{_f(pc.pi_upper)}, I2 {100 * pc.i2:.0f}%")
        if po is not None:
            lines.append(f"  pooled O/E {_f(po.estimate)} ({_f(po.ci_lower)}-{_f(po.ci_upper)}), "
                         f"95% prediction interval {_f(po.pi_lower)}-{_f(po.pi_upper)}, I2 {100 * po.i2:.0f}%")
    return lines


def heterogeneity_context(block: dict | None, horizons, labels: dict | None = None) -> list[dict]:
    """Rows for the report partial from a results.json ``by_group`` block (all keys optional)."""
    out = []
    labels = labels or {}
    for name, g in (block or {}).items():
        levels = g.get("levels") or []
        for model, by_level in (g.get("estimates") or {}).items():
            pooled = g.get("pooled", {}).get(model) or {}
            # one table per horizon (C with the first), so that a table fits the width of a page
            groups = [[f"{m}@{float(h):g}" for m in _SHOWN[1:]] for h in horizons] or [[]]
            groups[0] = ["harrell_c"] + groups[0]
            parts = []
            for cols in groups:
                cols = [c for c in cols if any(c in (by_level.get(lev) or {}) for lev in levels)]
                if not cols and parts:
                    continue
                heads = [_LABEL.get(c.split("@")[0], c) + (f" {c.split('@')[1]}" if "@" in c else "") for c in cols]
                rows = [{"level": lev, "n": (g.get("n") or {}).get(lev), "events": (g.get("n_events") or {}).get(lev),
                         "cells": [(by_level.get(lev) or {}).get(c) for c in cols]} for lev in levels]
                prow = [pooled.get(c) for c in cols]
                parts.append({"heads": heads, "rows": rows, "pooled": prow if any(p for p in prow) else None})
            withdrawn = sorted({e.get("ci_note") for p in parts for r in p["rows"] for e in r["cells"]
                                if isinstance(e, dict) and e.get("ci_note")})
            out.append({"grouping": name, "model": labels.get(model, model), "parts": parts,
                        "withdrawn": withdrawn,
                        "pooled": any(p["pooled"] for p in parts),
                        "censoring": g.get("censoring"), "method": g.get("pooling_method"),
                        "notes": g.get("notes") or []})
    return out
