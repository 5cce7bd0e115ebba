"""Painting one nomogram panel: :class:`_Painter`.

Everything drawn inside a panel whose x axis runs in points (0-100): axis lines and
tick marks (collected into one line collection per colour), thinned scale labels,
categorical level labels in lanes, the grey training-patient strip under each axis,
spline pieces with their value ranges, detection-limit stubs, the signature's risk-group
bands, the total-points, survival and median-survival axes with the median's open
end, notes, and the patient overlay with its read-offs and survival intervals.
Where each row goes is decided in :mod:`workbench.figures.nomogram_layout`; the page
of panels is assembled by :func:`workbench.figures.nomogram.plot_nomogram`.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass

import numpy as np
from matplotlib.collections import LineCollection
from matplotlib.patches import Rectangle

from workbench.figures.measure import TextMeasure as _Measure
from workbench.figures.nomogram_layout import (
    _Geometry,
    _label_centres,
    _level_groups,
    _roundness_order,
    _Row,
    _term_lanes,
    _thin,
    _uniform_keep,
    _wrap,
)
from workbench.figures.nomogram_points import NomogramScales, PatientPoints, TermScale
from workbench.figures.style import INK, NEUTRAL, PALETTE
from workbench.figures.ticks import format_number

PATIENT_COLOUR = PALETTE[3]
PATIENT_COLUMN = 0.2  # where the patient's numbers start, as a share of the right margin
# tick labels sit this far (in rows) above the axis line, and below it past the grey training
# strip's median mark: a patient's marker (3.6 pt) or that mark must not touch a label's digits
LABEL_ABOVE, LABEL_BELOW = 0.17, 0.2


_BAND_ALPHAS = (0.10, 0.25, 0.42, 0.60)


class _Painter:
    """Draws one nomogram panel into an Axes whose x runs in points (0-100)."""

    def __init__(self, ax, scales: NomogramScales, geo: _Geometry, measure: _Measure):
        self.ax, self.s, self.geo, self.m = ax, scales, geo, measure
        self.right_limit = 100.0 + geo.right  # labels may use the right margin unless a patient column is there
        self._ticks: dict[str, list] = {}  # colour -> tick segments, drawn as one collection (finish)
        self._labels: list = []  # (Text, centre x, half width) of every tick label, for the patient's line

    def total_x(self, total):
        return np.asarray(total, dtype=float) * 100.0 / self.s.total_axis_max

    def line(self, x0, x1, y):
        self.ax.plot([x0, x1], [y, y], color=INK, lw=0.8, solid_capstyle="butt", clip_on=False)

    def _tick(self, x, y, up=True, length=0.13, colour=INK):
        self._ticks.setdefault(colour, []).append([(x, y), (x, y + (length if up else -length))])

    def finish(self):
        """Every tick mark of the panel as one line collection per colour (hundreds of single
        lines drew several times slower)."""
        for colour, segs in self._ticks.items():
            self.ax.add_collection(LineCollection(segs, colors=colour, linewidths=0.6, capstyle="butt",
                                                  clip_on=False, gid="ticks", zorder=2), autolim=False)
        self._ticks = {}

    def _text(self, x, y, text, up=True, size=None, colour=INK, **kw):
        fs = size or self.geo.tick_fs
        t = self.ax.text(x, y, text, ha=kw.pop("ha", "center"), va="bottom" if up else "top",
                         fontsize=fs, color=colour, clip_on=False, **kw)
        self._labels.append((t, float(x), self.m.width(str(text), fs) * self.geo.units_per_pt / 2))

    def scale_ticks(self, xs, labels, y, order=None):
        """A scale: every tick marked; labels thinned (uniformly, or by preference) so none overlap."""
        xs = np.asarray(xs, dtype=float)
        widths = [self.m.width(lab, self.geo.tick_fs) for lab in labels]
        keep = _uniform_keep(xs, widths, self.geo) if order is None else _thin(xs, widths, self.geo, order)
        # a label may not reach into the row names on the left or the patient column on the right:
        # at the ends it slides inwards while it still sits over its tick, otherwise it is left out
        half = np.asarray(widths) * self.geo.units_per_pt / 2
        # clear of the row names (right-aligned at -2.5) by a quarter of the tick font: a two-line
        # name's first line sits at the height of the labels
        left = -2.5 + 0.25 * self.geo.tick_fs * self.geo.units_per_pt
        cx = np.minimum(np.maximum(xs, left + half), self.right_limit - half)
        gap = 0.35 * self.geo.tick_fs * self.geo.units_per_pt
        keep = keep & (np.abs(cx - xs) <= 0.6 * half)
        shown = np.flatnonzero(keep)
        for a, b in zip(shown[:-1], shown[1:], strict=True):  # a slid label must still clear its neighbour
            if abs(cx[b] - cx[a]) < half[a] + half[b] + gap:
                keep[a if cx[a] != xs[a] else b] = False
        for x, c, lab, k in zip(xs, cx, labels, keep, strict=True):
            self._tick(x, y, length=0.13 if k else 0.08)
            if k:
                self._text(c, y + LABEL_ABOVE, lab)

    def level_ticks(self, xs, labels, y, lanes):
        centres = _label_centres(xs, [self.m.width(lab, self.geo.tick_fs) for lab in labels], self.geo)
        for x, cx, lab, lane in zip(xs, centres, labels, lanes, strict=True):
            if lane < 0:
                self._tick(x, y, length=0.08)
                continue
            up = lane in (0, 2)
            self._tick(x, y, up=up)
            far = lane >= 2
            ty = (y + LABEL_ABOVE + 0.34 * far) if up else (y - LABEL_BELOW - 0.34 * far)
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
            self._text(cx, (y + LABEL_ABOVE) if up else (y - LABEL_BELOW), text, up=up)

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
                # the name, its abbreviation or its initial, whichever fits inside the band; a band
                # too narrow for any stays unlabelled (its neighbours and the caption name it)
                fits = [w for w in (b.label, b.label[:3] + ".", b.label[0])
                        if self.m.width(w, self.geo.tick_fs) <= 0.95 * room]
                if fits:
                    self.ax.text((x0 + x1) / 2, top - h / 2, fits[0], ha="center", va="center",
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
        follow-up: "> 35" under an arrow just left of the longest median shown.

        The words go below the line, not on it: a patient whose median lies beyond the axis is
        marked on the line there, and the mark covered the words."""
        if not ticks:
            return
        k = max(ticks, key=lambda t: t.value)
        x = float(self.total_x([k.points])[0])
        text = f"> {k.label}"
        w = self.m.width(text, self.geo.tick_fs) * self.geo.units_per_pt
        if x - 0.6 - w < -2.2:
            return  # no room before the row name: the axis simply starts there
        self.ax.plot([x - 1.2], [y], marker="<", ms=2.6, color=INK, clip_on=False, gid="open_end")
        self.ax.text(x - 0.6, y - LABEL_BELOW, text, ha="right", va="top", fontsize=self.geo.tick_fs,
                     color=NEUTRAL, clip_on=False)

    # ---------------------------------------------------------------- patient

    def intervals(self, interval: Mapping, rows: list[_Row]):
        """The read-off's 95% interval as a bar along each survival axis (from ``lower`` to ``upper``)."""
        for r in rows:
            if r.kind != "survival" or r.horizon not in interval:
                continue
            lo, hi = interval[r.horizon]
            tot = self.s.survival_scale(r.horizon).total_points_for([hi, lo])  # higher survival, fewer points
            xs = np.clip(self.total_x(tot), 0.0, 100.0)
            self.ax.plot(xs, [r.line, r.line], color=PATIENT_COLOUR, lw=3.2, alpha=0.35, solid_capstyle="butt",
                         clip_on=False, gid=f"interval:{r.horizon:g}")

    def patient(self, pp: PatientPoints, rows: list[_Row]):
        ax, c, fs = self.ax, PATIENT_COLOUR, self.geo.tick_fs
        xr = 100 + PATIENT_COLUMN * self.geo.right
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
        ax.plot([shown, shown], [max(ys), min(ys)], color=c, lw=0.8, ls=(0, (3, 2)), clip_on=False, gid="reading_line")
        self._clear_labels_on_line(shown, min(ys), max(ys))
        for r in rows:
            if r.kind not in ("total", "survival", "median"):
                continue
            ax.plot([shown], [r.line], marker="o" if shown == x_tot else ">", ms=3.6, color=c, zorder=5,
                    linestyle="none", clip_on=False)
            if r.kind == "total":
                text = format_number(round(pp.total, 1), 4)
            elif r.kind == "survival":
                text = f"{self.s.read_off(pp.survival[r.horizon]):.2f}"
            else:
                m = pp.median_survival
                longest = max((k.value for k in self.s.median.ticks), default=None) if self.s.median else None
                if m is not None and np.isfinite(m):
                    text = format_number(m, 3)
                else:  # beyond the follow-up: give the open end of the axis, not a long phrase
                    text = f"> {format_number(longest, 3)}" if longest is not None else "> end"
            ax.text(xr, r.line, text, ha="left", va="center", fontsize=fs, color=c,
                    fontweight="bold" if r.kind != "median" else "normal", clip_on=False)

    def _clear_labels_on_line(self, x: float, y_low: float, y_high: float) -> None:
        """The reading line runs down through the tick labels of the sum and survival axes: a label
        it crosses gets a white ground (drawn above the line, under the patient's marks), so a
        "0.6" is not read struck through."""
        for t, cx, half in self._labels:
            y = t.get_position()[1]
            if y_low - 0.5 <= y <= y_high + 0.5 and abs(cx - x) <= half + 0.5:
                t.set_bbox({"facecolor": "white", "edgecolor": "none", "pad": 0.4})
                t.set_zorder(4)

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
