"""Text widths are measured once per text and font, whichever TextMeasure (or thread) asks."""

from __future__ import annotations

import threading

import pytest

from workbench.figures import measure
from workbench.figures.measure import TextMeasure


def test_widths_are_shared_across_measures_and_threads_and_keyed_by_font():
    text = "Serum CEA (ng/mL), a label measured once"
    a = TextMeasure().width(text, 7.0)
    calls = []
    real = TextMeasure.__init__

    def spy(self):
        real(self)
        def wrapped(r):
            inner = r.get_text_width_height_descent
            return type("R", (), {"dpi": r.dpi,
                                  "get_text_width_height_descent": lambda _, *x, **k: calls.append(x) or inner(*x, **k)})()

        self._r = tuple(wrapped(r) for r in self._r)

    TextMeasure.__init__ = spy
    try:
        got = []
        t = threading.Thread(target=lambda: got.append(TextMeasure().width(text, 7.0)))  # another thread
        t.start()
        t.join()
        assert got == [a] and calls == []  # taken from the shared table, not measured again
        bigger = TextMeasure().width(text, 9.0)  # another font size is another font: measured
        assert len(calls) == len(TextMeasure()._r) and bigger > a  # once at each resolution
    finally:
        TextMeasure.__init__ = real
    assert any(k[0] == text for k in measure._WIDTHS)


def test_width_is_the_widest_of_the_written_resolutions():
    # Hinted glyph widths change with the resolution; the layout must fit every output (matplotlib's
    # Agg renderer as the reference: each resolution's width, converted to points).
    from matplotlib.backends.backend_agg import RendererAgg
    from matplotlib.font_manager import FontProperties

    text, prop = "Imaging signature", FontProperties(size=7.0)
    each = [RendererAgg(10, 10, d).get_text_width_height_descent(text, prop, ismath=False)[0] * 72.0 / d
            for d in (110, 150, 300)]
    assert TextMeasure().width(text, 7.0) == pytest.approx(max(each), abs=1e-9)
