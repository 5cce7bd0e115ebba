"""Calibration in each hospital and on each scanner: observed/expected with the random-effects pooling.

Draws the per-level estimates and the pooled results of
:class:`workbench.validation.groups.GroupBlock` (computed by the validation layer:
percentile intervals per level, DerSimonian-Laird or REML pooling on the log scale,
prediction interval for a new site); nothing is computed here. One row per centre
or scanner, one marker per model; under each grouping the pooled estimate (a
diamond spanning its confidence interval) and the prediction interval (a thin
line). Levels the development data never had (an unseen scanner) are marked.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence

import numpy as np

from workbench.errors import SpecError
from workbench.figures.style import (
    INK,
    NEUTRAL,
    base_font_size,
    model_styles,
    new_figure,
    style_context,
)
from workbench.figures.ticks import format_number
from workbench.units import unit_for

__all__ = ["plot_site_calibration", "site_rows"]

UNSEEN_MARK = "unseen"
"""Suffix of a level absent from the development data (explained in the legend)."""
_GROUPING = {"centre": "By centre", "scanner": "By scanner"}


def site_rows(groups: Mapping, metric: str, models: Sequence[str]) -> list[dict]:
    """The rows the figure draws, top to bottom (also what the drawn-data tests compare with).

    Each row: kind ("header", "level", "pooled"), grouping, level, n, and per model the
    estimate with its interval (levels) or the pooled estimate, its interval and the
    prediction interval.
    """
    out = []
    for name, g in groups.items():
        out.append({"kind": "header", "grouping": name})
        for lev in g.levels:
            vals = {}
            for m in models:
                e = (g.estimates.get(m) or {}).get(lev, {}).get(metric)
                if e is not None:
                    vals[m] = (e.estimate, e.ci_lower, e.ci_upper)
            out.append({"kind": "level", "grouping": name, "level": lev, "n": g.n.get(lev),
                        "events": g.n_events.get(lev), "values": vals})
        pooled = {}
        for m in models:
            p = (g.pooled.get(m) or {}).get(metric)
            if p is not None:
                pooled[m] = (p.estimate, p.ci_lower, p.ci_upper, p.pi_lower, p.pi_upper)
        if pooled:
            out.append({"kind": "pooled", "grouping": name, "values": pooled,
                        "k": len(g.levels), "method": g.pooling_method})
    return out


def _finite(*xs) -> bool:
    return all(x is not None and np.isfinite(x) and x > 0 for x in xs)


def plot_site_calibration(groups: Mapping, *, horizon: float, models: Sequence[str], labels: Mapping | None = None,
                          unseen: Sequence[str] = (), width: str | float = "double", time_unit: str = "",
                          title: str = ""):
    """Forest plot of observed/expected at ``horizon`` per centre and per scanner, pooled.

    Parameters
    ----------
    groups : mapping grouping -> GroupBlock
        From ``ValidationResult.groups`` (external: "centre" and "scanner").
    horizon : float
        One of the run's horizons.
    models : sequence of str
        Model keys to draw (each its own marker and colour).
    labels : mapping model key -> legend label, optional
    unseen : sequence of str
        Levels (scanners) absent from the development data; their rows are marked.
    width : "single", "double" or millimetres
    time_unit, title : str

    Returns
    -------
    Figure
    """
    metric = f"oe_ratio@{float(horizon):g}"
    rows = site_rows(groups, metric, models)
    if not any(r["kind"] == "level" and r["values"] for r in rows):
        raise SpecError(f"no per-centre or per-scanner observed/expected at {horizon:g} to draw; the run has "
                        "no groups (centre or scanner column) or none could be evaluated.")
    labels = dict(labels or {})
    styles = model_styles(list(models))
    unseen = {str(u) for u in unseen}
    fs = base_font_size(width)
    n_rows = len(rows)
    with style_context(width):
        fig = new_figure(width, aspect=1.0)
        fig.set_figheight(((n_rows + 0.4 * sum(r["kind"] == "pooled" for r in rows)) * 2.6 * fs
                           + (13.0 if width == "single" else 9.0) * fs) / 72.0)
        a = fig.add_subplot()
        a.set_xscale("log")
        a.axvline(1.0, color=NEUTRAL, lw=0.8)
        step = 0.22 if len(models) > 1 else 0.0
        offsets = {m: (i - (len(models) - 1) / 2) * step for i, m in enumerate(models)}
        ylabels, xs, wide = [], [1.0], []
        ypos, y = [], 0.0
        for r in rows:  # the pooled row is taller: two diamonds and their prediction intervals
            y -= 1.4 if r["kind"] == "pooled" else 1.0
            ypos.append(y + (0.2 if r["kind"] == "pooled" else 0.0))
        for i, r in enumerate(rows):
            y = ypos[i]
            if r["kind"] == "header":
                ylabels.append((y, _GROUPING.get(r["grouping"], r["grouping"]), "header"))
                continue
            if r["kind"] == "level":
                flag = r["grouping"] == "scanner" and str(r["level"]) in unseen
                text = f"{r['level']} ({r['n']})" + (f", {UNSEEN_MARK}" if flag else "")
                ylabels.append((y, text, "unseen" if flag else "level"))
                for m, (est, lo, hi) in r["values"].items():
                    if not _finite(est):
                        continue
                    yy = y + offsets[m]
                    if _finite(lo, hi):
                        a.hlines(yy, lo, hi, color=styles[m].color, lw=1.0).set_gid(f"ci:{m}")
                        xs += [lo, hi]
                    (pt,) = a.plot([est], [yy], linestyle="none", marker=styles[m].marker, ms=3.6,
                                   color=styles[m].color, mfc="white" if flag else styles[m].color)
                    pt.set_gid(f"level:{r['grouping']}:{r['level']}:{m}")
                    xs.append(est)
                continue
            ylabels.append((y, "Pooled, random effects", "pooled"))
            for m, (est, lo, hi, plo, phi) in r["values"].items():
                if not _finite(est):
                    continue
                yy = y + 1.6 * offsets[m]
                if _finite(plo, phi):
                    (pi,) = a.plot([plo, phi], [yy, yy], color=styles[m].color, lw=0.8, linestyle=(0, (1, 1)))
                    pi.set_gid(f"pi:{r['grouping']}:{m}")
                    wide.append((plo, phi, yy, styles[m].color))
                if _finite(lo, hi):
                    h = 0.15 if step else 0.22
                    (dia,) = a.fill([lo, est, hi, est], [yy, yy + h, yy, yy - h], color=styles[m].color,
                                    linewidth=0)
                    dia.set_gid(f"pooled:{r['grouping']}:{m}")
                    xs += [lo, hi]
                else:
                    a.plot([est], [yy], marker="D", color=styles[m].color, linestyle="none", ms=3.6)
        lo_x, hi_x = min(xs) / 1.3, max(xs) * 1.3
        for plo, phi, yy, colour in wide:
            # a prediction interval from few sites can be very wide: drawn to the panel edge, arrowed
            for end, edge, mk in ((plo, lo_x, "<"), (phi, hi_x, ">")):
                if (end < edge) if mk == "<" else (end > edge):
                    a.plot([edge], [yy], marker=mk, color=colour, ms=3.0, linestyle="none", clip_on=False)
        a.set_xlim(lo_x, hi_x)
        lo_x, hi_x = lo_x * 1.3, hi_x / 1.3
        cand = np.array([0.1, 0.2, 0.25, 0.5, 0.67, 1, 1.5, 2, 3, 4, 5, 10])
        ticks = cand[(cand >= lo_x / 1.3) & (cand <= hi_x * 1.3)]
        if ticks.size > 6:
            ticks = ticks[::2] if 1.0 in ticks[::2] else ticks[1::2]
        a.set_xticks(ticks, labels=[format_number(v) for v in ticks])
        a.minorticks_off()
        a.set_yticks([y for y, _, _ in ylabels], labels=[t for _, t, _ in ylabels])
        for tl, (_, _, kind) in zip(a.get_yticklabels(), ylabels, strict=True):
            if kind in ("header", "pooled"):
                tl.set_fontweight("bold")
            if kind == "unseen":
                tl.set_color("#8a4b00")
        a.tick_params(axis="y", length=0)
        a.spines["left"].set_visible(False)
        a.set_ylim(min(ypos) - 0.6, max(ypos) + 0.6)
        sep = "\n" if width == "single" else " "
        a.set_xlabel(f"Observed / expected by {format_number(horizon)} {unit_for(horizon, time_unit)}".replace("  ", " ") + f"{sep}(log scale)")
        if title:
            a.set_title(title, loc="left")
        from matplotlib.lines import Line2D
        from matplotlib.patches import Patch

        handles = [Line2D([], [], color=styles[m].color, marker=styles[m].marker, linestyle="-", lw=1.0,
                          label=labels.get(m, m)) for m in models]
        handles += [Patch(color=INK, label="Pooled estimate, 95% CI"),
                    Line2D([], [], color=INK, lw=0.8, linestyle=(0, (1, 1)),
                           label="95% prediction interval, new site (arrow: beyond the panel)")]
        if unseen:
            handles.append(Line2D([], [], color=INK, marker="o", mfc="white", linestyle="none",
                                  label=f"Open marker, \"{UNSEEN_MARK}\": scanner not in the development data"))
        fig.legend(handles=handles, loc="outside lower center", ncols=1 if width == "single" else 2,
                   fontsize="small")
        return fig
