"""Draw nomograms from :class:`~workbench.figures.nomogram_points.NomogramScales`.

Design (explained for readers in ``docs/figures.md``; where things go is decided in
:mod:`workbench.figures.nomogram_layout`):

* a "Factor score" ruler (0-100) on top; one row per term below it, drawn on the
  same horizontal scale, so a value is read off its row and carried straight up;
* categorical terms are labelled ticks; labels that would collide move to the
  other side of the line, and levels that still collide are named together;
* under each axis a grey strip shows where the training patients lie;
* a value below a detection limit has its own tick on a short stub under the
  continuous scale of the term, because it is a separate estimate;
* a spline whose effect changes direction is split into monotone pieces drawn
  as parallel lines, one under the other, each labelled with its value range;
* the imaging signature is labelled in SDs of the training scores with its
  training groups (e.g. tertiles) as shaded bands underneath, explained in a note;
* the "Sum of scores" axis and one survival-probability axis per horizon share a
  second horizontal scale, optionally with a median-survival axis whose open end
  is marked ("> 35");
* side by side (or stacked) models get the same number of rows before the sum
  axis, so the sum and probability axes line up across panels;
* a patient overlay marks each value with its score (right-hand column), the
  sum, and the survival read off each axis; values outside the training range
  and caller-given warnings (an unseen scanner) are flagged under the panel.

No pyplot: a ``matplotlib.figure.Figure`` is built directly. This module lays out the
page of panels (:func:`plot_nomogram`); one panel is painted by
:class:`~workbench.figures.nomogram_painter._Painter`.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence

from matplotlib.figure import Figure

from workbench.cohort.summary import CAUTION
from workbench.errors import SpecError
from workbench.figures.measure import TextMeasure as _Measure
from workbench.figures.nomogram_layout import (  # noqa: F401  (SCORE_AXIS, SUM_AXIS re-exported)
    SCORE_AXIS,
    SUM_AXIS,
    _add_notes,
    _Geometry,
    _geometry,
    _label_width,
    _layout,
    _panel_notes,
    _Row,
    _row_label,
    _term_block,
    _wrap,
)
from workbench.figures.nomogram_painter import PATIENT_COLUMN, _Painter
from workbench.figures.nomogram_points import (
    SIGNATURE_TERM,
    NomogramScales,
    PatientPoints,
    points_for_patient,
)
from workbench.figures.style import (
    NEUTRAL,
    base_font_size,
    column_width_inches,
    small_print_size,
    style_context,
)

ROW_INCHES = 0.25
_CHAR_WIDTH = 0.56  # average glyph width in units of the font size (sans-serif, common practice)


def _draw_panel(ax, scales: NomogramScales, rows: list[_Row], geo: _Geometry, measure: _Measure,
                title: str, patient: PatientPoints | None, interval: Mapping | None = None) -> None:
    ax.set_xlim(-geo.left, 100 + geo.right)
    ax.set_ylim(rows[-1].top - rows[-1].height, 0.3)
    ax.set_axis_off()
    painter = _Painter(ax, scales, geo, measure)
    if patient is not None:
        painter.right_limit = 100.0 + PATIENT_COLUMN * geo.right - 0.5
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
        if interval:
            painter.intervals(interval, rows)
    painter.finish()


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


def _notes_for(scales: NomogramScales, notes, imaging_notes) -> list[str]:
    imaging = any(t.name == SIGNATURE_TERM for t in scales.terms)
    return [*(notes or ()), *((imaging_notes or ()) if imaging else ())]


def plot_nomogram(
    scales: NomogramScales | Sequence[NomogramScales],
    *,
    patient: Mapping | Sequence | None = None,
    titles: Sequence[str] | None = None,
    layout: str | None = None,
    width: str | float = "double",
    caution: str = CAUTION,
    ax=None,
    notes: Sequence[str] | None = None,
    intervals: Sequence[Mapping | None] | None = None,
    imaging_notes: Sequence[str] | None = None,
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
    layout : {"columns", "rows"}, optional
        Models side by side or stacked; rows before the total-points axis are
        padded so total-points and survival axes line up across panels. Default:
        stacked at a single-column width (under 120 mm; side by side, each panel
        would be about 40 mm wide and a categorical axis's labels could outrun it),
        otherwise side by side.
    width : "single", "double" or millimetres
    caution : str
        Footer small print (default: the workbench's research-use caution).
    ax : matplotlib Axes, optional
        Draw a single nomogram into this Axes and return it.
    intervals : sequence of mappings, optional
        One per panel: horizon -> (lower, upper) 95% limits of the patient's predicted
        survival (e.g. from ``model.predict_survival_with_ci``), drawn as a bar on each
        survival axis and listed under the panel.
    notes : sequence of str, optional
        Warnings about the patient that the scales cannot know, printed under each panel
        with a "!" (e.g. "scanner_D was not in the training network: its features were
        not harmonised"). Values outside the training range are flagged automatically.
    imaging_notes : sequence of str, optional
        Like ``notes``, but printed only under panels with an imaging signature axis
        (a note about the patient's scanner says nothing about the clinical model).

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
    ivs = list(intervals) if intervals is not None else [None] * len(items)
    if len(ivs) != len(items):
        raise SpecError(f"give one interval mapping per model ({len(items)}), or none; got {len(ivs)}.")
    if layout is None:
        layout = "rows" if column_width_inches(width) * 25.4 < 120.0 else "columns"
    if layout not in ("columns", "rows"):
        raise SpecError(f"layout {layout!r} is not known; use 'columns' (side by side) or 'rows' (stacked).")
    titles = list(titles) if titles is not None else [s.model for s in items]
    if len(titles) != len(items):
        raise SpecError(f"{len(titles)} titles for {len(items)} nomograms; give one per model.")
    fs = base_font_size(width)
    right_pt = 36.0 if any(p is not None for p in pats) else 8.0
    with style_context(width):
        measure = _Measure()
        label_pt = _label_width(items, measure, fs)
        if ax is not None:
            if len(items) != 1:
                raise SpecError("an Axes can hold one nomogram; leave ax out to draw several side by side.")
            bbox = ax.get_position()
            geo = _geometry(bbox.width * ax.figure.get_figwidth() * 72.0, fs, right_pt, label_pt)
            rows = _layout(items[0], _term_block(items[0], geo, measure), geo, measure)
            _add_notes(rows, _panel_notes(items[0], pats[0], _notes_for(items[0], notes, imaging_notes), ivs[0]),
                       geo, measure)
            _draw_panel(ax, items[0], rows, geo, measure, titles[0], pats[0], ivs[0])
            return ax
        w = column_width_inches(width)
        n = len(items)
        frac_w = (1.0 / n - 0.02) if layout == "columns" else 0.98
        geo = _geometry(frac_w * w * 72.0, fs, right_pt, label_pt)
        # side by side, pad the shorter term block so total-points and survival axes line up
        block = max(_term_block(s, geo, measure) for s in items) if layout == "columns" else 0.0
        layouts = [_layout(s, block, geo, measure) for s in items]
        for sc, rows, pp, iv in zip(items, layouts, pats, ivs, strict=True):
            _add_notes(rows, _panel_notes(sc, pp, _notes_for(sc, notes, imaging_notes), iv), geo, measure)
        heights = [(sum(r.height for r in rows) + 0.3) * ROW_INCHES for rows in layouts]
        head, foot = 0.22, 0.3
        if layout == "columns":
            h = max(heights) + head + foot
        else:
            h = sum(heights) + n * head + foot
        fig = Figure(figsize=(w, h))
        top = h
        for i, (s, rows, title, pp, iv) in enumerate(zip(items, layouts, titles, pats, ivs, strict=True)):
            if layout == "columns":
                rect = (i / n + 0.01, (h - head - heights[i]) / h, frac_w, heights[i] / h)
            else:
                top -= head + heights[i]
                rect = (0.01, top / h, frac_w, heights[i] / h)
            _draw_panel(fig.add_axes(rect), s, rows, geo, measure, title, pp, iv)
        if caution:
            fig.text(0.01, 0.1 * foot / h, caution, ha="left", va="bottom", fontsize=small_print_size(width),
                     color=NEUTRAL, wrap=True)
        return fig
