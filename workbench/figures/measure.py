"""Text widths in points, measured with the Agg renderer (no canvas or pyplot needed).

Layouts that must fit a journal column (the nomogram's label lanes, the hazard-ratio
table's columns) size themselves from these widths instead of guessing from a
character count.
"""

from __future__ import annotations

__all__ = ["TextMeasure", "wrap_to_width"]

_WIDTHS: dict = {}
"""Measured widths shared by every TextMeasure: (text, font) -> points. A nomogram redrawn at another
horizon measures the same labels again, and each measurement costs milliseconds."""
_MAX_CACHED = 50_000


class TextMeasure:
    """Text widths in points, measured with the Agg renderer (no canvas or pyplot needed)."""

    def __init__(self):
        from matplotlib.backends.backend_agg import RendererAgg
        from matplotlib.font_manager import FontProperties

        # Hinted glyphs differ in width with the resolution by up to 10% (DejaVu Sans 7 pt "Imaging
        # signature": 60.8 pt measured at 72 dpi, 66.6 at 110 and 150, 62.7 at 300): measure at the
        # resolutions the workbench writes (the app's screen pictures 110, 150, print 300) and keep
        # the widest, so a layout fits each of them.
        self._r = tuple(RendererAgg(10, 10, dpi) for dpi in (110, 150, 300))
        self._prop = FontProperties

    def width(self, text: str, size: float) -> float:
        prop = self._prop(size=size)  # the font of the current style context (family, weight, size)
        key = (text, hash(prop))
        if key not in _WIDTHS:
            if len(_WIDTHS) > _MAX_CACHED:
                _WIDTHS.clear()
            lines = text.split("\n") or [""]
            _WIDTHS[key] = max(r.get_text_width_height_descent(line, prop, ismath=False)[0] * 72.0 / r.dpi
                               for r in self._r for line in lines)
        return _WIDTHS[key]


def wrap_to_width(text: str, fig, size: float, fraction: float = 0.97) -> str:
    """Break ``text`` into lines that fit ``fraction`` of the figure's width at ``size`` points."""
    meas = TextMeasure()
    limit = fig.get_figwidth() * 72.0 * fraction
    lines: list[str] = []
    for w in text.split(" "):
        if lines and meas.width(f"{lines[-1]} {w}", size) <= limit:
            lines[-1] = f"{lines[-1]} {w}"
        else:
            lines.append(w)
    return "\n".join(lines)
