"""Nomogram page layout: rows, label lanes, horizontal geometry and notes (no drawing).

Everything here decides *where* things go, measured in points with
:class:`~workbench.figures.measure.TextMeasure`; :mod:`workbench.figures.nomogram`
draws it.
"""

from __future__ import annotations

import textwrap
from dataclasses import dataclass

import numpy as np

from workbench.figures.measure import TextMeasure as _Measure
from workbench.figures.nomogram_axes import NomogramScales, PatientPoints, TermScale
from workbench.figures.ticks import format_number
from workbench.units import unit_for, unit_singular

SCORE_AXIS = "Factor score"
"""Name of the top ruler (each factor's contribution, 0-100 for the widest factor)."""
SUM_AXIS = "Sum of scores"
"""Name of the ruler the factor scores are added on."""
_LABEL_CHARS = 18


@dataclass
class _Row:
    kind: str
    height: float
    term: TermScale | None = None
    piece: int = 0
    horizon: float | None = None
    top: float = 0.0
    line: float = 0.0
    text: str = ""


@dataclass(frozen=True)
class _Geometry:
    """Horizontal geometry of one panel: x runs in points, 0-100 between the margins."""

    left: float
    right: float
    units_per_pt: float
    fs: float

    @property
    def tick_fs(self) -> float:
        return self.fs - 1.5


def _lanes(xs, labels, widths_pt, geo: _Geometry, max_lanes: int = 4, drop: bool = False) -> list[int]:
    """Lane of each label: 0 above the line, 1 below, 2 higher above, 3 lower below (-1: dropped)."""
    gap = 0.35 * geo.tick_fs * geo.units_per_pt
    placed: dict[int, list[tuple[float, float]]] = {k: [] for k in range(max_lanes)}
    lanes = [0] * len(xs)
    for i in np.argsort(xs, kind="stable"):
        half = widths_pt[i] * geo.units_per_pt / 2
        for cand in range(max_lanes):
            if all(abs(xs[i] - px) >= half + ph + gap for px, ph in placed[cand]):
                lanes[i] = cand
                break
        else:
            lanes[i] = -1 if drop else max_lanes - 1
        if lanes[i] >= 0:
            placed[lanes[i]].append((float(xs[i]), half))
    return lanes


def _label_centres(xs, widths_pt, geo: _Geometry) -> np.ndarray:
    """Where each tick label is centred: over its tick, but moved inwards at the ends of the
    0-100 band so no label reaches into the row names on the left or the patient column."""
    xs = np.asarray(xs, dtype=float)
    half = np.asarray(widths_pt, dtype=float) * geo.units_per_pt / 2
    lo, hi = half, np.maximum(100.0 - half, half)
    return np.minimum(np.maximum(xs, lo), hi)


def _level_groups(seg, geo: _Geometry, measure) -> list[tuple[float, str, int]]:
    """Labels of a categorical axis as (centre, text, lane), lane 0 above the line, 1 below.

    Levels whose labels cannot be told apart in two lanes are named together in one
    label ("II, III, IV") over the middle of their ticks, instead of stacking them in
    further lanes with leader lines that cross other labels. Their ticks are still
    drawn one by one, so the exact scores remain readable.
    """
    order = sorted(range(len(seg.ticks)), key=lambda i: seg.ticks[i].points)
    groups = [[i] for i in order]
    while True:
        texts = [", ".join(seg.ticks[i].label for i in g) for g in groups]
        widths = [measure.width(tx, geo.tick_fs) for tx in texts]
        xs = _label_centres([float(np.mean([seg.ticks[i].points for i in g])) for g in groups], widths, geo)
        lanes = _lanes(xs, None, widths, geo, 2, drop=True)
        bad = [k for k, lane in enumerate(lanes) if lane < 0]
        if not bad or len(groups) == 1:
            return [(float(x), tx, max(lane, 0)) for x, tx, lane in zip(xs, texts, lanes, strict=True)]
        k = bad[0]
        j = k - 1 if k == len(groups) - 1 or (k > 0 and xs[k] - xs[k - 1] <= xs[k + 1] - xs[k]) else k + 1
        lo, hi = sorted((j, k))
        groups[lo:hi + 1] = [groups[lo] + groups[hi]]


def _term_lanes(t: TermScale, seg, geo: _Geometry, measure) -> list[int]:
    """Lanes of a term's labels: categorical groups use two (see :func:`_level_groups`);
    continuous ones two, dropping what still collides."""
    if t.kind in ("categorical", "ordinal"):
        return [lane for _, _, lane in _level_groups(seg, geo, measure)]
    widths = [measure.width(k.label, geo.tick_fs) for k in seg.ticks]
    xs = _label_centres([k.points for k in seg.ticks], widths, geo)
    return _lanes(xs, None, widths, geo, 2, drop=True)


def _thin(xs, widths_pt, geo: _Geometry, order) -> np.ndarray:
    """Which labels to show so that none overlap, taking them in the given order of preference."""
    gap = 0.35 * geo.tick_fs * geo.units_per_pt
    keep = np.zeros(len(xs), dtype=bool)
    for i in order:
        half = widths_pt[i] * geo.units_per_pt / 2
        ok = all(abs(xs[i] - xs[j]) >= half + widths_pt[j] * geo.units_per_pt / 2 + gap
                 for j in np.flatnonzero(keep))
        keep[i] = ok
    return keep


def _uniform_keep(xs, widths_pt, geo: _Geometry) -> np.ndarray:
    """Label every k-th tick of a regular scale, with the smallest k at which no labels overlap."""
    n = len(xs)
    gap = 0.35 * geo.tick_fs * geo.units_per_pt
    for k in range(1, max(n, 1) + 1):
        idx = np.arange(0, n, k)
        ok = all(
            abs(xs[b] - xs[a]) >= (widths_pt[a] + widths_pt[b]) * geo.units_per_pt / 2 + gap
            for a, b in zip(idx[:-1], idx[1:], strict=True)
        )
        if ok:
            keep = np.zeros(n, dtype=bool)
            keep[idx] = True
            return keep
    keep = np.zeros(n, dtype=bool)
    keep[0] = True
    return keep


def _roundness_order(values) -> list[int]:
    """Prefer round probabilities (0.5, then tenths, twentieths, tails)."""
    def rank(v):
        v = float(v)
        if np.isclose(v, 0.5):
            return 0
        if np.isclose(v * 10, round(v * 10)):
            return 1
        if np.isclose(v * 20, round(v * 20)):
            return 2
        return 3
    return sorted(range(len(values)), key=lambda i: (rank(values[i]), i))


def _term_rows(t: TermScale, geo: _Geometry, measure: _Measure) -> list[_Row]:
    if len(t.segments) > 1:
        return [_Row("term", 0.9, t, i) for i in range(len(t.segments))]
    h = 1.0
    if t.kind != "signature":
        lanes = _term_lanes(t, t.segments[0], geo, measure)
        h += 0.42 * (1 in lanes or 3 in lanes) + 0.34 * (2 in lanes) + 0.34 * (3 in lanes)
    if t.extra_ticks:
        h += 0.75
    if t.bands:
        h += 0.6
    return [_Row("term", h, t, 0)]


def _term_block(scales: NomogramScales, geo, measure) -> float:
    return sum(r.height for t in scales.terms for r in _term_rows(t, geo, measure))


def _layout(scales: NomogramScales, term_block: float, geo, measure) -> list[_Row]:
    rows = [_Row("points", 1.0)]
    for t in scales.terms:
        rows += _term_rows(t, geo, measure)
    used = sum(r.height for r in rows[1:])
    if term_block > used + 1e-9:
        rows.append(_Row("pad", term_block - used))
    rows.append(_Row("total", 1.0))
    rows += [_Row("survival", 1.0, horizon=s.horizon) for s in scales.survival]
    if scales.median is not None:
        rows.append(_Row("median", 1.0))
    y = 0.0
    for r in rows:
        r.top = y
        above = 0.62
        if r.kind == "term" and r.term.kind != "signature" and len(r.term.segments) == 1:
            extra = r.height - 1.0 - (0.75 if r.term.extra_ticks else 0.0)
            above += 0.34 * (extra > 0.42 + 1e-9)  # room for a higher lane above
        r.line = y - (above if r.kind == "term" else 0.62 * r.height)
        y -= r.height
    return rows


def _row_label(r: _Row, scales: NomogramScales) -> str:
    if r.kind == "points":
        return SCORE_AXIS
    if r.kind == "total":
        return SUM_AXIS
    if r.kind == "survival":
        u = unit_singular(scales.time_unit)
        if scales.risk_of:  # the event is named in the panel title; the rows stay short
            return f"{format_number(r.horizon)}-{u} risk" if u else f"Risk by {format_number(r.horizon)}"
        return f"{format_number(r.horizon)}-{u} survival" if u else f"Survival at {format_number(r.horizon)}"
    if r.kind == "median":
        return f"Median survival ({scales.time_unit})" if scales.time_unit else "Median survival"
    t = r.term
    if r.piece > 0:
        return ""
    unit = "SD" if t.kind == "signature" else t.unit
    return f"{t.label} ({unit})" if unit else t.label


def _wrap(text: str) -> str:
    return "\n".join(textwrap.wrap(text, _LABEL_CHARS)) or text


NAME_GAP = 2.5
"""Row names end this many x units left of the axes' start (the painter's ``-2.5``)."""


def _geometry(panel_width_pt: float, fs: float, right_pt: float, label_pt: float) -> _Geometry:
    """Units so that 0-100 spans the axes and the row names (``label_pt`` wide, right-aligned
    ``NAME_GAP`` units left of 0) plus the right margin fit the panel."""
    frac_l, frac_r = label_pt / panel_width_pt, right_pt / panel_width_pt
    span = (100.0 + NAME_GAP) / max(1.0 - frac_l - frac_r, 0.3)
    return _Geometry(left=frac_l * span + NAME_GAP, right=frac_r * span, units_per_pt=span / panel_width_pt, fs=fs)


def _label_width(items, measure: _Measure, fs: float) -> float:
    texts = [SCORE_AXIS, SUM_AXIS, "Median survival (months)", "Imaging signature (SD)"]
    for s in items:
        texts += [_row_label(_Row("term", 1.0, t), s) for t in s.terms]
        texts += [_row_label(_Row("survival", 1.0, horizon=h), s) for h in s.horizons]
    return max(measure.width(_wrap(t), fs) for t in texts) + 6.0


def _panel_notes(sc: NomogramScales, pp: PatientPoints | None, extra: list[str], interval=None) -> list[str]:
    out = []
    if sc.risk_of:
        out.append(f"Risk axes: the chance that {sc.risk_of} has occurred by each horizon, with other events "
                   "competing (cumulative incidence), not the chance of being alive.")
    sig = next((t for t in sc.terms if t.kind == "signature"), None)
    if sig is not None and sig.sd_scale is not None:
        groups = ", ".join(b.label for b in sig.bands)
        out.append(
            f"Imaging signature: weighted sum of the selected harmonised, standardised features, shown in SDs "
            f"of the training patients' scores (0 = their mean). Bands ({groups}): thirds of the training "
            f"patients by signature alone, not by the whole model. Grey strips: training patients "
            f"(5th-95th, 25th-75th percentile, median)."
        )
    else:
        out.append("Grey strips under each axis: training patients (5th-95th, 25th-75th percentile, median; "
                   "for categories the share at each level).")
    if pp is not None:
        for name in pp.outside:
            t = sc.term(name)
            lo, hi = t.training_range
            v = pp.values[name]
            unit = " SD" if t.kind == "signature" else (f" {t.unit}" if t.unit else "")
            out.append(
                f"! {t.label} {format_number(t.display_value(v), 3)}{unit} lies outside the training patients' "
                f"1st-99th percentiles ({format_number(t.display_value(lo), 3)} to "
                f"{format_number(t.display_value(hi), 3)}{unit}): the reading is an extrapolation."
            )
        if interval:
            parts = [f"{format_number(h)} {unit_for(h, sc.time_unit)}".rstrip() + f" {lo:.2f} to {hi:.2f}"
                     for h, (lo, hi) in sorted(interval.items())]
            what = f"risk of {sc.risk_of}" if sc.risk_of else "survival"
            out.append(f"Shaded bars on the {what} axes: 95% interval of this patient's predicted {what} "
                       f"({'; '.join(parts)}).")
        out += [f"! {n}" for n in extra]
    return out


def _add_notes(rows: list[_Row], notes: list[str], geo: _Geometry, measure: _Measure) -> None:
    """Append note rows, wrapped to the panel's width, after the last axis."""
    limit = (100.0 + geo.left + geo.right) / geo.units_per_pt * 0.98
    y = rows[-1].top - rows[-1].height
    first = True
    for note in notes:
        lines: list[str] = []
        for w in note.split(" "):
            if lines and measure.width(f"{lines[-1]} {w}", geo.tick_fs) <= limit:
                lines[-1] = f"{lines[-1]} {w}"
            else:
                lines.append(w)
        for k, line in enumerate(lines):
            h = 0.62 + (0.35 if first else 0.0) + (0.12 if k == 0 and not first else 0.0)
            text = line if k == 0 or not note.startswith("!") else f"  {line}"
            rows.append(_Row("note", h, top=y, line=y - h + 0.31, text=text))
            y -= h
            first = False
