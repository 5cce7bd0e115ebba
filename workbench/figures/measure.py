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

        self._r = RendererAgg(10, 10, 72)
        self._prop = FontProperties

    def width(self, text: str, size: float) -> float:
        prop = self._prop(size=size)  # the font of the current style context (family, weight, size)
        key = (text, hash(prop))
        if key not in _WIDTHS:
            if len(_WIDTHS) > _MAX_CACHED:
                _WIDTHS.clear()
            lines = text.split("\n") or [""]
            _WIDTHS[key] = max(self._r.get_text_width_height_descent(line, prop, ismath=False)[0] for line in lines)
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
