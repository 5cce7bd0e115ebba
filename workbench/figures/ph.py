"""Proportional-hazards diagnostics: scaled Schoenfeld residuals over time, per model term.

Each panel shows the scaled residuals of one design column against follow-up
time (in the study's unit) with a smooth (least-squares restricted cubic spline with 4 knots and a
+-2 SE band), the constant-effect estimate, and the Grambsch-Therneau test
p-value from :func:`workbench.stats.schoenfeld.proportional_hazards_test`. A
smooth that wanders away from the horizontal line suggests an effect that
changes over time.

References
----------
.. [1] Grambsch PM, Therneau TM. Proportional hazards tests and diagnostics based
   on weighted residuals. Biometrika 1994;81:515-26.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence

import numpy as np

from workbench.errors import SpecError
from workbench.figures.style import (
    BAND_ALPHA,
    NEUTRAL,
    PALETTE,
    base_font_size,
    new_figure,
    style_context,
)
from workbench.figures.ticks import format_number, time_ticks
from workbench.preprocess.splines import rcs_basis
from workbench.stats.schoenfeld import PHTestResult


def residual_smooth(x, y, n_knots: int = 4, grid_size: int = 100):
    """Least-squares restricted cubic spline smooth of y on x with a pointwise +-2 SE band.

    Knots sit at equally spaced quantiles (5th to 95th) of x; returns
    ``(grid, fit, lower, upper)``.
    """
    x, y = np.asarray(x, float), np.asarray(y, float)
    knots = np.unique(np.quantile(x, np.linspace(0.05, 0.95, n_knots)))
    def design(v):
        basis = rcs_basis(v, knots) if knots.size >= 3 else v[:, None]
        return np.column_stack([np.ones(v.size), basis])
    X = design(x)
    coef, *_ = np.linalg.lstsq(X, y, rcond=None)
    resid = y - X @ coef
    dof = max(x.size - X.shape[1], 1)
    cov = np.linalg.pinv(X.T @ X) * float(resid @ resid) / dof
    grid = np.linspace(x.min(), x.max(), grid_size)
    G = design(grid)
    fit = G @ coef
    se = np.sqrt(np.maximum(np.einsum("ij,jk,ik->i", G, cov, G), 0.0))
    return grid, fit, fit - 2 * se, fit + 2 * se


def plot_schoenfeld(
    result: PHTestResult,
    *,
    terms: Sequence[str] | None = None,
    ncols: int | None = None,
    width: str | float = "double",
    axes=None,
    time_unit: str = "",
    labels: Mapping[str, str] | None = None,
):
    """How each term's log hazard ratio changes over follow-up, one panel per design column.

    Each panel plots the scaled Schoenfeld residuals (the term's log hazard ratio at each
    event time) against follow-up time in the study's own unit, a smooth with its band,
    and a labelled horizontal line at the model's constant estimate. The test of a
    constant effect (Grambsch-Therneau, on the time scale the test used) is stated under
    the term's name.

    Parameters
    ----------
    result : PHTestResult
        From ``model.ph_test(training_cohort)``.
    terms : sequence of str, optional
        Design columns to show (default: all).
    ncols : int, optional
        Panels per row (default 3 at double width, 2 at single width).
    width : "single", "double" or millimetres
    axes : sequence of Axes, optional
        One Axes per shown term; the Figure is then not created here.
    time_unit : str
        Unit of follow-up time, for the axis label and the ticks (12, 24, 36 months ...).
    labels : mapping of design column to a readable name, optional

    Returns
    -------
    Figure (or the first Axes' Figure when ``axes`` is given).
    """
    names = list(result.names)
    show = names if terms is None else list(terms)
    unknown = [t for t in show if t not in names]
    if unknown:
        raise SpecError(f"no PH test for {unknown}; the model's columns are {names}.")
    if ncols is None:
        ncols = 2 if width == "single" or (not isinstance(width, str) and float(width) < 120) else 3
    res = result.residuals
    t_ev = np.asarray(res.event_times, float)
    ticks = time_ticks(float(t_ev.max()), time_unit, max_ticks=5)
    unit = f" ({time_unit})" if time_unit else ""
    with style_context(width):
        if axes is None:
            nrows = int(np.ceil(len(show) / ncols))
            fig = new_figure(width)
            fs_in = base_font_size(width) / 72.0
            panel_w = fig.get_figwidth() / ncols
            fig.set_figheight(nrows * (0.62 * panel_w + 4.5 * fs_in) + 3 * fs_in)
            grid = np.atleast_1d(fig.subplots(nrows, ncols, squeeze=False).ravel())
            for a in grid[len(show):]:
                a.set_axis_off()
        else:
            grid = list(axes)
            fig = grid[0].figure
        for k, (a, name) in enumerate(zip(grid, show, strict=False)):
            j = names.index(name)
            y = np.asarray(res.scaled[:, j], float)
            a.scatter(t_ev, y, s=2.5, color=NEUTRAL, alpha=0.45, linewidths=0, gid="scaled_residuals")
            xs, fit, lo, hi = residual_smooth(t_ev, y)
            a.fill_between(xs, lo, hi, color=PALETTE[0], alpha=BAND_ALPHA, linewidth=0)
            a.plot(xs, fit, color=PALETTE[0], lw=1.1, gid="smooth")
            const = float(np.mean(y))
            a.axhline(const, color=PALETTE[1], lw=0.9, linestyle=(0, (4, 2)), gid="constant_effect")
            lo_y, hi_y = np.quantile(y, [0.02, 0.98])
            pad = 0.25 * (hi_y - lo_y)
            a.set_ylim(min(lo_y, lo.min()) - pad, max(hi_y, hi.max()) + pad)
            a.annotate("constant effect", (1.0, const), xycoords=("axes fraction", "data"), xytext=(0, 2),
                       textcoords="offset points", ha="right", va="bottom", fontsize="small",
                       color=PALETTE[1])
            p = float(result.p_value[j])
            label = (labels or {}).get(name, name)
            test = f"constant-effect test p = {p:.3f}" if p >= 0.001 else "constant-effect test p < 0.001"
            a.set_title(f"{label}\n{test}", loc="left", fontsize="small", linespacing=1.2)
            a.set_xticks(ticks, labels=[format_number(v) for v in ticks])
            a.set_xlim(0, max(float(t_ev.max()), float(ticks[-1])))
            a.set_xlabel(f"Follow-up{unit}" if k >= len(show) - ncols else "", fontsize="small")
            a.set_ylabel("log hazard ratio" if k % ncols == 0 else "", fontsize="small")
        if axes is None:
            fig.suptitle("Change in log hazard ratio over follow-up (points: one per event; line: smooth "
                         "with 95% band)" if width != "single" else
                         "Change in log hazard ratio over follow-up\n(points: one per event; smooth with 95% band)",
                         x=0.01, ha="left", fontsize="medium")
        return fig
