"""Kaplan-Meier curves by risk group, with an at-risk strip and a caption giving the comparison.

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
from dataclasses import dataclass, replace

import numpy as np
from matplotlib.font_manager import font_scalings

from workbench.cohort.outcome import make_outcome, split_outcome
from workbench.errors import SpecError, WorkbenchWarning
from workbench.figures.grouping import RiskGroups, risk_groups
from workbench.figures.measure import wrap_to_width
from workbench.figures.style import (
    BAND_ALPHA,
    base_font_size,
    column_width_inches,
    new_figure,
    series_style,
    style_context,
)
from workbench.figures.ticks import format_number, time_ticks
from workbench.figures.wording import chi_squared_text
from workbench.stats.coxph import fit_coxph
from workbench.stats.km import KaplanMeierResult, kaplan_meier
from workbench.stats.logrank import LogRankResult, logrank_test
from workbench.units import time_phrase, unit_for

__all__ = ["KMByGroupResult", "km_by_group", "km_caption", "plot_km_by_group", "risk_groups"]


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
    ticks_given : bool
        The caller chose ``tick_times``: the figure keeps them (cut at the curves' end) rather
        than choosing ticks for the range it shows.
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
    ticks_given: bool = False


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
             else time_ticks(float(time.max()), time_unit, 7))
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
        cutpoints=grouping.cutpoints, time_unit=time_unit, ticks_given=tick_times is not None,
    )


def conditional_km_by_group(y_eval, grouping: RiskGroups, since: float, *, time_unit: str = "",
                            conf_level: float = 0.95) -> KMByGroupResult:
    """:func:`km_by_group` of the patients still followed at ``since`` (a follow-up visit), with
    time counted from it: each curve is the group's conditional survival S(since + u | alive at
    since) (Kaplan-Meier on the patients at risk at ``since`` is the ratio KM(t) / KM(since))."""
    time, event = split_outcome(y_eval)
    keep = time > float(since)
    if keep.sum() < 2:
        raise SpecError(f"fewer than two patients are followed beyond {time_phrase(since, time_unit)}; nothing to show.")
    sub = replace(grouping, groups=np.asarray(grouping.groups)[keep])
    return km_by_group(make_outcome(time[keep] - float(since), event[keep]), sub, time_unit=time_unit,
                       conf_level=conf_level)


def _step(km: KaplanMeierResult, values, min_at_risk: int = 0):
    """Step coordinates of a curve, cut after the last time with at least ``min_at_risk`` at risk."""
    keep = km.at_risk >= min_at_risk
    x = np.r_[0.0, km.times[keep]]
    return x, np.r_[1.0, np.asarray(values)[keep]]


def _shown_ticks(result: KMByGroupResult, min_at_risk: int) -> tuple[np.ndarray, np.ndarray]:
    """The time axis's ticks and at-risk columns, up to the first tick at or after the end of the
    longest curve: the axis does not run on over follow-up where every curve has stopped. Default
    ticks are chosen afresh for the shown range (so it keeps four or more); given ones are cut."""
    ticks = np.asarray(result.tick_times, dtype=float)
    at_risk = np.asarray(result.at_risk)
    ends = [float(km.times[km.at_risk >= min_at_risk].max()) for km in result.curves
            if np.any(km.at_risk >= min_at_risk)]
    t_max = max(float(km.times.max()) for km in result.curves)
    if not ticks.size or not ends or max(ends) >= t_max:
        return ticks, at_risk
    end = max(ends)
    if not result.ticks_given:
        new = time_ticks(end, result.time_unit, 7)
        if new.size > 1 and new[-1] < end and new[-1] + (new[1] - new[0]) <= t_max:
            new = np.r_[new, new[-1] + (new[1] - new[0])]
        counts = np.array([[_at_risk(km, t) for t in new] for km in result.curves])
        return new, counts
    n = max(min(int(np.searchsorted(ticks, end, side="left")) + 1, ticks.size), 2)
    return ticks[:n], at_risk[:, :n]


def _at_risk(km: KaplanMeierResult, t: float) -> int:
    """Patients of the curve still followed at ``t`` (time >= t), read off its risk sets."""
    k = int(np.searchsorted(km.times, t, side="left"))
    return int(round(float(km.at_risk[k]))) if k < km.times.size else 0


def km_caption(result: KMByGroupResult, *, development: bool = False, min_at_risk: int = 10) -> str:
    """The sentence printed under the curves: group comparison, hazard ratios, where curves stop.

    On the development cohort the comparison is described, not tested: the groups were
    formed from a model fitted to the same patients, so a p-value would overstate the
    evidence (it is left out).
    """
    hrs = "; ".join(
        f"{lab} vs {result.labels[0]} {hr:.2f} ({lo:.2f} to {hi:.2f})"
        for lab, hr, lo, hi in zip(result.labels[1:], result.hazard_ratios, result.hr_lower,
                                   result.hr_upper, strict=True)
    )
    if development:
        head = (f"Development cohort, descriptive only (groups from a model fitted to these patients). "
                f"Hazard ratios: {hrs}.")
    else:
        lr = result.logrank
        head = f"Log-rank {chi_squared_text(lr.statistic, lr.df, lr.p_value)}. Hazard ratios (95% CI): {hrs}."
    cuts = ", ".join(format_number(c, 3) for c in np.atleast_1d(result.cutpoints))
    where = f" Groups cut at {cuts} on the risk score (fixed on the training patients)." if cuts else ""
    return f"{head}{where} Curves stop when fewer than {min_at_risk} patients remain at risk."


def plot_km_by_group(
    result: KMByGroupResult,
    *,
    ax=None,
    width: str | float = "single",
    title: str = "",
    show_at_risk: bool = True,
    min_at_risk: int = 10,
    development: bool = False,
    since: float | None = None,
):
    """Draw Kaplan-Meier curves by risk group with bands, an at-risk strip and a caption.

    Parameters
    ----------
    result : KMByGroupResult
        From :func:`km_by_group`.
    ax : matplotlib Axes, optional
        Draw the curves into it and return it (no strip and no caption: the caller
        places the numbers).
    width : "single", "double" or millimetres
    title : str
    show_at_risk : bool
    min_at_risk : int
        Each curve stops after the last time at which at least this many of its
        patients are still at risk (default 10): the tail of a Kaplan-Meier curve
        resting on a handful of patients is noise.
    development : bool
        The groups are evaluated on the patients the model was fitted to: the caption
        describes the comparison and prints no p-value.
    since : float, optional
        The curves are conditional on being alive at this time (from
        :func:`conditional_km_by_group`): the axes say so.

    Returns
    -------
    Figure, or the Axes when ``ax`` is given.
    """
    n_groups = len(result.labels)
    ticks, at_risk = _shown_ticks(result, min_at_risk)
    with style_context(width):
        if ax is None:
            wide = column_width_inches(width) * 25.4 > 120.0
            fig = new_figure(width, aspect=0.62 if wide else 0.95)
            gs = fig.add_gridspec(2, 1, height_ratios=(4.2, (0.3 + 0.22 * n_groups) * (1.5 if wide else 1.0)))
            ax_main = fig.add_subplot(gs[0])
            ax_tab = fig.add_subplot(gs[1], sharex=ax_main) if show_at_risk else None
            out = fig
        else:
            ax_main, ax_tab, out = ax, None, ax
        for i, (lab, km) in enumerate(zip(result.labels, result.curves, strict=True)):
            st = series_style(i)
            x, s = _step(km, km.survival, min_at_risk)
            ax_main.step(x, s, where="post", color=st.color, linestyle=st.linestyle, label=lab)
            _, lo = _step(km, km.ci_lower, min_at_risk)
            _, hi = _step(km, km.ci_upper, min_at_risk)
            ax_main.fill_between(x, lo, hi, step="post", color=st.color, alpha=BAND_ALPHA, linewidth=0)
            cens = (km.censored > 0) & (km.at_risk >= min_at_risk)
            ax_main.plot(km.times[cens], km.survival[cens], linestyle="none", marker="|", ms=3,
                         color=st.color, mew=0.6)
        ax_main.set_ylim(0, 1.02)
        ax_main.set_xlim(0, ticks[-1] if ticks.size else None)
        ax_main.set_xticks(ticks)
        unit = f" ({result.time_unit})" if result.time_unit else ""
        since_text = "" if since is None else f"{format_number(since)} {unit_for(since, result.time_unit)}".rstrip()
        after = "" if since is None else f" since the visit at {since_text}"
        ax_main.set_ylabel("Survival probability" if since is None else f"Survival, given alive at {since_text}")
        if ax is None:
            # above the panel, where no curve can be hidden behind it
            ax_main.legend(loc="lower left", bbox_to_anchor=(0.0, 1.0), ncols=n_groups,
                           handlelength=2.2, columnspacing=1.2, borderaxespad=0.2, title="Risk group",
                           title_fontsize="small", alignment="left")
            if title:
                fig.suptitle(wrap_to_width(title, fig, base_font_size(width)), x=0.01, ha="left", fontsize="medium")
            caption = km_caption(result, development=development, min_at_risk=min_at_risk)
            small = font_scalings["small"] * base_font_size(width)  # measured at the size it is drawn
            fig.supxlabel(wrap_to_width(caption, fig, small), x=0.01, ha="left",
                          fontsize="small", linespacing=1.2)
        else:
            ax_main.legend(loc="lower left", title="Risk group", title_fontsize="small", handlelength=2.2)
            if title:
                ax_main.set_title(title, loc="left")
        if ax_tab is not None:
            ax_main.tick_params(labelbottom=False)
            ax_tab.set_xlabel(f"Time{after}{unit}")
            for i, row in enumerate(at_risk):
                y = n_groups - 1 - i
                for t, v in zip(ticks, row, strict=True):
                    ax_tab.text(t, y, str(int(v)), ha="center", va="center", fontsize="small")
            ax_tab.set_ylim(-0.6, n_groups - 0.4)
            ax_tab.set_yticks(range(n_groups), labels=list(reversed(result.labels)), fontsize="small")
            ax_tab.tick_params(axis="y", length=0, pad=8)
            ax_tab.spines[["left", "top", "right"]].set_visible(False)
            ax_tab.set_title("At risk", loc="left", fontsize="small", pad=2)
        else:
            ax_main.set_xlabel(f"Time{after}{unit}")
        if ax_tab is not None:
            ax_tab.set_xticks(ticks, labels=[format_number(t) for t in ticks])
        return out
