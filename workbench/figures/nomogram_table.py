"""A nomogram as tables, to compute it by hand: points per term value and survival per total.

See :func:`points_table`; the tables reproduce the drawn scales (checked in the tests).
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass

import numpy as np
import pandas as pd

from workbench.errors import SpecError
from workbench.figures.nomogram_axes import NomogramScales, TermScale
from workbench.figures.ticks import format_number, nice_ticks
from workbench.preprocess.values import canonical_level


@dataclass(frozen=True)
class PointsTable:
    """Tables to compute a nomogram by hand.

    Attributes
    ----------
    terms : DataFrame
        Columns ``term``, ``label``, ``value``, ``points``, ``on_axis``: every level
        of categorical terms, a fine grid of values over the whole training
        range of continuous terms (and the below-limit value), the signature
        over the training scores. Between two rows of a continuous term, read
        the points by linear interpolation.
    survival : DataFrame
        ``total_points``, ``linear_predictor`` and one ``survival_<horizon>``
        column per horizon, every ``total_step`` points.
    model : str
    horizons : tuple of float
    """

    terms: pd.DataFrame
    survival: pd.DataFrame
    model: str
    horizons: tuple[float, ...]


def _table_values(t: TermScale, n_grid: int, signature_range) -> list:
    info = t.term_info
    if info is None:
        lo, hi = signature_range
        return list(nice_ticks(lo, hi, n_grid, cover=True))
    if info.kind in ("categorical", "ordinal"):
        return list(info.levels)
    lo, hi = info.train_min, info.train_max
    if info.transform is not None:
        raw = np.geomspace(lo, hi, n_grid)
        vals = np.unique(np.r_[lo, [float(f"{v:.2g}") for v in raw], hi])
        vals = vals[(vals >= lo) & (vals <= hi)]
    else:
        vals = nice_ticks(lo, hi, n_grid, cover=False)
        vals = np.unique(np.r_[lo, vals, hi])
    out = list(vals.astype(float))
    if info.has_limit_indicator:
        out = [f"<{info.detection_limit:.10g}", *out]
    return out


def points_table(
    scales: NomogramScales, *, n_grid: int = 120, total_step: float = 1.0,
    signature_range: tuple[float, float] | None = None,
) -> PointsTable:
    """The nomogram as tables: value -> points per term, total points -> survival per horizon.

    Parameters
    ----------
    scales : NomogramScales
    n_grid : int
        Approximate rows per continuous term.
    total_step : float
        Spacing of the total-points rows.
    signature_range : (float, float), optional
        Signature values to tabulate (default: the signature axis range).
    """
    rows = []
    for t in scales.terms:
        seg = t.segments[0]
        rng = signature_range or t.table_range or seg.value_range or (0.0, 1.0)
        vals = _table_values(t, n_grid, rng)
        pts = t.points(vals)
        lo_ax = min(s.value_range[0] for s in t.segments) if seg.value_range else None
        hi_ax = max(s.value_range[1] for s in t.segments) if seg.value_range else None
        for v, p in zip(vals, pts, strict=True):
            on_axis = True if lo_ax is None or isinstance(v, str) else bool(lo_ax - 1e-12 <= v <= hi_ax + 1e-12)
            rows.append({"term": t.name, "label": t.label, "value": v, "points": float(p), "on_axis": on_axis})
    terms = pd.DataFrame(rows)
    lo_tot = float(np.floor(terms.groupby("term")["points"].min().sum()))
    hi_tot = float(np.ceil(max(terms.groupby("term")["points"].max().sum(), scales.total_axis_max)))
    tot = np.arange(min(lo_tot, 0.0), hi_tot + total_step / 2, total_step)
    surv = {"total_points": tot, "linear_predictor": scales.linear_predictor(tot)}
    for s in scales.survival:
        if scales.risk_of:
            surv[f"risk_{format_number(s.horizon)}"] = 1.0 - s.survival(tot)
        else:
            surv[f"survival_{format_number(s.horizon)}"] = s.survival(tot)
    return PointsTable(terms, pd.DataFrame(surv), scales.model, scales.horizons)


def write_points_table(table: PointsTable, path) -> tuple:
    """Write the points table as two CSV files: ``<path>`` (terms) and ``<stem>_survival.csv``
    (``<stem>_risk.csv`` for a risk nomogram).

    Returns the two paths written.
    """
    from pathlib import Path

    p = Path(path)
    if p.suffix.lower() != ".csv":
        p = p.with_suffix(".csv")
    p.parent.mkdir(parents=True, exist_ok=True)
    terms = table.terms.assign(points=table.terms["points"].round(2))
    terms.to_csv(p, index=False)
    kind = "risk" if any(str(c).startswith("risk_") for c in table.survival.columns) else "survival"
    q = p.with_name(f"{p.stem}_{kind}.csv")
    table.survival.round({"total_points": 2, "linear_predictor": 4}).round(4).to_csv(q, index=False)
    return p, q


def survival_from_table(table: PointsTable, raw_values: Mapping, horizon: float) -> float:
    """Predicted survival read from the points table alone, as a reader would by hand.

    Continuous values are interpolated linearly between neighbouring rows,
    levels are looked up, and the total is interpolated in the survival table.
    Missing values must be filled in by the caller.
    """
    total = 0.0
    for name, part in table.terms.groupby("term", sort=False):
        v = raw_values[name]
        num = part[[not isinstance(x, str) for x in part["value"]]]
        key = canonical_level(v) if isinstance(v, str) else None
        levels = [canonical_level(x) if isinstance(x, str) else None for x in part["value"]]
        if key is not None and key in levels:
            total += float(part["points"].iloc[levels.index(key)])
            continue
        if num.empty:
            raise SpecError(f"{name}: value {v!r} is not a row of the points table.")
        total += float(np.interp(float(v), num["value"].astype(float), num["points"]))
    col = f"survival_{format_number(horizon)}"
    if col not in table.survival:
        raise SpecError(f"the points table has no survival column for horizon {horizon:g}.")
    return float(np.interp(total, table.survival["total_points"], table.survival[col]))
