"""The imaging signature: how often features are selected across resamples, and the penalty path.

:func:`plot_selection_frequency` takes a plain mapping feature -> selection
frequency (the validation engine counts them); :func:`plot_coefficient_path`
draws a fitted signature's penalised path (``signature_.path_``) with the
chosen penalty marked.

References
----------
.. [1] Simon N, Friedman J, Hastie T, Tibshirani R. Regularization paths for Cox's
   proportional hazards model via coordinate descent. J Stat Softw 2011;39(5):1-13.
.. [2] Meinshausen N, Buehlmann P. Stability selection. J R Stat Soc B 2010;72:417-73.
"""

from __future__ import annotations

from collections.abc import Mapping

import numpy as np
from matplotlib.ticker import NullFormatter

from workbench.errors import SpecError
from workbench.figures.style import (
    BAND_ALPHA,
    NEUTRAL,
    PALETTE,
    figure_and_axes,
    new_figure,
    series_style,
    style_context,
)
from workbench.figures.ticks import format_number, nice_log_ticks
from workbench.models.penalized import PenalizedPathResult


def plot_selection_frequency(
    frequencies: Mapping[str, float],
    *,
    n_replicates: int | None = None,
    top: int = 20,
    selected=(),
    ax=None,
    width: str | float = "single",
    title: str = "",
):
    """Horizontal bars of the features most often selected across resamples.

    Parameters
    ----------
    frequencies : mapping of feature name to selection frequency (0-1)
    n_replicates : int, optional
        Number of resamples behind the frequencies (shown on the axis).
    top : int
        Show the ``top`` most frequent features.
    selected : iterable of str
        Features in the signature fitted on all patients (drawn in the accent colour).
    ax : Axes, optional
    width : "single", "double" or millimetres
    title : str

    Returns
    -------
    Figure, or the Axes when ``ax`` is given.
    """
    if not isinstance(frequencies, Mapping):
        raise SpecError("plot_selection_frequency needs a mapping of feature names to selection frequencies.")
    n = f" of {n_replicates} resamples" if n_replicates else " of resamples"
    if not frequencies or not any(float(v) > 0 for v in frequencies.values()):
        # an empty signature in every refit is a result too: say so instead of failing
        with style_context(width):
            fig, a = figure_and_axes(ax, width, aspect=0.35)
            a.set_axis_off()
            a.text(0.5, 0.5, f"No imaging feature was kept in any{n}.", ha="center", va="center",
                   transform=a.transAxes)
            if title:
                a.set_title(title, loc="left")
            return fig if ax is None else a
    vals = np.asarray(list(frequencies.values()), dtype=float)
    if np.any(~np.isfinite(vals)) or np.any(vals < 0) or np.any(vals > 1):
        raise SpecError("selection frequencies must be proportions between 0 and 1 (e.g. 0.73 for 73%).")
    items = sorted(frequencies.items(), key=lambda kv: (-kv[1], kv[0]))[: int(top)]
    names = [k for k, _ in items][::-1]
    freq = np.array([v for _, v in items], dtype=float)[::-1]
    chosen = set(selected)
    colours = [PALETTE[1] if n in chosen else PALETTE[0] for n in names]
    with style_context(width):
        fig, a = figure_and_axes(ax, width, aspect=max(0.45, 0.06 + 0.042 * len(names)))
        bars = a.barh(np.arange(len(names)), freq, color=colours, height=0.7, label="selection frequency")
        for bar in bars:
            bar.set_gid("selection_frequency")
        a.set_yticks(np.arange(len(names)), labels=names, fontsize="small")
        a.set_xlim(0, 1)
        a.axvline(0.5, color=NEUTRAL, lw=0.5, linestyle=(0, (2, 2)))
        a.tick_params(axis="y", length=0)
        a.set_ylim(-0.6, len(names) - 0.4)
        a.set_xlabel(f"Selected in this share{n}")
        if chosen:
            from matplotlib.patches import Patch

            a.legend(handles=[Patch(color=PALETTE[1], label="in the final signature"),
                              Patch(color=PALETTE[0], label="not in the final signature")],
                     loc="lower right", fontsize="small")
        if title and ax is None:
            # from the figure's left edge: the feature names take the axes' left side
            fig.suptitle(title, x=0.01, ha="left", fontsize="medium")
        elif title:
            a.set_title(title, loc="left")
        return fig if ax is None else a


def _spread(y, gap: float) -> np.ndarray:
    """Label heights at least ``gap`` apart, as close to ``y`` as a simple sweep allows."""
    y = np.asarray(y, dtype=float)
    order = np.argsort(y)
    out = y[order].copy()
    for i in range(1, out.size):
        out[i] = max(out[i], out[i - 1] + gap)
    shift = (out - y[order]).mean()
    res = np.empty_like(out)
    res[order] = out - shift / 2
    return res


def _two_lines(name: str, longest: int = 22) -> str:
    """A long feature name broken at the separator nearest its middle (radiomic names run to 40
    characters and more; on one line their labels took the path panel's width at 85 mm)."""
    if len(name) <= longest:
        return name
    cuts = [i for i, c in enumerate(name) if c in "_-. " and 0 < i < len(name) - 1]
    if not cuts:
        return name
    i = min(cuts, key=lambda k: abs(k - len(name) / 2))
    return f"{name[:i + 1]}\n{name[i + 1:]}" if name[i] != " " else f"{name[:i]}\n{name[i + 1:]}"


def _log_ticks(a, alphas) -> None:
    # at a single column the feature names at the right leave the panel about 45 mm: five penalty
    # labels such as "0.07 0.05 0.03" ran together there (GBSG2 with long feature names)
    narrow = a.figure.get_figwidth() * 25.4 < 120.0
    vals = nice_log_ticks(float(np.min(alphas)), float(np.max(alphas)), 4 if narrow else 5)
    a.set_xticks(vals, labels=[format_number(v, 2) for v in vals])
    a.xaxis.set_minor_formatter(NullFormatter())


def plot_coefficient_path(
    path: PenalizedPathResult,
    *,
    ax=None,
    width: str | float = "single",
    label_top: int = 5,
    title: str = "",
):
    """Penalised coefficients along the path, with the chosen penalty marked.

    On a new figure a second panel shows the cross-validated deviance (with
    one standard error) that chose the penalty.

    Parameters
    ----------
    path : PenalizedPathResult
        ``signature_.path_`` of a fitted signature.
    ax : Axes, optional
        Draw only the coefficient paths into it.
    width : "single", "double" or millimetres
    label_top : int
        Name the features with the largest absolute coefficient at the chosen penalty.
    title : str

    Returns
    -------
    Figure, or the Axes when ``ax`` is given.
    """
    if path is None:
        raise SpecError("the signature has no penalised path (no feature survived the filters).")
    alphas = np.asarray(path.alphas, dtype=float)
    with style_context(width):
        if ax is None:
            fig = new_figure(width, aspect=1.05)
            a, b = fig.subplots(2, 1, sharex=True, height_ratios=(2.0, 1.0))
        else:
            fig, a, b = ax.figure, ax, None
        active = np.flatnonzero(np.any(path.coefs != 0, axis=1))
        order = active[np.argsort(-np.abs(path.coefs[active, path.index]))]
        for rank, j in enumerate(order):
            st = series_style(rank) if rank < label_top else None
            a.plot(alphas, path.coefs[j], color=st.color if st else NEUTRAL,
                   lw=1.1 if st else 0.6, alpha=1.0 if st else 0.6, gid=f"path:{path.feature_names[j]}")
        a.set_xscale("log")
        a.invert_xaxis()
        a.axvline(path.alpha, color=PALETTE[3], lw=0.8, linestyle=(0, (1, 1.5)),
                  label=f"chosen penalty ({path.rule})")
        a.axhline(0, color=NEUTRAL, lw=0.5)
        ends = path.coefs[order[:label_top], -1]
        names = [_two_lines(path.feature_names[j]) for j in order[:label_top]]
        lines = max((n.count("\n") + 1 for n in names), default=1)  # a broken name needs two lines' room
        placed = _spread(ends, 0.06 * lines * float(np.ptp(path.coefs[active])) if active.size else 0.0)
        for rank, (j, yy, name) in enumerate(zip(order[:label_top], placed, names, strict=True)):
            a.annotate(name, (alphas[-1], path.coefs[j, -1]), xytext=(alphas[-1], yy),
                       textcoords="data", fontsize="x-small", va="center", ha="left",
                       color=series_style(rank).color, annotation_clip=False)
        a.set_ylabel("Coefficient (per SD)")
        _log_ticks(a, alphas)
        if title and b is not None:
            fig.suptitle(title, x=0.01, ha="left", fontsize="medium")
        elif title:
            a.set_title(title, loc="left")
        if b is not None:
            a.tick_params(labelbottom=False)
            _deviance_panel(b, path, alphas)
        else:
            a.set_xlabel("Penalty (log scale, weaker to the right)")
        return fig if ax is None else a


def _deviance_panel(b, path: PenalizedPathResult, alphas: np.ndarray) -> None:
    """Cross-validated deviance as a line with a one-SE band, the chosen penalty as one
    annotated marker, and the number of features kept along a second axis."""
    mean, se = np.asarray(path.cv_mean, float), np.asarray(path.cv_se, float)
    b.fill_between(alphas, mean - se, mean + se, color=PALETTE[0], alpha=BAND_ALPHA, linewidth=0)
    b.plot(alphas, mean, color=PALETTE[0], lw=1.1, gid="cv_deviance")
    kept = np.sum(path.coefs != 0, axis=0)
    (mk,) = b.plot([path.alpha], [mean[path.index]], linestyle="none", marker="D", ms=4.5, mfc="white",
                   mec=PALETTE[3], mew=1.1, gid="chosen_penalty")
    n_kept = int(kept[path.index])
    note = f"chosen ({path.rule}): {n_kept} feature{'' if n_kept == 1 else 's'}"
    if path.index_min != path.index:
        note += f"\nlowest deviance: {int(kept[path.index_min])}"
    right = path.index < alphas.size / 2  # the label goes towards the emptier side
    b.annotate(note, (path.alpha, mean[path.index]), xytext=(6 if right else -6, 8), textcoords="offset points",
               ha="left" if right else "right", va="bottom", fontsize="x-small", color=PALETTE[3],
               arrowprops={"arrowstyle": "-", "color": PALETTE[3], "lw": 0.6})
    b.set_ylabel("CV deviance\nper event")
    b.set_xlabel("Penalty (log scale, weaker to the right)")
    _log_ticks(b, alphas)
    lo, hi = float(np.min(mean - se)), float(np.max(mean + se))
    b.set_ylim(lo - 0.05 * (hi - lo), hi + 0.45 * (hi - lo))
    top = b.secondary_xaxis("top")
    pos = np.unique(np.linspace(0, alphas.size - 1, 5).round().astype(int))
    top.set_xticks(alphas[pos], labels=[str(int(kept[i])) for i in pos])
    top.xaxis.set_minor_formatter(NullFormatter())
    top.set_xlabel("features kept", fontsize="small", labelpad=1)
    top.tick_params(labelsize="small")
    mk.set_label("chosen penalty")
