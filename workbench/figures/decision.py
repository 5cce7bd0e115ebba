"""Decision curves: net benefit over threshold probabilities, with treat-all and treat-none.

Net benefit is computed by :func:`workbench.metrics.decision.net_benefit`; this
module draws its results.

References
----------
.. [1] Vickers AJ, Elkin EB. Decision curve analysis: a novel method for
   evaluating prediction models. Med Decis Making 2006;26:565-74.
"""

from __future__ import annotations

from collections.abc import Mapping

import numpy as np
from matplotlib import rcParams
from matplotlib.font_manager import FontProperties

from workbench.errors import SpecError
from workbench.figures.measure import wrap_to_width
from workbench.figures.style import INK, NEUTRAL, figure_and_axes, model_styles, style_context
from workbench.figures.ticks import format_number
from workbench.metrics.decision import DecisionCurveResult, net_benefit
from workbench.units import unit_for


def decision_curves(y, curves: Mapping, t0: float, thresholds=None) -> dict[str, DecisionCurveResult]:
    """Call the net-benefit metric for each model's SurvivalCurves at horizon ``t0``."""
    return {name: net_benefit(y, c, t0, thresholds) for name, c in curves.items()}


EVERYONE = "Everyone acted on (no model)"
"""Reference strategy: act on every patient, whatever the model says."""
NO_ONE = "No one acted on"
"""Reference strategy: act on no patient (net benefit zero)."""


def plot_decision_curve(
    results: Mapping[str, DecisionCurveResult],
    *,
    ax=None,
    width: str | float = "single",
    time_unit: str = "",
    max_threshold: float | None = None,
    title: str = "",
):
    """Draw net benefit against threshold probability for each model and the two reference strategies.

    The reference strategies are acting on every patient (:data:`EVERYONE`) and on no
    patient (:data:`NO_ONE`, net benefit zero).

    Parameters
    ----------
    results : mapping of model name to DecisionCurveResult (same horizon and thresholds)
    ax : Axes, optional
    width : "single", "double" or millimetres
    time_unit : str
    max_threshold : float, optional
        Right end of the threshold axis (default: where treat-all and every
        model have fallen below zero, at most the last threshold).
    title : str

    Returns
    -------
    Figure, or the Axes when ``ax`` is given.
    """
    if not results:
        raise SpecError("plot_decision_curve needs at least one model's DecisionCurveResult.")
    items = list(results.items())
    first = items[0][1]
    for name, r in items[1:]:
        if not (np.isclose(r.t0, first.t0) and np.array_equal(r.thresholds, first.thresholds)):
            raise SpecError(
                f"decision curves of {name!r} and {items[0][0]!r} use different horizons or thresholds; "
                "compute them at the same horizon and thresholds."
            )
    pt = first.thresholds
    with style_context(width):
        fig, a = figure_and_axes(ax, width, aspect=0.72)
        a.plot(pt, first.treat_all, color=NEUTRAL, lw=1.0, label=EVERYONE)
        a.plot(pt, first.treat_none, color=INK, lw=0.9, linestyle=(0, (1, 1.2)), label=NO_ONE)
        styles = model_styles([n for n, _ in items])
        for name, r in items:
            st = styles[name]
            a.plot(pt, r.net_benefit, color=st.color, linestyle=st.linestyle, label=name)
        top = max(first.event_risk, max(float(np.max(r.net_benefit)) for _, r in items))
        a.set_ylim(-0.1 * top, 1.1 * top)
        if max_threshold is None:
            positive = [pt[r.net_benefit > 0] for _, r in items] + [pt[first.treat_all > 0]]
            ends = [float(p.max()) for p in positive if p.size]
            max_threshold = min(float(pt.max()), (max(ends) if ends else float(pt.max())) + 0.05)
        a.set_xlim(float(pt.min()), max_threshold)
        a.set_xlabel(f"Threshold risk of an event by {format_number(first.t0)} {unit_for(first.t0, time_unit)}".rstrip())
        a.set_ylabel("Net benefit")
        if ax is None:
            # under the panel: curves run into every corner of a decision plot
            fig.legend(loc="outside lower center", ncols=1 if width == "single" else 3, fontsize="small")
        else:
            a.legend(loc="upper right")
        if title:
            # a long title wraps: it starts at the axes' left edge, right of the y labels
            size = FontProperties(size=rcParams["axes.titlesize"]).get_size_in_points()
            a.set_title(wrap_to_width(title, a.figure, size, fraction=0.8), loc="left")
        return fig if ax is None else a
