"""The baseline survival curve of each Cox model over the whole follow-up (the report's appendix).

S0(t) is the survival of a patient at the training means of the design columns
(``x_mean``), a step function with a step at every event time of the training
data; with the coefficients it gives any patient's curve,
S(t | x) = S0(t) ** exp((x - x_mean) @ coef). The curves are given (read from the
fitted models by :mod:`workbench.report.appendix`); this module draws them.
"""

from __future__ import annotations

from collections.abc import Mapping

import numpy as np

from workbench.errors import WorkbenchError
from workbench.figures.style import NEUTRAL, figure_and_axes, model_styles, style_context
from workbench.figures.ticks import time_ticks


def plot_baseline_survival(curves: Mapping[str, tuple], *, horizons=(), time_unit: str = "",
                           width: str | float = "single", ax=None):
    """Step curves of S0(t) per model, with the study horizons marked.

    Parameters
    ----------
    curves : mapping of model label to (times, survival)
        Event times and S0 just after each of them.
    horizons : sequence of float
        Marked with thin vertical lines.
    time_unit : str
    width : "single", "double" or millimetres
    ax : Axes, optional

    Returns
    -------
    matplotlib.figure.Figure
    """
    if not curves:
        raise WorkbenchError("no Cox model with a baseline survival curve to draw.")
    with style_context(width):
        own = ax is None
        fig, ax = figure_and_axes(ax, width, aspect=0.8 if width == "single" else 0.5)
        styles = model_styles(curves)
        t_max = max(float(np.max(t)) for t, _ in curves.values())
        for name, (t, s) in curves.items():
            st = styles[name]
            ax.step(np.r_[0.0, t], np.r_[1.0, s], where="post", color=st.color, linestyle=st.linestyle,
                    label=name)
        for h in horizons:
            ax.axvline(float(h), color=NEUTRAL, linewidth=0.5, linestyle=":")
        ticks = time_ticks(t_max, time_unit)
        ax.set_xticks(ticks)
        ax.set_xlim(0, max(t_max, float(ticks[-1])))
        ax.set_ylim(0, 1.02)
        ax.set_xlabel(f"Time since start of follow-up ({time_unit})" if time_unit else "Time")
        ax.set_ylabel("Baseline survival S0(t)")
        if own:
            # below the plot: a legend inside the axes covers a curve somewhere (the lower tails where
            # survival falls to near zero, as in the veterans' lung cancer trial; the top where it stays high)
            fig.legend(loc="outside lower center", ncols=1 if width == "single" else min(3, len(curves)),
                       fontsize="small")
        else:
            ax.legend(loc="lower left")
    return fig
