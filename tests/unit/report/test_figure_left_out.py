"""A figure the cohort cannot give is left out with its reason; the other figures and the run stand.

Found on scikit-survival's ``load_cgvhd`` data: one figure's MetricError (no event before the
first time of its grid) stopped ``workbench run`` after every result had been computed.
"""

from __future__ import annotations

import matplotlib.pyplot as plt
import pytest

from workbench.errors import FigureWarning, MetricError
from workbench.report import figureset


def test_a_failing_figure_is_left_out_with_a_warning(monkeypatch):
    def broken():
        raise MetricError("no evaluation patient has an event by horizon 0.25; choose a later horizon.")

    monkeypatch.setattr(figureset, "figure_plan", lambda result, width: {"td_auc": broken, "fine": plt.figure})
    with pytest.warns(FigureWarning, match="'td_auc' was not drawn: no evaluation patient has an event"):
        figs = figureset.study_figures(object(), width="single")
    assert list(figs) == ["fine"]
    plt.close("all")


def test_other_errors_are_not_hidden(monkeypatch):
    def bug():
        raise ZeroDivisionError("a programming error")

    monkeypatch.setattr(figureset, "figure_plan", lambda result, width: {"x": bug})
    with pytest.raises(ZeroDivisionError):
        figureset.study_figures(object(), width="single")
