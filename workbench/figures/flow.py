"""Patient flow diagram: patients read, set aside with reasons, and analysed, per cohort.

The counts are given (built by :mod:`workbench.report.flow` from what the run
recorded); this module only draws them. Each cohort is one column: its stages in
solid boxes on a vertical line, and between two stages a side box with the
patients set aside and why. Two cohorts sit side by side at double width and one
above the other at single width. Box sizes follow the measured text widths, so
labels wrap inside their box at either journal width.
"""

from __future__ import annotations

from dataclasses import dataclass

from matplotlib.patches import FancyArrowPatch, FancyBboxPatch

from workbench.errors import WorkbenchError
from workbench.figures.measure import TextMeasure
from workbench.figures.style import (
    INK,
    MM_PER_INCH,
    NEUTRAL,
    PALETTE,
    base_font_size,
    column_width_inches,
    style_context,
)

PT_TO_MM = 25.4 / 72.0


@dataclass(frozen=True)
class FlowStage:
    """A box on a cohort's main line: ``n`` patients, a label and optional detail lines."""

    label: str
    n: int
    detail: tuple[str, ...] = ()


@dataclass(frozen=True)
class FlowExit:
    """Patients set aside between two stages: a heading and (reason, count) pairs."""

    label: str
    n: int
    reasons: tuple[tuple[str, int], ...] = ()


@dataclass(frozen=True)
class FlowColumn:
    """One cohort: its stages from first to last and the exits between them (``None`` for none)."""

    title: str
    stages: tuple[FlowStage, ...]
    exits: tuple[FlowExit | None, ...]

    def __post_init__(self):
        if not self.stages or len(self.exits) != len(self.stages) - 1:
            raise WorkbenchError(f"flow column {self.title!r}: {len(self.stages)} stages need "
                                 f"{max(len(self.stages) - 1, 0)} exits (None where nobody left), "
                                 f"got {len(self.exits)}.")


def _wrap(text: str, width_pt: float, size: float, measure: TextMeasure) -> list[str]:
    """Greedy word wrap to a measured width (a word longer than the width stays whole)."""
    lines = []
    for para in text.split("\n"):
        line = ""
        for word in para.split(" "):
            trial = f"{line} {word}".strip()
            if line and measure.width(trial, size) > width_pt:
                lines.append(line)
                line = word
            else:
                line = trial
        lines.append(line)
    return lines


def _box_lines(stage, width_mm, size, small, measure):
    """(text, size, bold) lines of a box, wrapped to its inner width."""
    inner = (width_mm - 3.0) / PT_TO_MM
    # measured in the regular face; bold runs about a tenth wider
    head = [(t, size, True) for t in _wrap(f"{stage.label}: n\u00a0=\u00a0{stage.n}", 0.88 * inner, size, measure)]
    rest = stage.detail if isinstance(stage, FlowStage) else [f"{reason}: {k}" for reason, k in stage.reasons]
    return head + [(t, small, False) for d in rest for t in _wrap(d, inner, small, measure)]


def _height(lines) -> float:
    return sum(s * PT_TO_MM * 1.3 for _, s, _ in lines) + 2.4


def _column_layout(col: FlowColumn, width_mm: float, size: float, small: float, measure):
    """Boxes of one column in mm from its top-left corner: list of (kind, x, y, w, h, lines); total height."""
    main_w = width_mm * 0.5
    side_x, side_w = width_mm * 0.56, width_mm * 0.44
    title = _wrap(col.title, width_mm / PT_TO_MM, size + 0.5, measure)
    y = len(title) * (size + 0.5) * PT_TO_MM * 1.3 + 1.5
    boxes = [("title", 0.0, 0.0, width_mm, y, [(t, size + 0.5, True) for t in title])]
    for i, stage in enumerate(col.stages):
        lines = _box_lines(stage, main_w, size, small, measure)
        h = _height(lines)
        boxes.append(("stage", 0.0, y, main_w, h, lines))
        y += h
        if i < len(col.exits):
            ex = col.exits[i]
            if ex is None:
                y += 5.0
                continue
            elines = _box_lines(ex, side_w, size, small, measure)
            eh = _height(elines)
            gap = eh + 5.0
            boxes.append(("exit", side_x, y + 2.5, side_w, eh, elines))
            y += gap
    return boxes, y


def plot_patient_flow(columns, *, width="double"):
    """Draw the patient flow of one or more cohorts.

    Parameters
    ----------
    columns : sequence of FlowColumn
        Usually the development cohort, then the external cohort.
    width : {"single", "double"} or float mm
        Journal column width; two cohorts sit side by side only above 120 mm.

    Returns
    -------
    matplotlib.figure.Figure
    """
    from matplotlib.figure import Figure

    columns = list(columns)
    if not columns:
        raise WorkbenchError("the patient flow needs at least one cohort.")
    w_mm = column_width_inches(width) * MM_PER_INCH
    size = base_font_size(width)
    small = size - 1.0
    measure = TextMeasure()
    side_by_side = w_mm > 120.0 and len(columns) > 1
    margin, gutter = 1.5, 6.0
    if side_by_side:
        col_w = (w_mm - 2 * margin - gutter * (len(columns) - 1)) / len(columns)
        placed = [(margin + k * (col_w + gutter), margin, *_column_layout(c, col_w, size, small, measure))
                  for k, c in enumerate(columns)]
        h_mm = max(p[3] for p in placed) + 2 * margin
    else:
        col_w = w_mm - 2 * margin
        placed, y = [], margin
        for c in columns:
            boxes, h = _column_layout(c, col_w, size, small, measure)
            placed.append((margin, y, boxes, h))
            y += h + gutter
        h_mm = y - gutter + margin
    with style_context(width):
        fig = Figure(figsize=(w_mm / MM_PER_INCH, h_mm / MM_PER_INCH))
        ax = fig.add_axes((0, 0, 1, 1))
        ax.set_xlim(0, w_mm)
        ax.set_ylim(h_mm, 0)
        ax.set_axis_off()
        for x0, y0, boxes, _ in placed:
            stages = [b for b in boxes if b[0] == "stage"]
            for kind, x, y, bw, bh, lines in boxes:
                x, y = x0 + x, y0 + y
                if kind != "title":
                    ax.add_patch(FancyBboxPatch((x, y), bw, bh, boxstyle="round,pad=0,rounding_size=1.2",
                                                facecolor="white" if kind == "exit" else "#EEF0F7",
                                                edgecolor=NEUTRAL if kind == "exit" else PALETTE[0],
                                                linewidth=0.7, linestyle="--" if kind == "exit" else "-"))
                ty = y + 1.2
                for text, s, bold in lines:
                    lh = s * PT_TO_MM * 1.3
                    ax.text(x + (1.5 if kind != "title" else 0.0), ty + lh / 2, text, fontsize=s, color=INK,
                            fontweight="bold" if bold else "normal", va="center", ha="left")
                    ty += lh
                if kind == "exit":
                    # from the main line across to the side box
                    stem = x0 + stages[0][3] / 2
                    ax.add_patch(FancyArrowPatch((stem, y + bh / 2), (x, y + bh / 2), arrowstyle="-|>",
                                                 mutation_scale=6, color=NEUTRAL, linewidth=0.7,
                                                 shrinkA=0, shrinkB=0))
            for a, b in zip(stages, stages[1:], strict=False):
                stem = x0 + a[3] / 2
                ax.add_patch(FancyArrowPatch((stem, y0 + a[2] + a[4]), (stem, y0 + b[2]), arrowstyle="-|>",
                                             mutation_scale=7, color=PALETTE[0], linewidth=0.8,
                                             shrinkA=0, shrinkB=0))
    return fig
