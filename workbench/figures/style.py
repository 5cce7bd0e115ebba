"""The workbench's own visual style: palette, line styles, journal sizes.

Nothing here touches matplotlib's global ``rcParams``. Plot functions draw
inside :func:`style_context`, a ``matplotlib.rc_context`` that is undone when
the function returns, so a user's own settings are never changed.

The palette
-----------
Six colours designed for this project, ordered by use (first model, second
model, then further series). They were chosen so that

* their CIE L* lightness values are spread from 19 to 90 (at least 11 units
  apart), so every series stays distinct when printed in greyscale;
* after simulating protanopia, deuteranopia and tritanopia (Machado et al.
  2009, full severity) every pair still differs by a CIE76 colour difference
  above 20, well above the ~10 usually taken as "clearly different" (common
  practice);
* the first two (a dark indigo and an amber) differ in lightness by more than
  40 L* units, because most figures compare exactly two models.

``palette_report()`` recomputes these numbers; the unit tests hold the palette
to them. Line styles and markers are paired with the colours so that series
can also be told apart without colour.

References
----------
.. [1] Machado GM, Oliveira MM, Fernandes LAF. A physiologically-based model for
   simulation of color vision deficiency. IEEE Trans Vis Comput Graph
   2009;15:1291-8.
.. [2] CIE 15:2004 Colorimetry, 3rd ed. (CIELAB, D65 white point).
"""

from __future__ import annotations

import itertools
from collections.abc import Iterator
from contextlib import contextmanager
from dataclasses import dataclass

import matplotlib
import numpy as np

from workbench.errors import SpecError

PALETTE: tuple[str, ...] = ("#24285F", "#DA842C", "#3381B0", "#98305F", "#89C9E4", "#F3E39A")
"""Series colours, in order of use."""
LINESTYLES: tuple = ("-", (0, (5, 2)), (0, (1, 1.5)), (0, (6, 2, 1, 2)), (0, (3, 1, 1, 1, 1, 1)), "-")
MARKERS: tuple[str, ...] = ("o", "s", "^", "D", "v", "P")
NEUTRAL = "#6B6B6B"
"""Reference lines (ideal calibration, treat-all, chance level)."""
INK = "#1A1A1A"
"""Text and axes."""
BAND_ALPHA = 0.18
"""Opacity of confidence bands."""

MM_PER_INCH = 25.4
COLUMN_WIDTH_MM = {"single": 85.0, "double": 175.0}
"""Usual journal column widths (common practice)."""
FONT_SIZES = {"single": 7.0, "double": 8.0}
"""Base font size in points at each width; small print is 1.5 pt smaller."""


@dataclass(frozen=True)
class SeriesStyle:
    """How one series (a model, a risk group) is drawn."""

    color: str
    linestyle: object
    marker: str


def series_style(i: int) -> SeriesStyle:
    """Colour, line style and marker of the ``i``-th series (cycles after six)."""
    k = int(i) % len(PALETTE)
    return SeriesStyle(PALETTE[k], LINESTYLES[k], MARKERS[k])


MODEL_SLOTS = {"clinical": 0, "combined": 1, "penalised_all": 2, "forest": 3, "clinical_volume": 4}
"""Fixed palette slot of each study model, so a model keeps its look in every figure and in
every order (a bundle lists its models alphabetically; a study lists them as written)."""


def _model_slot(name: str) -> int | None:
    if name in MODEL_SLOTS:
        return MODEL_SLOTS[name]
    from workbench.models.registry import MODEL_LABELS  # labels as drawn in legends

    for key, label in MODEL_LABELS.items():
        if name == label:
            return MODEL_SLOTS.get(key)
    return None


def model_styles(names) -> dict[str, SeriesStyle]:
    """The style of each model, keyed by model name (study key or its label), independent of order.

    The study models (and the clinical + volume comparison model) have fixed slots (:data:`MODEL_SLOTS`); any other names take the
    remaining slots in alphabetical order, so reordering the names never swaps two styles.
    """
    names = list(dict.fromkeys(names))
    out, used = {}, set()
    for n in names:
        k = _model_slot(n)
        if k is not None:
            out[n] = series_style(k)
            used.add(k)
    free = [k for k in range(len(PALETTE)) if k not in used] or list(range(len(PALETTE)))
    for i, n in enumerate(sorted(n for n in names if n not in out)):
        out[n] = series_style(free[i % len(free)])
    return out


def column_width_inches(width: str | float) -> float:
    """Figure width in inches for ``"single"``, ``"double"`` or a width in millimetres."""
    if isinstance(width, str):
        if width not in COLUMN_WIDTH_MM:
            raise SpecError(
                f"figure width {width!r} is not known; use 'single' (85 mm), 'double' (175 mm) "
                "or a number of millimetres."
            )
        return COLUMN_WIDTH_MM[width] / MM_PER_INCH
    w = float(width)
    if not 20.0 <= w <= 500.0:
        raise SpecError(f"a figure width of {w} mm is implausible; give a width between 20 and 500 mm.")
    return w / MM_PER_INCH


def base_font_size(width: str | float) -> float:
    if isinstance(width, str):
        column_width_inches(width)
        return FONT_SIZES[width]
    return FONT_SIZES["double"] if float(width) > 120.0 else FONT_SIZES["single"]


def style_rc(width: str | float = "single") -> dict:
    """Matplotlib settings of our style, for ``matplotlib.rc_context``."""
    fs = base_font_size(width)
    return {
        "font.family": "sans-serif",
        "font.sans-serif": ["DejaVu Sans", "Arial", "Helvetica"],
        "font.size": fs,
        "axes.titlesize": fs + 0.5,
        "axes.labelsize": fs,
        "xtick.labelsize": fs - 0.5,
        "ytick.labelsize": fs - 0.5,
        "legend.fontsize": fs - 0.5,
        "legend.frameon": False,
        "axes.edgecolor": INK,
        "axes.labelcolor": INK,
        "text.color": INK,
        "xtick.color": INK,
        "ytick.color": INK,
        "axes.linewidth": 0.6,
        "xtick.major.width": 0.6,
        "ytick.major.width": 0.6,
        "xtick.major.size": 2.5,
        "ytick.major.size": 2.5,
        "lines.linewidth": 1.3,
        "lines.markersize": 3.5,
        "axes.spines.top": False,
        "axes.spines.right": False,
        "axes.prop_cycle": matplotlib.cycler(color=list(PALETTE)),
        "figure.dpi": 100,
        "savefig.dpi": 300,
        "figure.facecolor": "white",
        "axes.facecolor": "white",
        "svg.fonttype": "none",
        "pdf.fonttype": 42,
        "ps.fonttype": 42,
    }


@contextmanager
def style_context(width: str | float = "single") -> Iterator[None]:
    """Draw inside our style; global settings are restored on exit."""
    with matplotlib.rc_context(style_rc(width)):
        yield


def new_figure(width: str | float = "single", aspect: float = 0.75):
    """A ``matplotlib.figure.Figure`` (no pyplot state) of a journal width.

    Call inside :func:`style_context` so artists pick up our settings.
    ``aspect`` is height over width.
    """
    from matplotlib.figure import Figure

    w = column_width_inches(width)
    return Figure(figsize=(w, w * float(aspect)), layout="constrained")


def figure_and_axes(ax, width: str | float = "single", aspect: float = 0.75):
    """The caller's Axes and its Figure, or a new styled Figure with one Axes."""
    if ax is not None:
        return ax.figure, ax
    fig = new_figure(width, aspect)
    return fig, fig.add_subplot()


def small_print_size(width: str | float = "single") -> float:
    return base_font_size(width) - 1.5


def apply_style(fig, width: str | float = "single") -> None:
    """Bring every text artist of an existing Figure to our font sizes and ink colour.

    For figures drawn elsewhere; ours are already drawn in :func:`style_context`.
    """
    fs = base_font_size(width)
    for text in fig.findobj(matplotlib.text.Text):
        text.set_fontsize(fs)
        text.set_color(INK)
    for ax in fig.axes:
        ax.tick_params(labelsize=fs - 0.5, colors=INK)


# ------------------------------------------------------------- colour checks

# Machado et al. (2009) simulation matrices at severity 1.0, applied to linear RGB (from memory;
# each row sums to 1, so white and greys are unchanged, which the tests check).
CVD_MATRICES = {
    "protanopia": np.array(
        [[0.152286, 1.052583, -0.204868], [0.114503, 0.786281, 0.099216], [-0.003882, -0.048116, 1.051998]]
    ),
    "deuteranopia": np.array(
        [[0.367322, 0.860646, -0.227968], [0.280085, 0.672501, 0.047413], [-0.011820, 0.042940, 0.968881]]
    ),
    "tritanopia": np.array(
        [[1.255528, -0.076749, -0.178779], [-0.078411, 0.930809, 0.147602], [0.004733, 0.691367, 0.303900]]
    ),
}
_SRGB_TO_XYZ = np.array([[0.4124, 0.3576, 0.1805], [0.2126, 0.7152, 0.0722], [0.0193, 0.1192, 0.9505]])


def hex_to_linear_rgb(colour: str) -> np.ndarray:
    """Linear-light RGB in [0, 1] of a ``#RRGGBB`` colour (sRGB transfer curve removed)."""
    c = np.asarray(matplotlib.colors.to_rgb(colour), dtype=float)
    return np.where(c <= 0.04045, c / 12.92, ((c + 0.055) / 1.055) ** 2.4)


def linear_rgb_to_lab(rgb) -> np.ndarray:
    """CIELAB (D65) of linear RGB."""
    xyz = _SRGB_TO_XYZ @ np.clip(np.asarray(rgb, float), 0.0, 1.0)
    xyz = xyz / (_SRGB_TO_XYZ @ np.ones(3))
    d = 6.0 / 29.0
    f = np.where(xyz > d**3, np.cbrt(xyz), xyz / (3 * d**2) + 4.0 / 29.0)
    return np.array([116.0 * f[1] - 16.0, 500.0 * (f[0] - f[1]), 200.0 * (f[1] - f[2])])


def lightness(colour: str) -> float:
    """CIE L* (0 black to 100 white): what survives greyscale printing."""
    return float(linear_rgb_to_lab(hex_to_linear_rgb(colour))[0])


def simulate_deficiency(colour: str, kind: str) -> np.ndarray:
    """CIELAB of ``colour`` as seen with a colour-vision deficiency (Machado et al. 2009)."""
    if kind not in CVD_MATRICES:
        raise SpecError(f"colour-vision deficiency {kind!r} is not known; use one of {sorted(CVD_MATRICES)}.")
    return linear_rgb_to_lab(CVD_MATRICES[kind] @ hex_to_linear_rgb(colour))


@dataclass(frozen=True)
class PaletteReport:
    """Separability of a palette: smallest pairwise CIE76 difference per vision type."""

    lightness: tuple[float, ...]
    min_lightness_gap: float
    min_delta_e: dict


def palette_report(colours=PALETTE) -> PaletteReport:
    """Lightness spread and worst-pair colour differences under simulated deficiencies."""
    L = tuple(lightness(c) for c in colours)
    out = {}
    for kind in ("normal", *CVD_MATRICES):
        labs = [
            linear_rgb_to_lab(hex_to_linear_rgb(c)) if kind == "normal" else simulate_deficiency(c, kind)
            for c in colours
        ]
        out[kind] = float(min(np.linalg.norm(a - b) for a, b in itertools.combinations(labs, 2)))
    return PaletteReport(L, float(np.min(np.diff(np.sort(L)))), out)
