"""Calibration plots at each horizon: smoothed curve with band, grouped points, ideal line, histogram.

Every number comes from :func:`workbench.metrics.calibration.calibration_at`
(:class:`~workbench.metrics.calibration.CalibrationResult`); the histogram shows
the predicted risks it was computed from.

References
----------
.. [1] Austin PC, Harrell FE Jr, van Klaveren D. Graphical calibration curves and
   the integrated calibration index (ICI) for survival models. Stat Med
   2020;39:2714-42.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence

import numpy as np
from matplotlib.lines import Line2D

from workbench.errors import SpecError
from workbench.figures.style import (
    BAND_ALPHA,
    NEUTRAL,
    figure_and_axes,
    new_figure,
    series_style,
    style_context,
)
from workbench.figures.ticks import format_number
from workbench.metrics.calibration import CalibrationResult
from workbench.predictions import SurvivalCurves


def _risks(predicted, t0: float) -> np.ndarray | None:
    if predicted is None:
        return None
    if isinstance(predicted, SurvivalCurves):
        return predicted.risk_at(t0)
    return np.asarray(predicted, dtype=float).ravel()


def plot_calibration(
    result: CalibrationResult,
    *,
    predicted=None,
    ax=None,
    width: str | float = "single",
    time_unit: str = "",
    series: int = 0,
    title: str | None = None,
    limit: float | None = None,
):
    """Draw one model's calibration at one horizon.

    Parameters
    ----------
    result : CalibrationResult
    predicted : SurvivalCurves or array-like, optional
        The predictions the result was computed from, for the histogram of predicted risks.
    ax : Axes, optional
    width : "single", "double" or millimetres
    time_unit : str
    series : int
        Colour and marker index (so a model keeps its colour across figures).
    title : str, optional
    limit : float, optional
        Upper end of both axes (default: just above the largest risk shown).

    Returns
    -------
    Figure, or the Axes when ``ax`` is given.
    """
    sm, gr = result.smoothed, result.grouped
    risks = _risks(predicted, result.t0)
    st = series_style(series)
    with style_context(width):
        fig, a = figure_and_axes(ax, width, aspect=1.0)
        if limit is None:
            top = max(float(np.max(sm.grid_predicted)), float(np.max(gr.observed_upper)),
                      float(np.max(sm.grid_observed)))
            limit = min(1.0, np.ceil(top * 10 + 0.5) / 10)
        a.plot([0, limit], [0, limit], color=NEUTRAL, lw=0.8, linestyle=(0, (3, 2)), label="Ideal")
        a.fill_between(sm.grid_predicted, sm.grid_lower, sm.grid_upper, color=st.color, alpha=BAND_ALPHA,
                       linewidth=0)
        a.plot(sm.grid_predicted, sm.grid_observed, color=st.color, linestyle=st.linestyle,
               label="Smoothed")
        yerr = np.vstack([gr.observed - gr.observed_lower, gr.observed_upper - gr.observed])
        a.errorbar(gr.mean_predicted, gr.observed, yerr=np.clip(yerr, 0, None), fmt=st.marker,
                   color=st.color, ms=3.5, mfc="white", mew=0.9, elinewidth=0.7, capsize=1.5,
                   label="Grouped (95% CI)")
        if risks is not None:
            h = a.inset_axes((0.0, 0.0, 1.0, 0.16), sharex=a)
            h.hist(risks, bins=np.linspace(0, limit, 41), color=st.color, alpha=0.55, linewidth=0)
            h.set_axis_off()
        a.set_xlim(0, limit)
        a.set_ylim(0, limit)
        a.set_aspect("equal", adjustable="box")
        unit = f" {time_unit}" if time_unit else ""
        a.set_xlabel(f"Predicted risk by {format_number(result.t0)}{unit}")
        a.set_ylabel("Observed risk")
        a.text(0.03, 0.97,
               f"ICI {sm.ici:.3f}\nE50 {sm.e50:.3f}\nE90 {sm.e90:.3f}\nslope {result.slope.slope:.2f}",
               transform=a.transAxes, ha="left", va="top", fontsize="small", linespacing=1.15)
        a.legend(loc="lower right", fontsize="small", borderaxespad=0.2, bbox_to_anchor=(1.0, 0.17))
        a.set_title(title if title is not None else (result.model or ""), loc="left", fontsize="medium")
        return fig if ax is None else a


def plot_calibration_panels(
    results: Mapping[str, Sequence[CalibrationResult]],
    *,
    predicted: Mapping | None = None,
    width: str | float = "double",
    time_unit: str = "",
):
    """One row per model, one column per horizon, on shared axes per horizon.

    Parameters
    ----------
    results : mapping of model name to a sequence of CalibrationResult (one per horizon)
    predicted : mapping of model name to SurvivalCurves, optional
        For the histograms of predicted risk.
    width : "single", "double" or millimetres
    time_unit : str
    """
    names = list(results)
    if not names:
        raise SpecError("plot_calibration_panels needs at least one model's calibration results.")
    n_h = len(results[names[0]])
    if any(len(results[n]) != n_h for n in names):
        raise SpecError("every model needs calibration results at the same horizons.")
    with style_context(width):
        fig = new_figure(width, aspect=len(names) / n_h * 1.02)
        grid = fig.subplots(len(names), n_h, squeeze=False)
        for j in range(n_h):
            res = [results[n][j] for n in names]
            top = max(max(float(np.max(r.smoothed.grid_predicted)), float(np.max(r.grouped.observed_upper)))
                      for r in res)
            limit = min(1.0, np.ceil(top * 10 + 0.5) / 10)
            for i, n in enumerate(names):
                pred = None if predicted is None else predicted.get(n)
                horizon = f"{format_number(results[n][j].t0)} {time_unit}".rstrip()
                plot_calibration(results[n][j], predicted=pred, ax=grid[i, j], width=width,
                                 time_unit=time_unit, series=i, limit=limit,
                                 title=horizon if i == 0 else "")
                if i < len(names) - 1:
                    grid[i, j].set_xlabel("")
                grid[i, j].set_ylabel(f"{n}\nobserved risk" if j == 0 else "")
                grid[i, j].get_legend().remove()
        handles = [
            Line2D([], [], color=NEUTRAL, lw=0.8, linestyle=(0, (3, 2)), label="Ideal"),
            *(Line2D([], [], color=series_style(i).color, linestyle=series_style(i).linestyle,
                     marker=series_style(i).marker, mfc="white", ms=3.5, label=n)
              for i, n in enumerate(names)),
        ]
        fig.legend(handles=handles, loc="outside lower center", ncols=min(len(handles), 3),
                   title="smoothed curve with 95% band; grouped Kaplan-Meier points with 95% CI",
                   title_fontsize="small")
        return fig
