"""Small figures the app draws itself when the figures layer offers none for the purpose.

Built on ``matplotlib.figure.Figure`` directly (never pyplot), from results the
library has already computed; nothing here estimates anything.
"""

from __future__ import annotations

import io

import numpy as np
from matplotlib.figure import Figure

INK = "#1b2a41"
BAND = "#9fb8d9"


def km_figure(km, *, time_unit: str, horizons=(), ylabel: str = "Overall survival") -> Figure:
    """Overall Kaplan-Meier curve with its 95% band from a ``KaplanMeierResult``."""
    fig = Figure(figsize=(6.4, 3.4), layout="constrained")
    ax = fig.add_subplot()
    t = np.concatenate([[0.0], np.asarray(km.times, float)])
    s = np.concatenate([[1.0], np.asarray(km.survival, float)])
    lo = np.concatenate([[1.0], np.asarray(km.ci_lower, float)])
    hi = np.concatenate([[1.0], np.asarray(km.ci_upper, float)])
    ax.fill_between(t, lo, hi, step="post", color=BAND, alpha=0.5, linewidth=0, label="95% CI")
    ax.step(t, s, where="post", color=INK, linewidth=1.6, label="Kaplan-Meier")
    for h in horizons:
        ax.axvline(float(h), color="#7a7a7a", linewidth=0.8, linestyle=":")
    ax.set_ylim(0, 1.02)
    ax.set_xlim(left=0)
    ax.set_xlabel(f"Time ({time_unit})")
    ax.set_ylabel(ylabel)
    ax.grid(alpha=0.25)
    ax.legend(frameon=False, loc="upper right")
    return fig


def line_figure(x, series: dict, *, xlabel: str, ylabel: str, hline=None, logx: bool = False) -> Figure:
    """Lines of already computed values (e.g. a coefficient path) against one x axis."""
    fig = Figure(figsize=(6.4, 3.4), layout="constrained")
    ax = fig.add_subplot()
    for label, y in series.items():
        ax.plot(x, y, linewidth=1.2, label=label)
    if hline is not None:
        ax.axhline(hline, color="#7a7a7a", linewidth=0.8)
    if logx:
        ax.set_xscale("log")
    ax.set_xlabel(xlabel)
    ax.set_ylabel(ylabel)
    ax.grid(alpha=0.25)
    if 0 < len(series) <= 8:
        ax.legend(frameon=False, fontsize=8)
    return fig


def bar_figure(labels, values, *, xlabel: str) -> Figure:
    """Horizontal bars of already computed values (e.g. selection frequencies)."""
    labels, values = list(labels)[::-1], list(values)[::-1]
    fig = Figure(figsize=(6.4, max(2.0, 0.24 * len(labels) + 0.8)), layout="constrained")
    ax = fig.add_subplot()
    ax.barh(range(len(values)), values, color=INK)
    ax.set_yticks(range(len(labels)), labels, fontsize=8)
    ax.set_xlabel(xlabel)
    ax.set_xlim(0, 1)
    ax.grid(axis="x", alpha=0.25)
    return fig


SCREEN_DPI = 110


def screen_png(fig, tight: bool = True) -> bytes:
    """A figure as a PNG for the page: quick to draw, sharp enough on screen.

    ``tight=False`` keeps the figure's own page (one drawing instead of two) for figures that
    lay themselves out to fit, such as the nomogram."""
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=SCREEN_DPI, bbox_inches="tight" if tight else None)
    return buf.getvalue()


def save_figure(fig, fmt: str) -> bytes:
    """Figure bytes: PNG at 300 dpi; SVG and PDF with text kept as editable text."""
    import matplotlib

    buf = io.BytesIO()
    with matplotlib.rc_context({"svg.fonttype": "none", "pdf.fonttype": 42}):
        fig.savefig(buf, format=fmt, dpi=300 if fmt == "png" else None, bbox_inches="tight")
    return buf.getvalue()


def screen_svg(fig) -> str:
    """A figure as SVG text for the page (text drawn as paths, so it looks the same in any browser).

    Written in about 60% of the time of :func:`screen_png` for the nomogram (its ticks and labels are
    many short paths, cheap to write and for the browser to draw), and sharp at any zoom."""
    import matplotlib

    buf = io.BytesIO()
    with matplotlib.rc_context({"svg.fonttype": "path", "svg.hashsalt": "workbench-screen"}):
        fig.savefig(buf, format="svg", metadata={"Date": None})
    return buf.getvalue().decode("utf-8")


def figure_bytes(fig: Figure, fmt: str = "png", dpi: int = 200) -> bytes:
    buf = io.BytesIO()
    fig.savefig(buf, format=fmt, dpi=dpi)
    return buf.getvalue()


def survival_curve_figure(times, survival, lower, upper, *, time_unit: str, horizons=()) -> Figure:
    """One patient's predicted survival curve with its pointwise band (values from the estimate)."""
    fig = Figure(figsize=(6.4, 3.2), layout="constrained")
    ax = fig.add_subplot()
    t = np.asarray(times, float)
    lo, hi = np.asarray(lower, float), np.asarray(upper, float)
    if np.isfinite(lo).any():
        ax.fill_between(t, lo, hi, step="post", color=BAND, alpha=0.5, linewidth=0, label="95% CI")
    ax.step(t, np.asarray(survival, float), where="post", color=INK, linewidth=1.6, label="Predicted survival")
    for h in horizons:
        ax.axvline(float(h), color="#7a7a7a", linewidth=0.8, linestyle=":")
    ax.set_ylim(0, 1.02)
    ax.set_xlim(left=0)
    ax.set_xlabel(f"Time ({time_unit})")
    ax.set_ylabel("Survival probability")
    ax.grid(alpha=0.25)
    ax.legend(frameon=False, loc="lower left")
    return fig
