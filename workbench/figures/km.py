"""Kaplan-Meier curves by risk group, with numbers at risk, log-rank test and hazard ratios.

:func:`km_by_group` does the arithmetic by calling the statistics layer
(:mod:`workbench.stats.km`, :mod:`workbench.stats.logrank`,
:mod:`workbench.stats.coxph`); :func:`plot_km_by_group` only draws its result.
Risk groups come from :func:`~workbench.figures.grouping.risk_groups`, with
cut-points fixed on the training rows.

References
----------
.. [1] Kaplan EL, Meier P. Nonparametric estimation from incomplete observations.
   J Am Stat Assoc 1958;53:457-81.
.. [2] Peto R, Peto J. Asymptotically efficient rank invariant test procedures.
   J R Stat Soc A 1972;135:185-207 (the log-rank test).
"""

from __future__ import annotations

import warnings
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from workbench.cohort.outcome import split_outcome
from workbench.errors import SpecError, WorkbenchWarning
from workbench.figures.grouping import RiskGroups, risk_groups
from workbench.figures.style import BAND_ALPHA, new_figure, series_style, style_context
from workbench.figures.ticks import format_number, nice_ticks
from workbench.stats.coxph import fit_coxph
from workbench.stats.km import KaplanMeierResult, kaplan_meier
from workbench.stats.logrank import LogRankResult, logrank_test

__all__ = ["KMByGroupResult", "km_by_group", "plot_km_by_group", "risk_groups"]


@dataclass(frozen=True)
class KMByGroupResult:
    """What a Kaplan-Meier-by-risk-group panel shows.

    Attributes
    ----------
    labels : tuple of str
        Group names, lowest risk first.
    curves : tuple of KaplanMeierResult
        One Kaplan-Meier estimate per group (95% log(-log) bands).
    tick_times : ndarray
        Times of the x-axis ticks and of the numbers-at-risk table.
    at_risk : ndarray of int, shape (n_groups, n_ticks)
        Patients still under observation (time >= tick) per group.
    logrank : LogRankResult
    hazard_ratios, hr_lower, hr_upper : ndarray of shape (n_groups - 1,)
        Hazard ratio of each higher group against the lowest, with 95% Wald
        limits, from a Cox model of the group indicators (Efron ties).
    cutpoints : ndarray
    time_unit : str
    """

    labels: tuple[str, ...]
    curves: tuple[KaplanMeierResult, ...]
    tick_times: np.ndarray
    at_risk: np.ndarray
    logrank: LogRankResult
    hazard_ratios: np.ndarray
    hr_lower: np.ndarray
    hr_upper: np.ndarray
    cutpoints: np.ndarray
    time_unit: str = ""


def km_by_group(
    y_eval,
    grouping: RiskGroups,
    *,
    tick_times: Sequence[float] | None = None,
    time_unit: str = "",
    conf_level: float = 0.95,
) -> KMByGroupResult:
    """Kaplan-Meier estimate, numbers at risk, log-rank test and hazard ratios per risk group.

    Parameters
    ----------
    y_eval : structured outcome array
        Outcomes of the evaluation patients, in the order of ``grouping.groups``.
    grouping : RiskGroups
        From :func:`risk_groups` (cut-points fixed on training rows).
    tick_times : sequence of float, optional
        Times for the axis and the at-risk table (default: round values over follow-up).
    time_unit : str
    conf_level : float
    """
    time, event = split_outcome(y_eval)
    g = np.asarray(grouping.groups)
    if g.size != time.size:
        raise SpecError(
            f"{g.size} risk-group labels for {time.size} outcomes; group and outcome the same evaluation patients."
        )
    present = np.unique(g)
    if present.size < 2:
        raise SpecError(
            "all evaluation patients fall into one risk group, so groups cannot be compared; "
            "check the cut-points or use fewer groups."
        )
    labels = tuple(grouping.labels[k] for k in present)
    curves = tuple(kaplan_meier(time[g == k], event[g == k], conf_level=conf_level) for k in present)
    ticks = (np.asarray(tick_times, dtype=float) if tick_times is not None
             else nice_ticks(0.0, float(time.max()), 7))
    ticks = ticks[ticks <= time.max()]
    at_risk = np.array([[int(np.sum(time[g == k] >= t)) for t in ticks] for k in present])
    lr = logrank_test(time, event, g)
    X = (g[:, None] == present[None, 1:]).astype(float)
    with warnings.catch_warnings():
        # a few groups with many events: the events-per-parameter warning is not meant for this
        warnings.simplefilter("ignore", WorkbenchWarning)
        fit = fit_coxph(X, time, event, ties="efron", names=[f"group={lab}" for lab in labels[1:]])
    return KMByGroupResult(
        labels=labels, curves=curves, tick_times=ticks, at_risk=at_risk, logrank=lr,
        hazard_ratios=np.exp(fit.coef), hr_lower=np.exp(fit.ci_lower), hr_upper=np.exp(fit.ci_upper),
        cutpoints=grouping.cutpoints, time_unit=time_unit,
    )


def _step(km: KaplanMeierResult, values):
    x = np.r_[0.0, km.times]
    return x, np.r_[1.0, values]


def _p_text(p: float) -> str:
    return "p < 0.001" if p < 0.001 else f"p = {p:.3f}"


def plot_km_by_group(
    result: KMByGroupResult,
    *,
    ax=None,
    width: str | float = "single",
    title: str = "",
    show_at_risk: bool = True,
):
    """Draw Kaplan-Meier curves by risk group with bands, numbers at risk and test results.

    Parameters
    ----------
    result : KMByGroupResult
        From :func:`km_by_group`.
    ax : matplotlib Axes, optional
        Draw the curves into it (the at-risk table is then written under its
        x-axis as text) and return it.
    width : "single", "double" or millimetres
    title : str
    show_at_risk : bool

    Returns
    -------
    Figure, or the Axes when ``ax`` is given.
    """
    with style_context(width):
        if ax is None:
            fig = new_figure(width, aspect=0.9)
            gs = fig.add_gridspec(2, 1, height_ratios=(4.2, 0.35 + 0.3 * len(result.labels)))
            ax_main = fig.add_subplot(gs[0])
            ax_tab = fig.add_subplot(gs[1], sharex=ax_main) if show_at_risk else None
            out = fig
        else:
            ax_main, ax_tab, out = ax, None, ax
        for i, (lab, km) in enumerate(zip(result.labels, result.curves, strict=True)):
            st = series_style(i)
            x, s = _step(km, km.survival)
            ax_main.step(x, s, where="post", color=st.color, linestyle=st.linestyle, label=lab)
            _, lo = _step(km, km.ci_lower)
            _, hi = _step(km, km.ci_upper)
            ax_main.fill_between(x, lo, hi, step="post", color=st.color, alpha=BAND_ALPHA, linewidth=0)
            cens = km.censored > 0
            ax_main.plot(km.times[cens], km.survival[cens], linestyle="none", marker="|", ms=3,
                         color=st.color, mew=0.6)
        ax_main.set_ylim(0, 1.02)
        ax_main.set_xlim(0, result.tick_times[-1] if result.tick_times.size else None)
        ax_main.set_xticks(result.tick_times)
        ax_main.set_ylabel("Survival probability")
        unit = f" ({result.time_unit})" if result.time_unit else ""
        lines = [f"Log-rank {_p_text(result.logrank.p_value)}"]
        for lab, hr, lo, hi in zip(result.labels[1:], result.hazard_ratios, result.hr_lower,
                                   result.hr_upper, strict=True):
            lines.append(f"HR {lab} vs {result.labels[0]}: {hr:.2f} ({lo:.2f}-{hi:.2f})")
        ax_main.text(0.98, 0.98, "\n".join(lines), transform=ax_main.transAxes, ha="right", va="top",
                     fontsize="small", linespacing=1.15)
        if ax is None:
            # above the panel, where no curve can be hidden behind it
            ax_main.legend(loc="lower left", bbox_to_anchor=(0.0, 1.0), ncols=len(result.labels),
                           handlelength=2.2, columnspacing=1.2, borderaxespad=0.2)
            if title:
                ax_main.set_title(title, loc="left", pad=16)
        else:
            ax_main.legend(loc="lower left", title="Risk group", title_fontsize="small", handlelength=2.2)
            if title:
                ax_main.set_title(title, loc="left")
        if ax_tab is not None:
            ax_main.tick_params(labelbottom=False)
            ax_tab.set_xlabel(f"Time{unit}")
            n = len(result.labels)
            for i, row in enumerate(result.at_risk):
                y = n - 1 - i
                for t, v in zip(result.tick_times, row, strict=True):
                    ax_tab.text(t, y, str(int(v)), ha="center", va="center", fontsize="small",
                                color=series_style(i).color)
            ax_tab.set_ylim(-0.6, n - 0.4)
            ax_tab.set_yticks(range(n), labels=list(reversed(result.labels)), fontsize="small")
            ax_tab.tick_params(axis="y", length=0, pad=8)
            ax_tab.spines[["left", "top", "right"]].set_visible(False)
            ax_tab.set_title("Number at risk", loc="left", fontsize="small", pad=2)
        else:
            ax_main.set_xlabel(f"Time{unit}")
        if ax_tab is not None:
            ax_tab.set_xticks(result.tick_times, labels=[format_number(t) for t in result.tick_times])
        return out
