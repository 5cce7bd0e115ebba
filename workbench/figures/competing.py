"""Figures of the competing-risks route: cumulative incidence per cause, observed vs predicted risk."""

from __future__ import annotations

import numpy as np

from workbench.competing.cif import CumulativeIncidenceResult
from workbench.figures.measure import wrap_to_width
from workbench.figures.style import (
    BAND_ALPHA,
    INK,
    NEUTRAL,
    base_font_size,
    figure_and_axes,
    model_styles,
    new_figure,
    series_style,
    style_context,
)
from workbench.units import time_phrase

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


def plot_incidence_calibration(groups: dict, *, cause_label: str = "", width="single", time_unit: str = "",
                               title: str = "", labels: dict | None = None):
    """Mean predicted against Aalen-Johansen observed incidence by risk group, one panel per horizon.

    ``groups`` maps a model name (a study key such as "combined", shown by its label) to a
    list of grouped-calibration results (one per horizon,
    :func:`workbench.competing.metrics.competing_grouped_calibration`). Every panel has the
    same 0-1 scale, so the horizons can be compared at a glance. ``labels`` overrides a
    model's label in the legend.
    """
    from workbench.models.labels import MODEL_LABELS

    names = list(groups)
    n_h = len(next(iter(groups.values()))) if groups else 0
    styles = model_styles(names)
    with style_context(width):
        # square panels side by side: the height follows the number of horizons, so two panels fill the width
        fig = new_figure(width, aspect=({2: 0.55}.get(n_h, 0.42) if width == "double" else 0.62) if n_h > 1 else 0.8)
        axes = fig.subplots(1, max(n_h, 1), squeeze=False)[0]
        for j, ax in enumerate(axes):
            for name in names:
                g = groups[name][j]
                st = styles[name]
                err = np.vstack([g.observed - g.observed_lower, g.observed_upper - g.observed])
                ax.errorbar(g.mean_predicted, g.observed, yerr=np.clip(err, 0, None), fmt=st.marker,
                            color=st.color, linestyle="none", capsize=1.5, label=(labels or {}).get(name, MODEL_LABELS.get(name, name)),
                            clip_on=False)
            ax.plot([0, 1], [0, 1], color=NEUTRAL, linewidth=0.5, linestyle=":")
            ax.set_xlim(0, 1)
            ax.set_ylim(0, 1)
            if j:
                ax.tick_params(labelleft=False)
            ax.set_title(time_phrase(groups[names[0]][j].t0, time_unit).strip())
            ax.set_xlabel("Predicted")
            ax.set_aspect("equal")
            if j == 0:
                ax.set_ylabel("Observed (Aalen-Johansen)")
        if names:  # under the panels, where long model names cannot squeeze them
            handles, labels = axes[0].get_legend_handles_labels()
            fig.legend(handles, labels, loc="outside lower center", ncols=len(names), frameon=False)
        head = f"Incidence of {cause_label} by risk group" if cause_label else "Incidence by risk group"
        fig.suptitle(wrap_to_width(f"{head}: {title}" if title else head, fig, 1.1 * base_font_size(width)), x=0.01,
                     ha="left", fontsize="medium")
    return fig
