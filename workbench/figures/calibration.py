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
from matplotlib.ticker import NullFormatter

from workbench.errors import SpecError
from workbench.figures.style import (
    BAND_ALPHA,
    NEUTRAL,
    SeriesStyle,
    base_font_size,
    figure_and_axes,
    model_styles,
    new_figure,
    series_style,
    style_context,
)
from workbench.figures.ticks import format_number
from workbench.metrics.calibration_results import CalibrationResult
from workbench.predictions import SurvivalCurves
from workbench.units import unit_for


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
    series: int | str | None = None,
    title: str | None = None,
    limit: float | None = None,
    compact: bool = False,
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
    series : int or str, optional
        Palette index, or the model's name; by default the result's model name, so a model
        keeps its colour across figures whatever the order of the models.
    title : str, optional
    limit : float, optional
        Upper end of both axes (default: just above the largest risk shown).
    compact : bool
        Small panel of a grid: two summary numbers (ICI and slope) instead of four, and no legend.

    Returns
    -------
    Figure, or the Axes when ``ax`` is given.
    """
    sm, gr = result.smoothed, result.grouped
    risks = _risks(predicted, result.t0)
    st = _style(series, result.model)
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
                   label="Grouped (95% CI)", clip_on=False)  # a group observed at 0 or 1 shows whole
        if risks is not None:
            h = a.inset_axes((0.0, 0.0, 1.0, 0.16), sharex=a)
            # one filled step outline rather than 40 bar patches: the same bins and heights, drawn as one shape
            counts, edges = np.histogram(risks, bins=np.linspace(0, limit, 41))
            h.stairs(counts, edges, fill=True, color=st.color, alpha=0.55, linewidth=0)
            h.set_axis_off()
            h.yaxis.set_major_formatter(NullFormatter())  # hidden counts: no offset text for a title to dodge
        a.set_xlim(0, limit)
        a.set_ylim(0, limit)
        a.set_aspect("equal", adjustable="box")
        a.set_xlabel(f"Predicted risk by {format_number(result.t0)} {unit_for(result.t0, time_unit)}".rstrip())
        a.set_ylabel("Observed risk")
        if compact:
            # above the panel, where it cannot cover a point of the curve
            a.set_title(f"{title}\nICI {sm.ici:.3f}\nslope {result.slope.slope:.2f}".lstrip("\n"), loc="left",
                        fontsize="small", pad=2, linespacing=1.1)
        else:
            a.text(0.03, 0.97,
                   f"ICI {sm.ici:.3f}\nE50 {sm.e50:.3f}\nE90 {sm.e90:.3f}\nslope {result.slope.slope:.2f}",
                   transform=a.transAxes, ha="left", va="top", fontsize="small", linespacing=1.15)
            a.legend(loc="lower right", fontsize="small", borderaxespad=0.2, bbox_to_anchor=(1.0, 0.17))
        if not compact:
            a.set_title(title if title is not None else (result.model or ""), loc="left", fontsize="medium")
        return fig if ax is None else a


def _style(series, model) -> SeriesStyle:
    if isinstance(series, str):
        return model_styles([series])[series]
    if series is None:
        return model_styles([model])[model] if model else series_style(0)
    return series_style(series)


def plot_calibration_panels(
    results: Mapping[str, Sequence[CalibrationResult]],
    *,
    predicted: Mapping | None = None,
    width: str | float = "double",
    time_unit: str = "",
    cohort: str = "",
):
    """One row per model, one column per horizon, on shared axes per horizon.

    Each model's row is headed by its name; the panels carry the horizon and two
    summary numbers (ICI, calibration slope). The figure title names the cohort the
    calibration was measured in.

    Parameters
    ----------
    results : mapping of model name to a sequence of CalibrationResult (one per horizon)
    predicted : mapping of model name to SurvivalCurves, optional
        For the histograms of predicted risk.
    width : "single", "double" or millimetres
    time_unit : str
    cohort : str
        Where calibration was measured (e.g. "external cohort"), stated in the title.
    """
    names = list(results)
    if not names:
        raise SpecError("plot_calibration_panels needs at least one model's calibration results.")
    n_h = len(results[names[0]])
    if any(len(results[n]) != n_h for n in names):
        raise SpecError("every model needs calibration results at the same horizons.")
    styles = model_styles(names)
    with style_context(width):
        fig = new_figure(width)
        w_in = fig.get_figwidth()
        fs_in = base_font_size(width) / 72.0
        # each row: square panels, a three-line panel title, the model name; then heading and legend
        panel_in = (w_in - 6 * fs_in) / n_h
        # at most a journal page high (about 230 mm): with many models the square panels shrink
        page_in = 230.0 / 25.4
        panel_in = min(panel_in, (page_in - 9 * fs_in) / len(names) - 6.5 * fs_in)
        fig.set_figheight(len(names) * (panel_in + 6.5 * fs_in) + 9 * fs_in)
        rows = fig.subfigures(len(names), 1, squeeze=False)[:, 0]
        grid = np.array([row.subplots(1, n_h, squeeze=False)[0] for row in rows])
        limits = []
        for j in range(n_h):
            res = [results[n][j] for n in names]
            top = max(max(float(np.max(r.smoothed.grid_predicted)), float(np.max(r.grouped.observed_upper)))
                      for r in res)
            limits.append(min(1.0, np.ceil(top * 10 + 0.5) / 10))
        for j, limit in enumerate(limits):
            # a panel leaves its observed-risk ticks unlabelled only when its scale is the one labelled
            # at the row's start: each horizon has its own range
            labelled = j == 0 or not np.isclose(limit, limits[0])
            for i, n in enumerate(names):
                pred = None if predicted is None else predicted.get(n)
                horizon = f"{format_number(results[n][j].t0)} {unit_for(results[n][j].t0, time_unit)}".rstrip()
                a = grid[i, j]
                plot_calibration(results[n][j], predicted=pred, ax=a, width=width, time_unit=time_unit,
                                 series=n, limit=limit, title=horizon, compact=True)
                a.set_xlabel("Predicted" if i == len(names) - 1 else "")
                a.set_ylabel("Observed" if j == 0 else "")
                a.set_xticks([0, limit / 2, limit], labels=["0", format_number(limit / 2), format_number(limit)])
                a.set_yticks([0, limit / 2, limit], labels=["0", format_number(limit / 2), format_number(limit)]
                             if labelled else [])
        for row, n in zip(rows, names, strict=True):
            row.suptitle(n, x=0.01, ha="left", fontsize="medium", color=styles[n].color, fontweight="bold")
        where = f"\n({cohort})" if cohort else ""
        fig.suptitle(f"Observed against predicted risk of an event by each horizon{where}", x=0.01, ha="left",
                     fontsize="medium", wrap=False)
        handles = [
            Line2D([], [], color=NEUTRAL, lw=0.8, linestyle=(0, (3, 2)), label="Ideal"),
            Line2D([], [], color=NEUTRAL, label="Smoothed, 95% band"),
            Line2D([], [], color=NEUTRAL, marker="o", linestyle="none", mfc="white", ms=3.5,
                   label="Grouped Kaplan-Meier, 95% CI"),
        ]
        fig.legend(handles=handles, loc="outside lower center", ncols=len(handles) if width != "single" else 2,
                   fontsize="small")
        return fig
