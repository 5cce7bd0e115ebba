"""Figures of the competing-risks route: cumulative incidence per cause, observed vs predicted risk."""

from __future__ import annotations

import numpy as np

from workbench.competing.cif import CumulativeIncidenceResult
from workbench.figures.style import (
    BAND_ALPHA,
    INK,
    NEUTRAL,
    figure_and_axes,
    model_styles,
    new_figure,
    series_style,
    style_context,
)

__all__ = ["plot_cause_incidence", "plot_incidence_calibration"]


def plot_cause_incidence(result: CumulativeIncidenceResult, labels: dict, *, horizons=(), time_unit: str = "months",
                         ax=None, width="single"):
    """Aalen-Johansen cumulative incidence of each cause with its pointwise band.

    ``labels`` maps cause codes to names; ``horizons`` are marked by thin lines.
    """
    with style_context(width):
        fig, ax = figure_and_axes(ax, width, aspect=0.7)
        t = np.r_[0.0, result.times]
        for i, k in enumerate(result.causes):
            st = series_style(i)
            r = result.row(k)
            f, lo, hi = (np.r_[0.0, a[r]] for a in (result.incidence, result.ci_lower, result.ci_upper))
            ax.step(t, f, where="post", color=st.color, linestyle=st.linestyle, label=labels.get(k, f"cause {k}"))
            ax.fill_between(t, lo, hi, step="post", color=st.color, alpha=BAND_ALPHA, linewidth=0)
        for h in horizons:
            ax.axvline(h, color=INK, linewidth=0.4, alpha=0.4)
        ax.set_xlim(0, float(result.times.max()))
        ax.set_ylim(0, 1)
        ax.set_xlabel(f"Time ({time_unit})")
        ax.set_ylabel("Cumulative incidence")
        ax.legend(loc="upper left")
    return fig


def plot_incidence_calibration(groups: dict, *, cause_label: str = "", width="single"):
    """Mean predicted against Aalen-Johansen observed incidence by risk group, one panel per horizon.

    ``groups`` maps a model name to a list of grouped-calibration results (one per
    horizon, :func:`workbench.competing.metrics.competing_grouped_calibration`).
    """
    names = list(groups)
    n_h = len(next(iter(groups.values()))) if groups else 0
    styles = model_styles(names)
    with style_context(width):
        fig = new_figure(width, aspect=0.42 if n_h > 1 else 0.8)
        axes = fig.subplots(1, max(n_h, 1), squeeze=False)[0]
        for j, ax in enumerate(axes):
            top = 0.0
            for name in names:
                g = groups[name][j]
                st = styles[name]
                err = np.vstack([g.observed - g.observed_lower, g.observed_upper - g.observed])
                ax.errorbar(g.mean_predicted, g.observed, yerr=np.clip(err, 0, None), fmt=st.marker,
                            color=st.color, linestyle="none", capsize=1.5, label=name)
                top = max(top, float(np.max(g.observed_upper)), float(np.max(g.mean_predicted)))
            top = min(1.0, 1.05 * top) or 1.0
            ax.plot([0, top], [0, top], color=NEUTRAL, linewidth=0.5, linestyle=":")
            ax.set_xlim(0, top)
            ax.set_ylim(0, top)
            ax.set_title(f"t = {groups[names[0]][j].t0:g}")
            ax.set_xlabel("Predicted")
            if j == 0:
                ax.set_ylabel(f"Observed incidence of {cause_label}" if cause_label else "Observed incidence")
        if names:
            axes[0].legend(loc="upper left")
    return fig
