"""Time-dependent AUC over time for several models, with pointwise confidence bands.

The AUC itself is computed by :func:`workbench.metrics.td_auc.time_dependent_auc`;
:func:`td_auc_by_model` is only a convenience that calls it once per model on
the same grid, and :func:`plot_td_auc` draws the results.

References
----------
.. [1] Heagerty PJ, Zheng Y. Survival model predictive accuracy and ROC curves.
   Biometrics 2005;61:92-105.
.. [2] Uno H, Cai T, Tian L, Wei LJ. Evaluating prediction rules for t-year
   survivors with censored regression models. J Am Stat Assoc 2007;102:527-37.
"""

from __future__ import annotations

from collections.abc import Mapping

import numpy as np

from workbench.errors import SpecError
from workbench.figures.style import (
    BAND_ALPHA,
    NEUTRAL,
    figure_and_axes,
    model_styles,
    style_context,
)
from workbench.figures.ticks import format_number, time_ticks
from workbench.metrics.td_auc import TimeDependentAUCResult, time_dependent_auc


def td_auc_by_model(y_train, y_test, risks: Mapping, times, *,
                    censoring: Mapping | None = None) -> dict[str, TimeDependentAUCResult]:
    """Call the AUC(t) metric for every model on the same grid of times.

    Parameters
    ----------
    y_train, y_test : structured outcome arrays
    risks : mapping of model name to RiskScores (evaluation rows)
    times : array-like
        Grid of horizons strictly inside the evaluation follow-up.
    censoring : mapping of model name to RowCensoring or None, optional
        Per-row censoring weights (external cohorts: those of the validation table).
    """
    cens = censoring or {}
    return {name: time_dependent_auc(y_train, y_test, r, times, censoring=cens.get(name))
            for name, r in risks.items()}


def plot_td_auc(
    results: Mapping[str, TimeDependentAUCResult],
    *,
    ax=None,
    width: str | float = "single",
    time_unit: str = "",
    title: str = "",
    horizons=None,
    mean_auc: Mapping[str, float] | None = None,
    mean_window: str | None = None,
):
    """Draw AUC(t) curves with confidence bands, one per model.

    The legend gives each model's mean AUC and states its time window once, in the
    legend title. Pass ``mean_auc`` (and ``mean_window``) to show the study's own summary
    (the one in the results tables, over the study horizons); by default the mean over
    the drawn times is shown and the window is their first to last time.

    Parameters
    ----------
    results : mapping of model name to TimeDependentAUCResult
    ax : Axes, optional
    width : "single", "double" or millimetres
    time_unit : str
    title : str
    horizons : sequence of float, optional
        Study horizons, marked with faint vertical lines.

    Returns
    -------
    Figure, or the Axes when ``ax`` is given.
    """
    if not results:
        raise SpecError("plot_td_auc needs at least one model's TimeDependentAUCResult.")
    with style_context(width):
        fig, a = figure_and_axes(ax, width, aspect=0.72)
        styles = model_styles(results)
        for name, r in results.items():
            st = styles[name]
            a.fill_between(r.times, r.ci_lower, r.ci_upper, color=st.color, alpha=BAND_ALPHA, linewidth=0)
            m = r.mean_auc if mean_auc is None else mean_auc[name]
            a.plot(r.times, r.auc, color=st.color, linestyle=st.linestyle, label=f"{name} ({m:.2f})")
        a.axhline(0.5, color=NEUTRAL, lw=0.7, linestyle=(0, (2, 2)))
        for h in horizons or ():
            a.axvline(h, color=NEUTRAL, lw=0.4, alpha=0.5)
        lo = min(float(np.min(r.ci_lower)) for r in results.values())
        a.set_ylim(max(0.0, min(0.45, np.floor(lo * 20) / 20)), 1.0)
        unit = f" ({time_unit})" if time_unit else ""
        t_hi = max(float(np.max(r.times)) for r in results.values())
        t_lo = min(float(np.min(r.times)) for r in results.values())
        ticks = time_ticks(t_hi, time_unit, 7)
        if time_unit and ticks.size >= 3:  # the study's own steps (12, 24, 36 months ...)
            a.set_xticks(ticks, labels=[format_number(v) for v in ticks])
            a.set_xlim(min(t_lo, ticks[0]) if t_lo < ticks[1] else t_lo, t_hi)
        a.set_xlabel(f"Time{unit}")
        a.set_ylabel("Time-dependent AUC")
        if mean_window is None:
            first = next(iter(results.values()))
            mean_window = (f"{format_number(first.times[0])} to {format_number(first.times[-1])} "
                           f"{time_unit}").rstrip()
        heading = f"Model (mean AUC, {mean_window})"
        if ax is None:
            fig.legend(loc="outside lower center", ncols=1, fontsize="small", title=heading,
                       title_fontsize="small", alignment="left")
            if title:
                a.set_title(title, loc="left")
        else:
            a.legend(loc="lower right", title=heading, title_fontsize="small")
            if title:
                a.set_title(title, loc="left")
        return fig if ax is None else a
