"""Text widths are measured once per text and font, whichever TextMeasure (or thread) asks."""

from __future__ import annotations

import threading

from workbench.figures import measure
from workbench.figures.measure import TextMeasure


def test_widths_are_shared_across_measures_and_threads_and_keyed_by_font():
    text = "Serum CEA (ng/mL), a label measured once"
    a = TextMeasure().width(text, 7.0)
    calls = []
    real = TextMeasure.__init__

    def spy(self):
        real(self)
        inner = self._r.get_text_width_height_descent
        self._r = type("R", (), {"get_text_width_height_descent": lambda _, *x, **k: calls.append(x) or inner(*x, **k)})()

    TextMeasure.__init__ = spy
    try:
        got = []
        t = threading.Thread(target=lambda: got.append(TextMeasure().width(text, 7.0)))  # another thread
        t.start()
        t.join()
        assert got == [a] and calls == []  # taken from the shared table, not measured again
        bigger = TextMeasure().width(text, 9.0)  # another font size is another font: measured
        assert len(calls) == 1 and bigger > a
    finally:
        TextMeasure.__init__ = real
    assert any(k[0] == text for k in measure._WIDTHS)
