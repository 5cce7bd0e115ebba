"""Did harmonisation work? Before/after arrows of the scanner checks, per cohort.

Draws the ``harmonisation`` block of results.json (see
:func:`workbench.preprocess.harmonisation_checks.study_checks`): for the development
cohort (and the external cohort when there is one) one row per check, an open marker
before and a filled marker after ComBat joined by an arrow. "Scanner shifts / scales a
feature": share of features whose scanner location / scale test has a Benjamini-Hochberg
q-value below the FDR (0.05); "Scanner predictable": the cross-validated scanner-classifier
AUC (dashed tick: 0.5, no scanner signal); "Feature linked to X": share of features
associated with the protected covariate X. Scanner effects should
move left (towards no feature flagged, and a classifier AUC of 0.5); the shares of
features associated with a protected covariate should stay where they were.
"""

from __future__ import annotations

from collections.abc import Mapping

import numpy as np

from workbench.errors import SpecError
from workbench.figures.style import INK, NEUTRAL, PALETTE, new_figure, style_context

BEFORE, AFTER = NEUTRAL, PALETTE[0]
COHORT_TITLES = {"development": "Development cohort", "external": "External cohort"}


def _rows(block: Mapping) -> list[tuple[str, float, float, str]]:
    b, a = block["before"], block["after"]
    rows = [("Scanner shifts a feature", b["location_share"], a["location_share"], "share"),
            ("Scanner scales a feature", b["scale_share"], a["scale_share"], "share"),
            ("Scanner predictable (AUC)", b["classifier_auc"], a["classifier_auc"], "auc")]
    for name in b.get("covariate_share", {}):
        rows.append((f"Feature linked to {name}", b["covariate_share"][name],
                     a["covariate_share"].get(name, np.nan), "share"))
    return rows


def plot_harmonisation_checks(checks: Mapping, *, width: str | float = "double", title: str = ""):
    """One panel per cohort of before/after harmonisation checks (a Figure).

    Parameters
    ----------
    checks : mapping
        The ``harmonisation`` block of results.json: "development" (and "external"),
        each with "before" and "after" check dicts, and "fdr".
    width : "single", "double" or millimetres
        At single width the cohorts are stacked.
    """
    cohorts = [c for c in ("development", "external") if c in (checks or {})]
    if not cohorts:
        raise SpecError("plot_harmonisation_checks needs the 'harmonisation' block of a run with ComBat.")
    rows = {c: _rows(checks[c]) for c in cohorts}
    n_rows = max(len(r) for r in rows.values())
    stacked = width == "single" or (not isinstance(width, str) and float(width) < 120)
    per_panel = 0.085 * n_rows + 0.12
    aspect = per_panel * (len(cohorts) if stacked else 1) * (1.0 if stacked else 0.55) + 0.05
    with style_context(width):
        fig = new_figure(width, aspect)
        grid = fig.subplots(len(cohorts), 1, squeeze=False) if stacked else fig.subplots(1, len(cohorts),
                                                                                         squeeze=False)
        axes = grid.ravel()
        for k, (ax, c) in enumerate(zip(axes, cohorts, strict=True)):
            r = rows[c]
            y = np.arange(len(r))[::-1]
            for yi, (_, before, after, kind) in zip(y, r, strict=True):
                if kind == "auc":
                    ax.plot([0.5, 0.5], [yi - 0.32, yi + 0.32], color=NEUTRAL, lw=0.8, linestyle=(0, (2, 1.5)))
                if np.isfinite(before) and np.isfinite(after) and abs(after - before) > 0.02:
                    ax.annotate("", xy=(after, yi), xytext=(before, yi),
                                arrowprops={"arrowstyle": "-|>", "color": INK, "lw": 0.7,
                                            "shrinkA": 3, "shrinkB": 3, "mutation_scale": 7})
                ax.plot([before], [yi], marker="o", mfc="white", mec=BEFORE, mew=1.1, ms=5, linestyle="none",
                        gid="before")
                ax.plot([after], [yi], marker="o", color=AFTER, ms=5, linestyle="none", gid="after")
            ax.set_yticks(y, labels=[lab for lab, *_ in r])
            if not stacked and k > 0:
                ax.tick_params(axis="y", labelleft=False)  # the rows are named once, on the left
            ax.set_ylim(-0.7, len(r) - 0.3)
            ax.set_xlim(-0.02, 1.02)
            ax.tick_params(axis="y", length=0)
            ax.grid(axis="x", color="#E4E4E4", lw=0.5)
            ax.set_axisbelow(True)
            n = checks[c]["before"]["n"]
            ax.set_title(f"{COHORT_TITLES[c]}, {n} patients", loc="left", fontsize="medium")
            ax.set_xlabel("Share of features, or AUC")
        from matplotlib.lines import Line2D

        handles = [Line2D([], [], marker="o", mfc="white", mec=BEFORE, mew=1.1, ms=5, linestyle="none",
                          label="before ComBat"),
                   Line2D([], [], marker="o", color=AFTER, ms=5, linestyle="none", label="after ComBat")]
        fig.legend(handles=handles, loc="outside lower center", ncols=2, fontsize="small", frameon=False)
        if title:
            fig.suptitle(title, x=0.01, ha="left", fontsize="medium")
    return fig
