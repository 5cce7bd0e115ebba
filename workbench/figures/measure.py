"""Text widths in points, measured with the Agg renderer (no canvas or pyplot needed).

Layouts that must fit a journal column (the nomogram's label lanes, the hazard-ratio
table's columns) size themselves from these widths instead of guessing from a
character count.
"""

from __future__ import annotations

__all__ = ["TextMeasure"]


class TextMeasure:
    """Text widths in points, measured with the Agg renderer (no canvas or pyplot needed)."""

    def __init__(self):
        from matplotlib.backends.backend_agg import RendererAgg
        from matplotlib.font_manager import FontProperties

        self._r = RendererAgg(10, 10, 72)
        self._prop = FontProperties
        self._cache: dict = {}

    def width(self, text: str, size: float) -> float:
        key = (text, size)
        if key not in self._cache:
            lines = text.split("\n") or [""]
            self._cache[key] = max(
                self._r.get_text_width_height_descent(line, self._prop(size=size), ismath=False)[0]
                for line in lines
            )
        return self._cache[key]


def wrap_to_width(text: str, fig, size: float) -> str:
    """Break ``text`` into lines that fit the figure's width at ``size`` points."""
    meas = TextMeasure()
    limit = fig.get_figwidth() * 72.0 * 0.97
    lines: list[str] = []
    for w in text.split(" "):
        if lines and meas.width(f"{lines[-1]} {w}", size) <= limit:
            lines[-1] = f"{lines[-1]} {w}"
        else:
            lines.append(w)
    return "\n".join(lines)
