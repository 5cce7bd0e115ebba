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
from workbench.figures.nomogram_points import SIGNATURE_TERM
from workbench.figures.style import INK, NEUTRAL, PALETTE, new_figure, style_context

COLUMNS = ("column", "label", "contrast", "hr", "lower", "upper", "p_value", "is_reference")


def forest_table(model) -> pd.DataFrame:
    """Hazard-ratio rows of a fitted Cox model, with reference levels and the signature.

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
        rows.append({"column": SIGNATURE_TERM, "label": "Imaging signature", "contrast": "per unit of score",
                     "hr": float(f.hazard_ratio[j]), "lower": float(np.exp(f.ci_lower[j])),
                     "upper": float(np.exp(f.ci_upper[j])), "p_value": float(f.p_value[j]),
                     "is_reference": False})
    return pd.DataFrame(rows, columns=list(COLUMNS))


def _p(p: float) -> str:
    if not np.isfinite(p):
        return ""
    return "<0.001" if p < 0.001 else f"{p:.3f}"


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
    labels, ys, y = [], [], 0.0
    header_y = []
    prev = None
    for _, r in t.iterrows():
        many = (t["label"] == r["label"]).sum() > 1
        if many and r["label"] != prev:
            header_y.append((y, r["label"]))
            y -= 1
        labels.append(f"   {r['contrast']}" if many else f"{r['label']}, {r['contrast']}")
        ys.append(y)
        y -= 1
        prev = r["label"]
    ys = np.asarray(ys)
    est = ~ref
    with style_context(width):
        if ax is None:
            fig = new_figure(width, aspect=min(1.4, 0.1 + 0.026 * (len(t) + len(header_y))))
            gs = fig.add_gridspec(1, 2, width_ratios=(2.2, 1.35), wspace=0.02)
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
            txt.text(0.02, 0.6, "HR (95% CI)", ha="left", va="bottom", fontweight="bold", fontsize="small",
                     transform=txt.transData)
            txt.text(0.98, 0.6, "p", ha="right", va="bottom", fontweight="bold", fontsize="small",
                     transform=txt.transData)
            for yy, r, is_ref in zip(ys, t.itertuples(), ref, strict=True):
                s = "1 (reference)" if is_ref else f"{r.hr:.2f} ({r.lower:.2f}-{r.upper:.2f})"
                txt.text(0.02, yy, s, ha="left", va="center", fontsize="small")
                if not is_ref and "p_value" in t:
                    txt.text(0.98, yy, _p(r.p_value), ha="right", va="center", fontsize="small")
            txt.set_xlim(0, 1)
        return fig if ax is None else a
