"""Save figures as PNG (300 dpi), SVG and PDF at journal column widths, with editable text."""

from __future__ import annotations

from pathlib import Path

import matplotlib

from workbench.errors import SpecError
from workbench.figures.style import column_width_inches

FORMATS = ("png", "svg", "pdf")
_EDITABLE_TEXT = {"svg.fonttype": "none", "pdf.fonttype": 42, "ps.fonttype": 42}


def save_figure(
    fig,
    path,
    *,
    widths=("single", "double"),
    formats=FORMATS,
    dpi: int = 300,
) -> list[Path]:
    """Write ``fig`` at each width in each format; returns the paths written.

    Parameters
    ----------
    fig : matplotlib.figure.Figure
    path : str or Path
        Output stem, e.g. ``figures/km``; files are named ``<stem>_<width>.<format>``
        (``<stem>.<format>`` when one width is given as ``None``, i.e. keep the size).
    widths : sequence of {"single", "double", float mm, None}
        Figure widths; the height follows the figure's aspect ratio.
    formats : sequence of {"png", "svg", "pdf"}
    dpi : int
        Raster resolution (300 is the usual journal minimum for line art with shading).

    Notes
    -----
    Text stays text in vector files (``svg.fonttype = 'none'``, TrueType fonts
    in PDF), so labels can be edited for a journal's house style. The PNG is
    exactly ``width * dpi`` pixels wide (no tight bounding box).
    """
    bad = [f for f in formats if f not in FORMATS]
    if bad:
        raise SpecError(f"figure format(s) {bad} are not supported; use {', '.join(FORMATS)}.")
    stem = Path(path)
    if stem.suffix.lower().lstrip(".") in FORMATS:
        stem = stem.with_suffix("")
    stem.parent.mkdir(parents=True, exist_ok=True)
    w0, h0 = fig.get_size_inches()
    aspect = h0 / w0
    out = []
    try:
        for width in widths:
            if width is None:
                w, tag = w0, ""
            else:
                w, tag = column_width_inches(width), f"_{width if isinstance(width, str) else f'{width:g}mm'}"
            fig.set_size_inches(w, w * aspect)
            for fmt in formats:
                target = stem.with_name(f"{stem.name}{tag}.{fmt}")
                with matplotlib.rc_context(_EDITABLE_TEXT):
                    fig.savefig(target, format=fmt, dpi=dpi, facecolor="white",
                                metadata={"Creator": "survival workbench"} if fmt in ("svg", "pdf") else None)
                out.append(target)
    finally:
        fig.set_size_inches(w0, h0)
    return out
