"""Draw nomograms from :class:`~workbench.figures.nomogram_points.NomogramScales`.

Design (explained for readers in ``docs/figures.md``):

* a Points ruler (0-100) on top; one row per term below it, drawn on the same
  horizontal scale, so a value is read off its row and carried straight up to
  the ruler;
* categorical terms are labelled ticks; labels that would collide are moved to
  alternate lanes above and below the line;
* a value below a detection limit has its own tick on a short stub under the
  continuous scale of the term, because it is a separate estimate;
* a spline whose effect changes direction is split into monotone pieces drawn
  as parallel lines, one under the other, each labelled with its value range
  (no folded or doubled-back axis to puzzle over);
* the imaging signature is drawn in signature units with its training risk
  groups (e.g. tertiles) as shaded bands underneath;
* the Total points axis and one survival-probability axis per horizon share a
  second horizontal scale (total points), optionally with a median-survival axis;
* side by side (or stacked) models get the same number of rows before the total
  points axis, so the total-points and probability axes line up across panels;
* a patient overlay marks each value with its points (right-hand column), the
  total, and the survival read off each axis.

No pyplot: a ``matplotlib.figure.Figure`` is built directly.
"""

from __future__ import annotations

import textwrap
from collections.abc import Mapping, Sequence
from dataclasses import dataclass

import numpy as np
from matplotlib.figure import Figure
from matplotlib.patches import Rectangle

from workbench.cohort.summary import CAUTION
from workbench.errors import SpecError
from workbench.figures.measure import TextMeasure as _Measure
from workbench.figures.nomogram_points import (
    SIGNATURE_TERM,
    NomogramScales,
    PatientPoints,
    TermScale,
    points_for_patient,
)
from workbench.figures.style import (
    INK,
    NEUTRAL,
    PALETTE,
    base_font_size,
    column_width_inches,
    small_print_size,
    style_context,
)
from workbench.figures.ticks import format_number

PATIENT_COLOUR = PALETTE[3]
ROW_INCHES = 0.25
SCORE_AXIS = "Factor score"
"""Name of the top ruler (each factor's contribution, 0-100 for the widest factor)."""
SUM_AXIS = "Sum of scores"
"""Name of the ruler the factor scores are added on."""
_LABEL_CHARS = 18
_CHAR_WIDTH = 0.56  # average glyph width in units of the font size (sans-serif, common practice)
_BAND_ALPHAS = (0.10, 0.25, 0.42, 0.60)


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


def _unit_singular(unit: str) -> str:
    return unit[:-1] if unit.endswith("s") else unit


def _row_label(r: _Row, scales: NomogramScales) -> str:
    if r.kind == "points":
        return SCORE_AXIS
    if r.kind == "total":
        return SUM_AXIS
    if r.kind == "survival":
        u = _unit_singular(scales.time_unit)
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


class _Painter:
    """Draws one nomogram panel into an Axes whose x runs in points (0-100)."""

    def __init__(self, ax, scales: NomogramScales, geo: _Geometry, measure: _Measure):
        self.ax, self.s, self.geo, self.m = ax, scales, geo, measure

    def total_x(self, total):
        return np.asarray(total, dtype=float) * 100.0 / self.s.total_axis_max

    def line(self, x0, x1, y):
        self.ax.plot([x0, x1], [y, y], color=INK, lw=0.8, solid_capstyle="butt", clip_on=False)

    def _tick(self, x, y, up=True, length=0.13, colour=INK):
        self.ax.plot([x, x], [y, y + (length if up else -length)], color=colour, lw=0.6, clip_on=False)

    def _text(self, x, y, text, up=True, size=None, colour=INK, **kw):
        self.ax.text(x, y, text, ha=kw.pop("ha", "center"), va="bottom" if up else "top",
                     fontsize=size or self.geo.tick_fs, color=colour, clip_on=False, **kw)

    def scale_ticks(self, xs, labels, y, order=None):
        """A scale: every tick marked; labels thinned (uniformly, or by preference) so none overlap."""
        xs = np.asarray(xs, dtype=float)
        widths = [self.m.width(lab, self.geo.tick_fs) for lab in labels]
        keep = _uniform_keep(xs, widths, self.geo) if order is None else _thin(xs, widths, self.geo, order)
        # a label may not reach into the row names on the left or the patient column on the right
        half = np.asarray(widths) * self.geo.units_per_pt / 2
        keep = keep & (xs - half >= -2.2) & (xs + half <= 102.2)
        for x, lab, k in zip(xs, labels, keep, strict=True):
            self._tick(x, y, length=0.13 if k else 0.08)
            if k:
                self._text(x, y + 0.17, lab)

    def level_ticks(self, xs, labels, y, lanes):
        centres = _label_centres(xs, [self.m.width(lab, self.geo.tick_fs) for lab in labels], self.geo)
        for x, cx, lab, lane in zip(xs, centres, labels, lanes, strict=True):
            if lane < 0:
                self._tick(x, y, length=0.08)
                continue
            up = lane in (0, 2)
            self._tick(x, y, up=up)
            far = lane >= 2
            ty = (y + 0.17 + 0.34 * far) if up else (y - 0.17 - 0.34 * far)
            if far:
                self.ax.plot([x, x], [y + (0.13 if up else -0.13), ty + (-0.03 if up else 0.03)],
                             color=NEUTRAL, lw=0.4, clip_on=False)
            self._text(cx, ty, lab, up=up)

    def level_labels(self, xs, groups, y):
        """Every level's tick on both sides of the line; one label per group of levels."""
        for x in xs:
            self._tick(x, y, up=True, length=0.11)
            self._tick(x, y, up=False, length=0.11)
        for cx, text, lane in groups:
            up = lane == 0
            self._text(cx, (y + 0.17) if up else (y - 0.17), text, up=up)

    def training_strip(self, t: TermScale, y: float):
        """Where the training patients lie, just under the axis line: for continuous and
        signature axes the 5th-95th (thin) and 25th-75th (thick) percentiles with the median;
        for categorical axes a bar under each level, its height the level's share."""
        if t.level_shares:
            for k, share in zip(t.ticks, t.level_shares, strict=True):
                h = 0.12 * share / max(t.level_shares)
                self.ax.add_patch(Rectangle((k.points - 0.9, y - 0.03 - h), 1.8, h, facecolor=NEUTRAL, alpha=0.75,
                                            linewidth=0, clip_on=False, gid=f"share:{t.name}:{k.label}"))
            return
        q = dict(t.spread)
        if not all(k in q for k in (5.0, 25.0, 50.0, 75.0, 95.0)):
            return
        x5, x25, x50, x75, x95 = (float(t.points([q[k]])[0]) for k in (5.0, 25.0, 50.0, 75.0, 95.0))
        yy = y - 0.075
        self.ax.plot([x5, x95], [yy, yy], color=NEUTRAL, lw=0.6, alpha=0.8, solid_capstyle="butt",
                     clip_on=False, gid=f"spread:{t.name}")
        self.ax.plot([x25, x75], [yy, yy], color=NEUTRAL, lw=2.4, alpha=0.6, solid_capstyle="butt",
                     clip_on=False)
        self.ax.plot([x50], [yy], marker="|", ms=3.0, color=INK, mew=0.8, clip_on=False)

    def notes(self, rows: list[_Row]):
        for r in rows:
            if r.kind == "note":
                self.ax.text(-self.geo.left, r.line, r.text, ha="left", va="center", fontsize=self.geo.tick_fs,
                             color=PATIENT_COLOUR if r.text.startswith("!") else NEUTRAL, clip_on=False)

    def label(self, text: str, y: float, lift: float = 0.0):
        if text:
            self.ax.text(-2.5, y + lift, _wrap(text), ha="right", va="center", fontsize=self.geo.fs, color=INK,
                         clip_on=False, linespacing=1.0)

    # ---------------------------------------------------------------- rows

    def points_row(self, y):
        self.line(0, 100, y)
        for x in np.arange(0, 101, 5):
            self._tick(x, y, length=0.08)
        vals = list(range(0, 101, 10))
        self.scale_ticks(vals, [str(v) for v in vals], y)

    def term_row(self, r: _Row):
        t, y = r.term, r.line
        seg = t.segments[r.piece]
        self.line(seg.start_points, seg.end_points, y)
        xs = [k.points for k in seg.ticks]
        labels = [k.label for k in seg.ticks]
        if t.kind == "signature" or len(t.segments) > 1:
            self.scale_ticks(xs, labels, y)
        elif t.kind in ("categorical", "ordinal"):
            self.level_labels(xs, _level_groups(seg, self.geo, self.m), y)
        else:
            self.level_ticks(np.asarray(xs), labels, y, _term_lanes(t, seg, self.geo, self.m))
        if len(t.segments) > 1:
            lo, hi = seg.value_range
            unit = f" {t.unit}" if t.unit else ""
            note = f"{format_number(lo, 3)} to {format_number(hi, 3)}{unit}"
            yy = y if r.piece > 0 else y - 0.38
            self.ax.text(-2.5, yy, note, ha="right", va="center", fontsize=self.geo.tick_fs, color=NEUTRAL,
                         clip_on=False)
        if len(t.segments) == 1:
            self.training_strip(t, y)
        if t.extra_ticks:
            ys = y - 0.55
            for k in t.extra_ticks:
                self.ax.plot([k.points - 1.0, k.points + 1.0], [ys, ys], color=INK, lw=0.8, clip_on=False)
                self._tick(k.points, ys, up=False)
                self._text(k.points, ys - 0.16, k.label, up=False)
        if t.bands:
            top, h = y - 0.22, 0.42
            for i, b in enumerate(t.bands):
                x0, x1 = sorted((b.lo_points, b.hi_points))
                self.ax.add_patch(Rectangle((x0, top - h), x1 - x0, h, facecolor=PALETTE[0],
                                            alpha=_BAND_ALPHAS[min(i, len(_BAND_ALPHAS) - 1)],
                                            edgecolor="white", linewidth=0.6, clip_on=False))
                room = (x1 - x0) / self.geo.units_per_pt
                label = b.label
                if self.m.width(label, self.geo.tick_fs) > 0.95 * room:
                    label = label[:3] + "."
                self.ax.text((x0 + x1) / 2, top - h / 2, label, ha="center", va="center",
                             fontsize=self.geo.tick_fs, color=INK, clip_on=False)
            self.ax.text(-2.5, top - h / 2, "risk group", ha="right", va="center",
                         fontsize=self.geo.tick_fs, color=NEUTRAL, clip_on=False)

    def total_row(self, y):
        ticks = self.s.total_ticks
        self.line(0, 100, y)
        self.scale_ticks(self.total_x([k.points for k in ticks]), [k.label for k in ticks], y)

    def prob_row(self, ticks, y, roundness=True):
        if not ticks:
            return
        xs = self.total_x([k.points for k in ticks])
        self.line(xs.min(), xs.max(), y)
        order = _roundness_order([k.value for k in ticks]) if roundness else list(range(len(ticks)))
        self.scale_ticks(xs, [k.label for k in ticks], y, order)

    def open_end(self, ticks, y):
        """Mark where the median axis stops because longer medians are not estimable from the
        follow-up: "> 35" just left of the longest median shown."""
        if not ticks:
            return
        k = max(ticks, key=lambda t: t.value)
        x = float(self.total_x([k.points])[0])
        text = f"> {k.label}"
        w = self.m.width(text, self.geo.tick_fs) * self.geo.units_per_pt
        if x - 1.5 - w < -2.2:
            return  # no room before the row name: the axis simply starts there
        self.ax.plot([x - 1.2], [y], marker="<", ms=2.6, color=INK, clip_on=False, gid="open_end")
        self.ax.text(x - 2.2, y, text, ha="right", va="center", fontsize=self.geo.tick_fs, color=NEUTRAL,
                     clip_on=False)

    # ---------------------------------------------------------------- patient

    def patient(self, pp: PatientPoints, rows: list[_Row]):
        ax, c, fs = self.ax, PATIENT_COLOUR, self.geo.tick_fs
        xr = 100 + 0.16 * self.geo.right
        ax.text(xr, rows[0].line, "patient", ha="left", va="center", fontsize=fs, color=c, clip_on=False,
                fontweight="bold")
        done = set()
        for r in rows:
            if r.kind != "term" or r.term.name in done:
                continue
            t = r.term
            p = pp.points[t.name]
            y_mark, seg = self._patient_place(t, pp.values[t.name], rows)
            lo, hi = sorted((seg.start_points, seg.end_points))
            inside = lo - 1e-6 <= p <= hi + 1e-6 or seg is None
            marker = "o" if inside else (">" if p > hi else "<")
            ax.plot([p if inside else float(np.clip(p, lo, hi))], [y_mark], marker=marker, ms=3.6, color=c,
                    clip_on=False, zorder=5, linestyle="none")
            flag = t.name in pp.outside
            ax.text(xr, r.line, format_number(round(p, 1), 3) + (" !" if flag else ""), ha="left",
                    va="center", fontsize=fs, color=c, clip_on=False, fontweight="bold" if flag else "normal")
            done.add(t.name)
        x_tot = float(self.total_x(pp.total))
        shown = float(np.clip(x_tot, 0, 100))
        ys = [r.line for r in rows if r.kind in ("total", "survival", "median")]
        ax.plot([shown, shown], [max(ys), min(ys)], color=c, lw=0.8, ls=(0, (3, 2)), clip_on=False)
        for r in rows:
            if r.kind not in ("total", "survival", "median"):
                continue
            ax.plot([shown], [r.line], marker="o" if shown == x_tot else ">", ms=3.6, color=c, zorder=5,
                    linestyle="none", clip_on=False)
            if r.kind == "total":
                text = format_number(round(pp.total, 1), 4)
            elif r.kind == "survival":
                text = f"{pp.survival[r.horizon]:.2f}"
            else:
                m = pp.median_survival
                longest = max((k.value for k in self.s.median.ticks), default=None) if self.s.median else None
                if m is not None and np.isfinite(m):
                    text = format_number(m, 3)
                else:  # beyond the follow-up: give the open end of the axis, not a long phrase
                    text = f"> {format_number(longest, 3)}" if longest is not None else "> end"
            ax.text(xr, r.line, text, ha="left", va="center", fontsize=fs, color=c,
                    fontweight="bold" if r.kind != "median" else "normal", clip_on=False)

    def _patient_place(self, t: TermScale, value, rows):
        mine = [r for r in rows if r.kind == "term" and r.term is t]
        if t.extra_ticks and isinstance(value, str) and value.strip().startswith("<"):
            k = t.extra_ticks[0]
            return mine[0].line - 0.55, _Span(k.points, k.points)
        if len(t.segments) > 1:
            v = float(value)
            for r in mine:
                lo, hi = t.segments[r.piece].value_range
                if lo <= v <= hi:
                    return r.line, t.segments[r.piece]
            r = mine[0] if v < t.segments[0].value_range[0] else mine[-1]
            return r.line, t.segments[r.piece]
        seg = t.segments[0]
        if t.kind in ("categorical", "ordinal"):
            return mine[0].line, _Span(min(seg.start_points, seg.end_points), max(seg.start_points, seg.end_points))
        return mine[0].line, seg


@dataclass(frozen=True)
class _Span:
    start_points: float
    end_points: float


def _geometry(panel_width_pt: float, fs: float, right_pt: float, label_pt: float) -> _Geometry:
    frac_l, frac_r = label_pt / panel_width_pt, right_pt / panel_width_pt
    span = 100.0 / max(1.0 - frac_l - frac_r, 0.3)
    return _Geometry(left=frac_l * span, right=frac_r * span, units_per_pt=span / panel_width_pt, fs=fs)


def _label_width(items, measure: _Measure, fs: float) -> float:
    texts = [SCORE_AXIS, SUM_AXIS, "Median survival (months)", "Imaging signature (SD)"]
    for s in items:
        texts += [_row_label(_Row("term", 1.0, t), s) for t in s.terms]
        texts += [_row_label(_Row("survival", 1.0, horizon=h), s) for h in s.horizons]
    return max(measure.width(_wrap(t), fs) for t in texts) + 6.0


def _draw_panel(ax, scales: NomogramScales, rows: list[_Row], geo: _Geometry, measure: _Measure,
                title: str, patient: PatientPoints | None) -> None:
    ax.set_xlim(-geo.left, 100 + geo.right)
    ax.set_ylim(rows[-1].top - rows[-1].height, 0.3)
    ax.set_axis_off()
    painter = _Painter(ax, scales, geo, measure)
    for r in rows:
        if r.kind in ("pad", "note"):
            continue
        lift = 0.3 if r.kind == "term" and r.term.bands and "\n" in _wrap(_row_label(r, scales)) else 0.0
        painter.label(_row_label(r, scales), r.line, lift)
        if r.kind == "points":
            painter.points_row(r.line)
        elif r.kind == "term":
            painter.term_row(r)
        elif r.kind == "total":
            painter.total_row(r.line)
        elif r.kind == "survival":
            painter.prob_row(scales.survival_scale(r.horizon).ticks, r.line)
        elif r.kind == "median":
            painter.prob_row(scales.median.ticks, r.line, roundness=False)
            painter.open_end(scales.median.ticks, r.line)
    # a faint rule separates the term block from the total-points block
    y_sep = next(r.top for r in rows if r.kind == "total") + 0.02
    ax.plot([-geo.left, 100], [y_sep, y_sep], color=NEUTRAL, lw=0.4, alpha=0.5, clip_on=False)
    ax.text(-geo.left, 0.3, title, ha="left", va="bottom", fontsize=geo.fs + 0.5, fontweight="bold",
            clip_on=False)
    painter.notes(rows)
    if patient is not None:
        painter.patient(patient, rows)


def _panel_notes(sc: NomogramScales, pp: PatientPoints | None, extra: list[str]) -> list[str]:
    out = []
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


def _as_list(scales) -> list[NomogramScales]:
    if isinstance(scales, NomogramScales):
        return [scales]
    out = list(scales)
    if not out or not all(isinstance(s, NomogramScales) for s in out):
        raise SpecError("plot_nomogram needs NomogramScales (from nomogram_scales) or a list of them.")
    return out


def _patients(patient, scales: list[NomogramScales]) -> list[PatientPoints | None]:
    if patient is None:
        return [None] * len(scales)
    if isinstance(patient, Mapping):
        patient = [patient] * len(scales)
    patient = list(patient)
    if len(patient) != len(scales):
        raise SpecError(f"give one patient (or one per model); got {len(patient)} for {len(scales)} models.")
    out = []
    for p, s in zip(patient, scales, strict=True):
        if p is None or isinstance(p, PatientPoints):
            out.append(p)
            continue
        if any(t.name == SIGNATURE_TERM for t in s.terms) and SIGNATURE_TERM not in p:
            raise SpecError(
                f"the patient overlay on {s.model!r} needs the patient's imaging-signature score under the "
                f"key {SIGNATURE_TERM!r} (model.signature_score(patient_cohort))."
            )
        out.append(points_for_patient(s, p))
    return out


def plot_nomogram(
    scales: NomogramScales | Sequence[NomogramScales],
    *,
    patient: Mapping | Sequence | None = None,
    titles: Sequence[str] | None = None,
    layout: str = "columns",
    width: str | float = "double",
    caution: str = CAUTION,
    ax=None,
    notes: Sequence[str] | None = None,
):
    """Draw one or more nomograms on a common page layout.

    Parameters
    ----------
    scales : NomogramScales or sequence of them
        From :func:`~workbench.figures.nomogram_points.nomogram_scales`, e.g.
        the clinical-only and the clinical + imaging models.
    patient : mapping, sequence of mappings or PatientPoints, optional
        Raw values of one patient (column names as keys, the signature score
        under ``"imaging_signature"``) to overlay on every panel.
    titles : sequence of str, optional
        Panel titles (default: each model's name).
    layout : {"columns", "rows"}
        Models side by side or stacked; rows before the total-points axis are
        padded so total-points and survival axes line up across panels.
    width : "single", "double" or millimetres
    caution : str
        Footer small print (default: the workbench's research-use caution).
    ax : matplotlib Axes, optional
        Draw a single nomogram into this Axes and return it.
    notes : sequence of str, optional
        Warnings about the patient that the scales cannot know, printed under each panel
        with a "!" (e.g. "scanner_D was not in the training network: its features were
        not harmonised"). Values outside the training range are flagged automatically.

    Notes
    -----
    Under each axis a grey strip shows where the training patients lie (5th-95th and
    25th-75th percentiles, median; for categories the share at each level). The imaging
    signature axis is in SDs of the training patients' scores and its bands are thirds
    of the training patients by signature alone; a note under the panel says so.

    Returns
    -------
    matplotlib.figure.Figure, or the Axes when ``ax`` is given.
    """
    items = _as_list(scales)
    pats = _patients(patient, items)
    if layout not in ("columns", "rows"):
        raise SpecError(f"layout {layout!r} is not known; use 'columns' (side by side) or 'rows' (stacked).")
    titles = list(titles) if titles is not None else [s.model for s in items]
    if len(titles) != len(items):
        raise SpecError(f"{len(titles)} titles for {len(items)} nomograms; give one per model.")
    fs = base_font_size(width)
    right_pt = 36.0 if any(p is not None for p in pats) else 4.0
    with style_context(width):
        measure = _Measure()
        label_pt = _label_width(items, measure, fs)
        if ax is not None:
            if len(items) != 1:
                raise SpecError("an Axes can hold one nomogram; leave ax out to draw several side by side.")
            bbox = ax.get_position()
            geo = _geometry(bbox.width * ax.figure.get_figwidth() * 72.0, fs, right_pt, label_pt)
            rows = _layout(items[0], _term_block(items[0], geo, measure), geo, measure)
            _add_notes(rows, _panel_notes(items[0], pats[0], list(notes or ())), geo, measure)
            _draw_panel(ax, items[0], rows, geo, measure, titles[0], pats[0])
            return ax
        w = column_width_inches(width)
        n = len(items)
        frac_w = (1.0 / n - 0.02) if layout == "columns" else 0.98
        geo = _geometry(frac_w * w * 72.0, fs, right_pt, label_pt)
        # side by side, pad the shorter term block so total-points and survival axes line up
        block = max(_term_block(s, geo, measure) for s in items) if layout == "columns" else 0.0
        layouts = [_layout(s, block, geo, measure) for s in items]
        extra = list(notes) if notes else []
        for sc, rows, pp in zip(items, layouts, pats, strict=True):
            _add_notes(rows, _panel_notes(sc, pp, extra), geo, measure)
        heights = [(sum(r.height for r in rows) + 0.3) * ROW_INCHES for rows in layouts]
        head, foot = 0.22, 0.3
        if layout == "columns":
            h = max(heights) + head + foot
        else:
            h = sum(heights) + n * head + foot
        fig = Figure(figsize=(w, h))
        top = h
        for i, (s, rows, title, pp) in enumerate(zip(items, layouts, titles, pats, strict=True)):
            if layout == "columns":
                rect = (i / n + 0.01, (h - head - heights[i]) / h, frac_w, heights[i] / h)
            else:
                top -= head + heights[i]
                rect = (0.01, top / h, frac_w, heights[i] / h)
            _draw_panel(fig.add_axes(rect), s, rows, geo, measure, title, pp)
        if caution:
            fig.text(0.01, 0.1 * foot / h, caution, ha="left", va="bottom", fontsize=small_print_size(width),
                     color=NEUTRAL, wrap=True)
        return fig
