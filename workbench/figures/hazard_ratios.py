"""Forest plot of hazard ratios with confidence intervals (log scale, reference levels shown).

Rows come from the model's :meth:`hazard_ratio_table` (per doubling for log2
terms, 75th vs 25th percentile for splines, each level against its reference);
:func:`forest_table` adds a row for each reference level and, for a combined
model, the imaging signature per unit of its score.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from workbench.errors import NotFittedError, SpecError
from workbench.figures.measure import TextMeasure
from workbench.figures.nomogram_points import SIGNATURE_TERM
from workbench.figures.style import (
    INK,
    NEUTRAL,
    PALETTE,
    base_font_size,
    column_width_inches,
    new_figure,
    style_context,
)

COLUMNS = ("column", "label", "contrast", "hr", "lower", "upper", "p_value", "is_reference")


def forest_table(model, *, signature_sd: float | None = None) -> pd.DataFrame:
    """Hazard-ratio rows of a fitted Cox model, with reference levels and the signature.

    Parameters
    ----------
    model : ClinicalCox or CombinedCox (fitted)
    signature_sd : float, optional
        SD of the training patients' signature scores: the signature's hazard ratio is then
        given per SD, ``exp(b * SD)`` with limits ``exp((b -+ z se) * SD)``, the unit the
        nomogram's signature axis uses. Without it, per unit of the raw score.

    Returns
    -------
    DataFrame with columns column, label, contrast, hr, lower, upper, p_value, is_reference.
    """
    if not hasattr(model, "hazard_ratio_table") or not hasattr(model, "fit_"):
        raise NotFittedError("forest_table needs a fitted ClinicalCox or CombinedCox model.")
    hr = model.hazard_ratio_table()
    rows = []
    for term in model.transformer_.terms_:
        part = hr[hr["column"] == term.column]
        if term.kind == "categorical":
            rows.append({"column": term.column, "label": term.label, "contrast": f"{term.reference} (reference)",
                         "hr": 1.0, "lower": np.nan, "upper": np.nan, "p_value": np.nan, "is_reference": True})
        for _, r in part.iterrows():
            rows.append({**{k: r[k] for k in ("column", "label", "contrast", "hr", "lower", "upper", "p_value")},
                         "is_reference": False})
    if SIGNATURE_TERM in model.fit_.names:
        f = model.fit_
        j = list(f.names).index(SIGNATURE_TERM)
        k = 1.0 if signature_sd is None else float(signature_sd)
        if not (np.isfinite(k) and k > 0):
            raise SpecError(f"signature_sd must be a positive SD of the training scores, not {signature_sd!r}.")
        rows.append({"column": SIGNATURE_TERM, "label": "Imaging signature",
                     "contrast": "per unit of score" if signature_sd is None else "per SD of training scores",
                     "hr": float(np.exp(f.coef[j] * k)), "lower": float(np.exp(f.ci_lower[j] * k)),
                     "upper": float(np.exp(f.ci_upper[j] * k)), "p_value": float(f.p_value[j]),
                     "is_reference": False})
    return pd.DataFrame(rows, columns=list(COLUMNS))


def _p(p: float) -> str:
    if not np.isfinite(p):
        return ""
    return "<0.001" if p < 0.001 else f"{p:.3f}"


class _Wrapper:
    """Break a label into lines no wider than ``limit`` points (measured, not counted)."""

    def __init__(self, meas: TextMeasure, size: float, limit: float):
        self.meas, self.size, self.limit = meas, size, limit

    def __call__(self, text: str) -> str:
        words, lines = text.split(" "), []
        for w in words:
            if lines and self.meas.width(f"{lines[-1]} {w}", self.size) <= self.limit:
                lines[-1] = f"{lines[-1]} {w}"
            else:
                lines.append(w)
        return "\n".join(lines)


def _axes_width_pt(a) -> float:
    fig = a.figure
    engine = fig.get_layout_engine()
    if engine is not None:
        # settle the constrained layout before measuring the panel: the engine alone places the
        # axes (a full draw without rendering would also draw every artist, for nothing)
        engine.execute(fig)
    return a.get_position().width * fig.get_figwidth() * 72.0


def _spaced(ticks, log_span: float, width_pt: float, meas: TextMeasure, size: float) -> np.ndarray:
    """Keep the ticks whose labels do not run together, starting from 1 and working outwards."""
    ticks = np.asarray(ticks, dtype=float)
    if ticks.size == 0 or log_span <= 0:
        return ticks
    pos = np.log(ticks) / log_span * width_pt
    half = np.array([meas.width(f"{v:g}", size) / 2 for v in ticks])
    keep = [int(np.argmin(np.abs(np.log(ticks))))]
    for direction in (1, -1):
        last = keep[0]
        idx = range(keep[0] + 1, ticks.size) if direction == 1 else range(keep[0] - 1, -1, -1)
        for i in idx:
            if abs(pos[i] - pos[last]) >= half[i] + half[last] + 4.0:
                keep.append(i)
                last = i
    return ticks[sorted(keep)]


def plot_forest(table: pd.DataFrame, *, ax=None, width: str | float = "double", title: str = ""):
    """Draw a forest plot of hazard ratios.

    Parameters
    ----------
    table : DataFrame
        From :func:`forest_table` or a model's ``hazard_ratio_table()`` (columns
        label, contrast, hr, lower, upper, p_value; optional is_reference).
    ax : Axes, optional
        Draw markers, intervals and row labels into it; the HR text column is
        added only on a new figure.
    width : "single", "double" or millimetres
    title : str

    Returns
    -------
    Figure, or the Axes when ``ax`` is given.
    """
    missing = [c for c in ("label", "contrast", "hr", "lower", "upper") if c not in table.columns]
    if missing:
        raise SpecError(f"the hazard-ratio table lacks column(s) {missing}; use forest_table(model).")
    t = table.reset_index(drop=True)
    ref = t["is_reference"].astype(bool).to_numpy() if "is_reference" in t else np.zeros(len(t), bool)
    # one header line per term with several rows, then its contrasts indented
    fs = base_font_size(width)
    meas = TextMeasure()
    fig_pt = column_width_inches(width) * 72.0
    # labels wrap to at most about a third of the figure, so the plot keeps its room
    wrap = _Wrapper(meas, fs - 0.5, 0.36 * fig_pt)
    labels, ys, y = [], [], 0.0
    header_y = []
    prev = None
    for _, r in t.iterrows():
        many = (t["label"] == r["label"]).sum() > 1
        if many and r["label"] != prev:
            head = wrap(str(r["label"]))
            y -= 0.5 * head.count("\n")
            header_y.append((y, head))
            y -= 1 + 0.5 * head.count("\n")
        lab = wrap(f"{r['contrast']}" if many else f"{r['label']}, {r['contrast']}")
        y -= 0.5 * lab.count("\n")
        labels.append(lab)
        ys.append(y)
        y -= 1 + 0.5 * lab.count("\n")
        prev = r["label"]
    ys = np.asarray(ys)
    est = ~ref
    with style_context(width):
        if ax is None:
            fig = new_figure(width)
            # sized from the text it must hold: one row per line of text, then the label
            # column, the estimate column and the p column measured in points
            fig.set_figheight((-y * 1.6 * fs + 7.0 * fs) / 72.0)
            small = fs - 1.5
            est_w = max(meas.width(f"{r.hr:.2f} ({r.lower:.2f}-{r.upper:.2f})", small)
                        for r in t.itertuples()) if len(t) else 0.0
            txt_pt = max(est_w, meas.width("1 (reference)", small)) + meas.width("<0.001", small) + 1.2 * fs
            lab_pt = max(meas.width(x, fs - 0.5) for x in [*labels, *(h for _, h in header_y)])
            plot_pt = fig_pt - lab_pt - txt_pt - 3.0 * fs
            gs = fig.add_gridspec(1, 2, width_ratios=(max(plot_pt, 4 * fs), txt_pt), wspace=0.0)
            a, txt = fig.add_subplot(gs[0]), fig.add_subplot(gs[1])
        else:
            fig, a, txt = ax.figure, ax, None
        a.set_xscale("log")
        a.axvline(1.0, color=NEUTRAL, lw=0.7)
        a.hlines(ys[est], t["lower"][est], t["upper"][est], color=PALETTE[0], lw=1.0)
        (pts,) = a.plot(t["hr"][est], ys[est], linestyle="none", marker="s", ms=3.8, color=PALETTE[0],
                        label="Hazard ratio (95% CI)")
        pts.set_gid("hazard_ratios")
        (refs,) = a.plot(np.ones(ref.sum()), ys[ref], linestyle="none", marker="o", ms=3.6, mfc="white",
                         mec=INK, mew=0.8, label="Reference level")
        refs.set_gid("reference_levels")
        lims = np.r_[t["lower"][est].dropna(), t["upper"][est].dropna(), 1.0]
        lo, hi = float(np.min(lims)), float(np.max(lims))
        a.set_xlim(lo / 1.25, hi * 1.25)
        tick_cand = np.array([0.1, 0.2, 0.25, 0.5, 0.75, 1, 1.5, 2, 3, 4, 5, 10, 20])
        ticks = tick_cand[(tick_cand >= lo / 1.25) & (tick_cand <= hi * 1.25)]
        ticks = _spaced(ticks, np.log(hi * 1.25) - np.log(lo / 1.25), _axes_width_pt(a),
                        meas, fs - 0.5)
        a.set_xticks(ticks, labels=[f"{v:g}" for v in ticks])
        a.minorticks_off()
        a.set_yticks(np.r_[ys, [h for h, _ in header_y]], labels=labels + [lab for _, lab in header_y])
        for tl, is_head in zip(a.get_yticklabels(), [False] * len(ys) + [True] * len(header_y), strict=True):
            if is_head:
                tl.set_fontweight("bold")
        a.tick_params(axis="y", length=0)
        a.spines["left"].set_visible(False)
        a.set_ylim(y + 0.4, 0.9)
        a.set_xlabel("Hazard ratio (log scale)")
        if title:
            a.set_title(title, loc="left")
        if txt is not None:
            txt.set_ylim(a.get_ylim())
            txt.set_axis_off()
            txt.text(0.0, 0.6, "HR (95% CI)", ha="left", va="bottom", fontweight="bold", fontsize="small",
                     transform=txt.transData)
            txt.text(1.0, 0.6, "p", ha="right", va="bottom", fontweight="bold", fontsize="small",
                     transform=txt.transData)
            for yy, r, is_ref in zip(ys, t.itertuples(), ref, strict=True):
                s = "1 (reference)" if is_ref else f"{r.hr:.2f} ({r.lower:.2f}-{r.upper:.2f})"
                txt.text(0.0, yy, s, ha="left", va="center", fontsize="small")
                if not is_ref and "p_value" in t:
                    txt.text(1.0, yy, _p(r.p_value), ha="right", va="center", fontsize="small")
            txt.set_xlim(0, 1)
        return fig if ax is None else a
