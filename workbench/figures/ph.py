"""Proportional-hazards diagnostics: scaled Schoenfeld residuals over time, per model term.

Each panel shows the scaled residuals of one design column against transformed
time with a smooth (least-squares restricted cubic spline with 4 knots and a
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

from collections.abc import Sequence

import numpy as np

from workbench.errors import SpecError
from workbench.figures.style import BAND_ALPHA, NEUTRAL, PALETTE, new_figure, style_context
from workbench.figures.ticks import format_number
from workbench.preprocess.splines import rcs_basis
from workbench.stats.schoenfeld import PHTestResult

_TRANSFORM_LABEL = {"km": "Time (Kaplan-Meier scale)", "rank": "Time (rank scale)", "identity": "Time",
                    "log": "Time (log scale)"}


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
    ncols: int = 3,
    width: str | float = "double",
    axes=None,
):
    """Scaled Schoenfeld residuals against transformed time, one panel per design column.

    Parameters
    ----------
    result : PHTestResult
        From ``model.ph_test(training_cohort)``.
    terms : sequence of str, optional
        Design columns to show (default: all).
    ncols : int
    width : "single", "double" or millimetres
    axes : sequence of Axes, optional
        One Axes per shown term; the Figure is then not created here.

    Returns
    -------
    Figure (or the first Axes' Figure when ``axes`` is given).
    """
    names = list(result.names)
    show = names if terms is None else list(terms)
    unknown = [t for t in show if t not in names]
    if unknown:
        raise SpecError(f"no PH test for {unknown}; the model's columns are {names}.")
    res = result.residuals
    g = np.asarray(result.transformed_times, float)
    t_ev = np.asarray(res.event_times, float)
    order = np.argsort(t_ev, kind="stable")
    with style_context(width):
        if axes is None:
            nrows = int(np.ceil(len(show) / ncols))
            fig = new_figure(width, aspect=0.3 * nrows * 3 / ncols + 0.05)
            grid = np.atleast_1d(fig.subplots(nrows, ncols, squeeze=False).ravel())
            for a in grid[len(show):]:
                a.set_axis_off()
        else:
            grid = list(axes)
            fig = grid[0].figure
        for a, name in zip(grid, show, strict=False):
            j = names.index(name)
            y = np.asarray(res.scaled[:, j], float)
            a.scatter(g, y, s=2.5, color=NEUTRAL, alpha=0.45, linewidths=0, gid="scaled_residuals")
            xs, fit, lo, hi = residual_smooth(g, y)
            a.fill_between(xs, lo, hi, color=PALETTE[0], alpha=BAND_ALPHA, linewidth=0)
            a.plot(xs, fit, color=PALETTE[0], lw=1.1)
            a.axhline(float(np.mean(y)), color=PALETTE[1], lw=0.9, linestyle=(0, (4, 2)))
            a.axhline(0.0, color=NEUTRAL, lw=0.5)
            lo_y, hi_y = np.quantile(y, [0.02, 0.98])
            pad = 0.25 * (hi_y - lo_y)
            a.set_ylim(min(lo_y, lo.min()) - pad, max(hi_y, hi.max()) + pad)
            p = float(result.p_value[j])
            a.set_title(f"{name}   (p = {p:.3f})" if p >= 0.001 else f"{name}   (p < 0.001)",
                        loc="left", fontsize="small")
            if result.time_transform in ("km", "rank", "log"):
                # ticks evenly spread on the drawn scale, labelled in rounded original times
                gs, ts = g[order], t_ev[order]
                targets = np.linspace(gs.min(), gs.max(), 5)[1:-1]
                tv = np.unique([float(format_number(v, 2)) for v in np.interp(targets, gs, ts)])
                a.set_xticks(np.interp(tv, ts, gs), labels=[format_number(v) for v in tv])
            a.set_xlabel(_TRANSFORM_LABEL.get(result.time_transform, "Time"), fontsize="small")
            a.set_ylabel("Beta(t)", fontsize="small")
        return fig
