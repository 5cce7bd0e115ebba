"""Is a drawn figure readable? Text collisions, clipping and squeezed panels, from the renderer.

A figure is drawn with the Agg renderer and every piece of text that is actually
drawn (titles, labels, tick labels inside the view, legend entries, annotations)
is measured with ``get_window_extent``. :func:`legibility_problems` lists

* two texts whose boxes overlap (tick labels running together, labels on top of
  each other);
* a text that reaches outside the figure (clipped on export);
* a data panel narrower or lower than a few millimetres (a panel squeezed to
  nothing by its neighbours);
* a legend drawn over the data points of its own panel;
* a marker (a point drawn on its own, such as a patient's value on a nomogram axis)
  drawn over a text.

The width test renders every standard figure at 85 mm and 175 mm and asserts
that the list is empty; ``docs/render_demo_figures.py`` prints it for a quick look.
"""

from __future__ import annotations

import itertools

import numpy as np
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.lines import Line2D
from matplotlib.text import Annotation, Text

__all__ = ["legibility_problems", "drawn_texts"]

MM_PER_INCH = 25.4


def _drawn_ticks(axis) -> set[int]:
    """ids of the tick labels the axis really draws (ticks inside the view interval)."""
    lo, hi = sorted(axis.get_view_interval())
    span = hi - lo if np.isfinite(hi - lo) and hi > lo else 1.0
    out = set()
    for tick in (*axis.get_major_ticks(), *axis.get_minor_ticks()):
        loc = tick.get_loc()
        if loc is None or not (lo - 1e-9 * span <= loc <= hi + 1e-9 * span):
            continue
        for lab in (tick.label1, tick.label2):
            if lab.get_visible():
                out.add(id(lab))
    return out


def drawn_texts(fig) -> list[tuple[Text, object]]:
    """(Text, window extent) of every non-empty text the figure draws, after drawing it.

    Extents are in pixels at the figure's current dpi.
    """
    canvas = fig.canvas if isinstance(fig.canvas, FigureCanvasAgg) else FigureCanvasAgg(fig)
    canvas.draw()
    renderer = canvas.get_renderer()
    tick_labels, drawn = set(), set()
    for ax in fig.findobj(lambda a: hasattr(a, "xaxis") and hasattr(a, "yaxis")):
        if not ax.get_visible() or not ax.axison:
            for axis in (ax.xaxis, ax.yaxis):
                for tick in (*axis.get_major_ticks(), *axis.get_minor_ticks()):
                    tick_labels.update((id(tick.label1), id(tick.label2)))
            continue
        for axis in (ax.xaxis, ax.yaxis):
            for tick in (*axis.get_major_ticks(), *axis.get_minor_ticks()):
                tick_labels.update((id(tick.label1), id(tick.label2)))
            if axis.get_visible():
                drawn |= _drawn_ticks(axis)
    out = []
    for t in fig.findobj(Text):
        if not t.get_text().strip() or not t.get_visible():
            continue
        if id(t) in tick_labels and id(t) not in drawn:
            continue
        ax = t.axes
        if ax is not None and not ax.get_visible():
            continue
        bb = t.get_window_extent(renderer)
        if bb.width <= 0 or bb.height <= 0:
            continue
        out.append((t, bb))
    return out


def _name(t: Text) -> str:
    s = t.get_text().replace("\n", " / ")
    return repr(s if len(s) <= 40 else s[:37] + "...")


def legibility_problems(fig, *, tolerance_pt: float = 0.75, min_panel_mm: float = 12.0,
                        dpi: float = 300.0, marker_clearance_pt: float = 0.0) -> list[str]:
    """Everything that makes ``fig`` hard to read at its current size (empty list when none).

    Parameters
    ----------
    fig : matplotlib.figure.Figure
    tolerance_pt : float
        Overlaps and overhangs smaller than this (in points) are ignored: glyph
        boxes include some white space.
    min_panel_mm : float
        Smallest width and height of a panel that draws data.
    dpi : float
        Resolution to draw at: the export resolution, because hinted glyphs are not exactly
        proportional to it (a legend that fits at 100 dpi can overhang at 300).
    marker_clearance_pt : float
        White space a lone marker (a patient's value on a nomogram axis) must keep from every
        text, in points (0: the marker's box may not meet the text's box at all; a filled dot
        on a digit reads as part of it even where glyph boxes overlap by less than ``tolerance_pt``).
    """
    old_dpi = fig.dpi
    fig.set_dpi(dpi)
    try:
        return _problems(fig, tolerance_pt, min_panel_mm, marker_clearance_pt)
    finally:
        fig.set_dpi(old_dpi)


def _problems(fig, tolerance_pt: float, min_panel_mm: float, marker_clearance_pt: float) -> list[str]:
    texts = drawn_texts(fig)
    px_per_pt = fig.dpi / 72.0
    tol = tolerance_pt * px_per_pt
    problems = []
    fb = fig.bbox
    for t, bb in texts:
        if bb.x0 < fb.x0 - tol or bb.y0 < fb.y0 - tol or bb.x1 > fb.x1 + tol or bb.y1 > fb.y1 + tol:
            problems.append(f"clipped: {_name(t)} reaches outside the figure")
    for (t1, b1), (t2, b2) in itertools.combinations(texts, 2):
        w = min(b1.x1, b2.x1) - max(b1.x0, b2.x0)
        h = min(b1.y1, b2.y1) - max(b1.y0, b2.y0)
        if w > tol and h > tol:
            problems.append(f"overlap: {_name(t1)} and {_name(t2)}")
    px_per_mm = fig.dpi / MM_PER_INCH
    for ax in fig.axes:
        if not ax.get_visible() or not (ax.lines or ax.collections or ax.patches):
            continue
        bb = ax.get_window_extent()
        if bb.width < min_panel_mm * px_per_mm or bb.height < min_panel_mm * px_per_mm:
            problems.append(
                f"squeezed panel: {ax.get_title(loc='left') or ax.get_title() or ax.get_label() or 'an axes'} "
                f"is {bb.width / px_per_mm:.1f} x {bb.height / px_per_mm:.1f} mm"
            )
        leg = ax.get_legend()
        if leg is None or not leg.get_visible():
            continue
        lb = leg.get_window_extent().shrunk(0.98, 0.9)
        for line in ax.get_lines():
            if not line.get_visible() or line.get_gid() == "legend_ok" or not isinstance(line, Line2D):
                continue
            xy = np.column_stack([line.get_xdata(orig=False), line.get_ydata(orig=False)]).astype(float)
            xy = xy[np.all(np.isfinite(xy), axis=1)]
            if xy.size == 0:
                continue
            d = line.get_transform().transform(xy)
            inside = (d[:, 0] > lb.x0) & (d[:, 0] < lb.x1) & (d[:, 1] > lb.y0) & (d[:, 1] < lb.y1)
            if inside.any():
                problems.append(f"legend over data: the legend hides part of {line.get_label()!r}")
    problems += _markers_on_text(fig, texts, marker_clearance_pt * px_per_pt)
    return problems


def _marker_boxes(line: Line2D, px_per_pt: float) -> np.ndarray:
    """(x0, y0, x1, y1) in pixels of each marker a line draws on its own (no connecting line)."""
    if not line.get_visible() or line.get_marker() in (None, "", " ", "None", "none") \
            or line.get_linestyle() not in ("None", "none", "", " ") and len(line.get_xdata()) > 1:
        return np.empty((0, 4))
    xy = np.column_stack([line.get_xdata(orig=False), line.get_ydata(orig=False)]).astype(float)
    xy = xy[np.all(np.isfinite(xy), axis=1)]
    if xy.size == 0:
        return np.empty((0, 4))
    d = line.get_transform().transform(xy)
    r = (line.get_markersize() + line.get_markeredgewidth()) / 2 * px_per_pt
    rx = ry = r
    if line.get_marker() == "_":  # a stroke (error-bar caps): as tall as its line width
        ry = line.get_markeredgewidth() / 2 * px_per_pt
    elif line.get_marker() == "|":
        rx = line.get_markeredgewidth() / 2 * px_per_pt
    return np.column_stack([d[:, 0] - rx, d[:, 1] - ry, d[:, 0] + rx, d[:, 1] + ry])


def _markers_on_text(fig, texts, clearance: float) -> list[str]:
    """A marker drawn over a text or closer to it than ``clearance`` (pixels)."""
    px_per_pt = fig.dpi / 72.0
    out = []
    for ax in fig.axes:
        if not ax.get_visible():
            continue
        for line in ax.get_lines():
            boxes = _marker_boxes(line, px_per_pt)
            for t, bb in texts:
                if isinstance(t, Annotation):  # its own words, not the arrow that points at the marker
                    bb = Text.get_window_extent(t)
                w = np.minimum(boxes[:, 2], bb.x1) - np.maximum(boxes[:, 0], bb.x0)
                h = np.minimum(boxes[:, 3], bb.y1) - np.maximum(boxes[:, 1], bb.y0)
                if np.any((w > -clearance) & (h > -clearance)):
                    label = line.get_label()
                    what = repr(label) if label and not label.startswith("_") else f"a {line.get_marker()!r} marker"
                    out.append(f"marker on text: {what} touches {_name(t)}")
    return out
