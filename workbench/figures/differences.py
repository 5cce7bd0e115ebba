"""Model minus baseline as curves: AUC over time and net benefit over thresholds, internal beside external.

Draws :class:`workbench.validation.difference_bands.DifferenceBand` objects (computed
in the validation layer); nothing is computed here. Rows are the two quantities,
columns the settings, and each row shares its vertical scale so internal and
external can be compared by eye. A band is drawn where the difference has one;
points with bars where the difference exists at the study horizons only.
"""

from __future__ import annotations

from collections.abc import Mapping

import numpy as np

from workbench.errors import SpecError
from workbench.figures.style import BAND_ALPHA, NEUTRAL, model_styles, new_figure, style_context
from workbench.figures.ticks import format_number, time_ticks
from workbench.units import unit_for

__all__ = ["plot_difference_curves"]

_SETTING = {"internal": "Internal validation", "external": "External cohort"}


def _x_end(row) -> float:
    """Right end of a row's threshold axes: the widest of its bands' ``x_max`` (same scale side by side)."""
    ends = [b.x_max for b in row if b is not None and np.isfinite(getattr(b, "x_max", np.nan))]
    return max(ends) if ends else max(float(b.x.max()) for b in row if b is not None)


def _panel(a, b, colour, linestyle, marker):
    if b.x.size <= 6 and b.quantity == "auc" and b.setting == "internal":
        ok = np.isfinite(b.estimate)
        lo, hi = b.lower[ok], b.upper[ok]
        err = np.vstack([np.where(np.isfinite(lo), b.estimate[ok] - lo, 0.0),
                         np.where(np.isfinite(hi), hi - b.estimate[ok], 0.0)])
        cont = a.errorbar(b.x[ok], b.estimate[ok], yerr=err, color=colour, marker=marker, linestyle="none",
                          capsize=2.0, elinewidth=0.9, ms=3.5)
        cont.lines[0].set_gid("difference")
        return
    finite = np.isfinite(b.lower) & np.isfinite(b.upper)
    if finite.any():
        band = a.fill_between(b.x, np.where(finite, b.lower, np.nan), np.where(finite, b.upper, np.nan),
                              color=colour, alpha=BAND_ALPHA, linewidth=0)
        band.set_gid("band")
    (line,) = a.plot(b.x, b.estimate, color=colour, linestyle=linestyle)
    line.set_gid("difference")


def plot_difference_curves(bands: Mapping[str, Mapping[str, object]], *, width: str | float = "double",
                           time_unit: str = "", model_label: str = "", baseline_label: str = ""):
    """Draw model-minus-baseline AUC(t) and net benefit, one column per setting.

    Parameters
    ----------
    bands : mapping quantity -> setting -> DifferenceBand
        Quantities "auc" and/or "net_benefit"; settings "internal" and/or "external"
        (a missing or None entry leaves its panel out).
    width : "single", "double" or millimetres
    time_unit : str
    model_label, baseline_label : str
        Names for the legend ("Clinical + imaging signature minus Clinical").

    Returns
    -------
    Figure
    """
    rows = [q for q in ("auc", "net_benefit") if any(v is not None for v in (bands.get(q) or {}).values())]
    cols = [s for s in ("internal", "external") if any((bands.get(q) or {}).get(s) is not None for q in rows)]
    if not rows or not cols:
        raise SpecError("plot_difference_curves needs at least one DifferenceBand.")
    first = next(b for q in rows for b in bands[q].values() if b is not None)
    st = model_styles([first.model])[first.model]
    with style_context(width):
        fig = new_figure(width, aspect=0.62 * len(rows) / max(1.0, len(cols) / 1.4)
                         if width != "single" else 0.58 * len(rows) * (1.25 if len(cols) > 1 else 1.0))
        axes = fig.subplots(len(rows), len(cols), squeeze=False, sharey="row")
        for i, q in enumerate(rows):
            for k, s in enumerate(cols):
                a = axes[i][k]
                b = (bands.get(q) or {}).get(s)
                a.axhline(0.0, color=NEUTRAL, lw=0.7, linestyle=(0, (2, 2)))
                if b is None:
                    a.text(0.5, 0.5, "not available", transform=a.transAxes, ha="center", va="center",
                           color=NEUTRAL, fontsize="small")
                    continue
                _panel(a, b, st.color, st.linestyle, st.marker)
                if q == "auc":
                    hi = float(np.max(b.x))
                    ticks = time_ticks(hi, time_unit, 5)
                    if time_unit and ticks.size >= 2:
                        a.set_xticks(ticks, labels=[format_number(v) for v in ticks])
                    a.set_xlim(0.0, hi * 1.06)
                    a.set_xlabel(f"Time ({time_unit})" if time_unit else "Time")
                else:
                    a.set_xlim(0.0, _x_end([(bands.get(q) or {}).get(c) for c in cols]))
                    sep = "\n" if width == "single" and len(cols) > 1 else " "
                    a.set_xlabel(f"Threshold risk{sep}by {format_number(b.horizon)} {unit_for(b.horizon, time_unit)}".rstrip())
                if i == 0:
                    a.set_title(_SETTING[s], loc="left")
            axes[i][0].set_ylabel("AUC difference" if q == "auc" else "Net benefit difference")
            # vertical scale from what lies inside the drawn x-range (the row shares it)
            right = axes[i][0].get_xlim()[1]
            vals = np.concatenate([np.r_[b.estimate, b.lower, b.upper][np.r_[b.x, b.x, b.x] <= right + 1e-9]
                                   for b in ((bands.get(q) or {}).get(c) for c in cols) if b is not None])
            vals = vals[np.isfinite(vals)]
            if vals.size:
                lo, hi = min(float(vals.min()), 0.0), max(float(vals.max()), 0.0)
                pad = 0.08 * (hi - lo) if hi > lo else 0.01
                axes[i][0].set_ylim(lo - pad, hi + pad)
        from matplotlib.lines import Line2D
        from matplotlib.patches import Patch

        who = f"{model_label or first.model} minus {baseline_label or first.baseline}"
        handles = [Line2D([], [], color=st.color, linestyle=st.linestyle, label=who),
                   Patch(color=st.color, alpha=BAND_ALPHA + 0.1, label="95% paired bootstrap band / interval"),
                   Line2D([], [], color=NEUTRAL, lw=0.7, linestyle=(0, (2, 2)), label="No difference")]
        fig.legend(handles=handles, loc="outside lower center", ncols=1 if width == "single" else 3,
                   fontsize="small")
        return fig
