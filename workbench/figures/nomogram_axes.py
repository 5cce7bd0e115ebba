"""The nomogram's axes as data: ticks, segments, risk bands, term scales, survival scales, a read patient.

Pure data objects with the small arithmetic that belongs to them (points of a
value, survival of a total). Built by :func:`workbench.figures.nomogram_points.nomogram_scales`,
drawn by :mod:`workbench.figures.nomogram`, tabulated by :mod:`workbench.figures.nomogram_table`.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field

import numpy as np
from numpy.typing import ArrayLike

from workbench.errors import SpecError
from workbench.preprocess.clinical import TermInfo, term_contribution
from workbench.preprocess.values import MISSING_TOKENS

SIGNATURE_TERM = "imaging_signature"  # the design column name CombinedCox gives the signature


def _is_missing(v) -> bool:
    if v is None:
        return True
    if isinstance(v, str):
        return v.strip().lower() in MISSING_TOKENS
    try:
        return bool(np.isnan(v))
    except TypeError:
        return False


# ------------------------------------------------------------------ data objects


@dataclass(frozen=True)
class AxisTick:
    """One labelled tick: the value shown and where it sits in points."""

    label: str
    value: object
    points: float


@dataclass(frozen=True)
class AxisSegment:
    """One straight piece of a term's axis; along it points are monotone in the value.

    ``value_range`` is ``(lo, hi)`` on the original scale for continuous terms
    (None for categorical); ``start_points`` / ``end_points`` are the points at
    ``lo`` / ``hi`` (the drawn line runs between them).
    """

    ticks: tuple[AxisTick, ...]
    start_points: float
    end_points: float
    value_range: tuple[float, float] | None = None


@dataclass(frozen=True)
class RiskBand:
    """A stretch of the signature axis belonging to one risk group."""

    label: str
    lo_value: float
    hi_value: float
    lo_points: float
    hi_points: float


@dataclass(frozen=True)
class TermScale:
    """One nomogram axis and its value-to-points function.

    Attributes
    ----------
    name, label, unit, kind : str
        Predictor column, display name, unit and kind (``"signature"`` for the
        imaging signature).
    segments : tuple of AxisSegment
        One for monotone terms; several parallel pieces for a spline whose
        effect changes direction (one per monotone stretch, in value order).
    extra_ticks : tuple of AxisTick
        Ticks off the continuous scale, e.g. "< 0.5" for values below a detection limit.
    bands : tuple of RiskBand
        Risk groups (signature axis only).
    min_contribution, max_contribution : float
        Range of the term's contribution to the linear predictor over its axis.
    points_per_lp : float
        100 / R, shared by all terms of the model.
    term_info : TermInfo or None
        The fitted clinical term (None for the signature).
    coef : ndarray
        The term's coefficients.
    spread : tuple of (percentile, value)
        Training percentiles of a continuous or signature axis (raw values), drawn as a
        small distribution strip and used to flag patients outside the training range.
    level_shares : tuple of float
        Share of training patients at each level of a categorical axis (tick order).
    sd_scale : (mean, SD) or None
        Signature axis only: its labels are in SDs of the training scores,
        ``(score - mean) / SD``; the arithmetic stays in raw scores.
    """

    name: str
    label: str
    unit: str
    kind: str
    segments: tuple[AxisSegment, ...]
    min_contribution: float
    max_contribution: float
    points_per_lp: float
    coef: np.ndarray
    term_info: TermInfo | None = None
    extra_ticks: tuple[AxisTick, ...] = ()
    bands: tuple[RiskBand, ...] = ()
    transform: str | None = None
    table_range: tuple[float, float] | None = None
    spread: tuple[tuple[float, float], ...] = ()
    level_shares: tuple[float, ...] = ()
    sd_scale: tuple[float, float] | None = None

    @property
    def training_range(self) -> tuple[float, float] | None:
        """1st and 99th training percentiles of a continuous or signature axis (raw values)."""
        q = dict(self.spread)
        return (q[1.0], q[99.0]) if 1.0 in q and 99.0 in q else None

    def display_value(self, v: float) -> float:
        """A raw value as the axis labels show it (signature: SDs from the training mean)."""
        if self.sd_scale is None:
            return float(v)
        mean, sd = self.sd_scale
        return (float(v) - mean) / sd

    @property
    def ticks(self) -> tuple[AxisTick, ...]:
        """Every tick of the axis (all segments, then the extra ticks)."""
        return tuple(t for s in self.segments for t in s.ticks) + self.extra_ticks

    @property
    def max_points(self) -> float:
        return (self.max_contribution - self.min_contribution) * self.points_per_lp

    def fill_missing(self, values) -> tuple[list, np.ndarray]:
        """Raw values with missing cells replaced by the training imputation value, if the term has one."""
        vals = list(np.atleast_1d(np.asarray(values, dtype=object)).ravel())
        miss = np.array([_is_missing(v) for v in vals], dtype=bool)
        info = self.term_info
        if miss.any():
            if info is None or info.missing != "impute":
                raise SpecError(
                    f"{self.label}: a value is missing and this model has no imputation rule for it; "
                    "give the patient's value (the nomogram needs every predictor)."
                )
            vals = [info.impute_value if m else v for v, m in zip(vals, miss, strict=True)]
        return vals, miss

    def contribution(self, values) -> np.ndarray:
        """Contribution to the uncentred linear predictor of raw values (missing ones imputed if allowed)."""
        vals, _ = self.fill_missing(values)
        if self.term_info is None:
            try:
                x = np.asarray(vals, dtype=float)
            except (TypeError, ValueError) as exc:
                raise SpecError(f"{self.label}: signature values must be numbers; got {vals[:3]}.") from exc
            return x * float(self.coef[0])
        return term_contribution(self.term_info, self.coef, vals)

    def points(self, values) -> np.ndarray:
        """Points of raw values on this axis (the same formula beyond the drawn range)."""
        return (self.contribution(values) - self.min_contribution) * self.points_per_lp


@dataclass(frozen=True)
class SurvivalScale:
    """The survival-probability axis at one horizon."""

    horizon: float
    baseline_survival: float
    ticks: tuple[AxisTick, ...]
    lp_intercept: float
    points_per_lp: float

    def survival(self, total_points: ArrayLike) -> np.ndarray:
        """S(horizon | total points) = S0(horizon) ** exp(LP(total))."""
        lp = self.lp_intercept + np.asarray(total_points, dtype=float) / self.points_per_lp
        return np.exp(np.log(self.baseline_survival) * np.exp(lp))

    def total_points_for(self, survival: ArrayLike) -> np.ndarray:
        """Total points at which predicted survival equals the given probabilities."""
        s = np.asarray(survival, dtype=float)
        lp = np.log(np.log(s) / np.log(self.baseline_survival))
        return (lp - self.lp_intercept) * self.points_per_lp


@dataclass(frozen=True)
class MedianScale:
    """Median survival time axis: tick ``m`` sits where the predicted median reaches ``m``."""

    ticks: tuple[AxisTick, ...]
    event_times: np.ndarray
    baseline_cumhaz: np.ndarray


@dataclass(frozen=True)
class NomogramScales:
    """Everything needed to draw, or hand-compute, one model's nomogram.

    Attributes
    ----------
    model : str
    terms : tuple of TermScale
        In design order; the imaging signature (if any) last.
    points_per_lp : float
        Points per unit of linear predictor (100 / widest term range).
    lp_intercept : float
        Centred linear predictor at 0 total points; ``LP = lp_intercept + total / points_per_lp``.
    total_ticks : tuple of AxisTick
        Ticks of the total-points axis (0 to ``total_axis_max``).
    total_axis_max : float
    survival : tuple of SurvivalScale
        One per horizon, in the order given.
    median : MedianScale or None
    time_unit : str
    risk_of : str
        When set (e.g. "cancer death"), the probability axes are read as the risk of that
        event by each horizon (named in a note under the panel), ``1 - survival(total)``: a Fine-Gray model's cumulative
        incidence, whose complement has the Cox form (:mod:`workbench.competing.nomogram`).
    """

    model: str
    terms: tuple[TermScale, ...]
    points_per_lp: float
    lp_intercept: float
    total_ticks: tuple[AxisTick, ...]
    total_axis_max: float
    survival: tuple[SurvivalScale, ...]
    median: MedianScale | None = None
    time_unit: str = ""
    risk_of: str = ""

    def read_off(self, probability: float) -> float:
        """The number printed for a probability axis value: survival, or the risk when ``risk_of``."""
        return 1.0 - float(probability) if self.risk_of else float(probability)

    @property
    def horizons(self) -> tuple[float, ...]:
        return tuple(s.horizon for s in self.survival)

    def term(self, name: str) -> TermScale:
        for t in self.terms:
            if t.name == name:
                return t
        raise SpecError(f"the nomogram has no axis {name!r}; axes: {', '.join(t.name for t in self.terms)}.")

    def linear_predictor(self, total_points: ArrayLike) -> np.ndarray:
        """Centred linear predictor of a total score (the points-to-LP affine map)."""
        return self.lp_intercept + np.asarray(total_points, dtype=float) / self.points_per_lp

    def total_points_for_lp(self, lp: ArrayLike) -> np.ndarray:
        return (np.asarray(lp, dtype=float) - self.lp_intercept) * self.points_per_lp

    def survival_scale(self, horizon: float) -> SurvivalScale:
        for s in self.survival:
            if np.isclose(s.horizon, horizon):
                return s
        raise SpecError(f"the nomogram has no survival axis at {horizon:g}; horizons: {list(self.horizons)}.")

    def median_survival(self, total_points: float) -> float:
        """Predicted median survival time of a total score (inf when not reached in follow-up)."""
        if self.median is None:
            raise SpecError("this nomogram was built without a median-survival axis (median_axis=True).")
        h = self.median.baseline_cumhaz * np.exp(float(self.linear_predictor(total_points)))
        # survival exactly 0.5 counts as reached: a median tick is placed where H0(m) exp(LP) = ln 2,
        # and the round trip through points and back may land a few ulps below ln 2
        k = np.searchsorted(h, np.log(2.0) * (1.0 - 1e-10), side="left")
        return float(self.median.event_times[k]) if k < h.size else float("inf")


@dataclass(frozen=True)
class PatientPoints:
    """One patient read off a nomogram.

    Attributes
    ----------
    values : mapping
        Value used per axis (after imputing missing values where the model allows it).
    points : mapping of str to float
        Points per axis.
    total : float
    linear_predictor : float
        Centred linear predictor from the total.
    survival : mapping of float to float
        Predicted survival probability at each horizon.
    median_survival : float or None
    imputed : tuple of str
        Axes whose value was missing and imputed.
    outside : tuple of str
        Axes whose value lies outside the 1st-99th percentiles of the training
        patients: the reading there is an extrapolation.
    """

    values: Mapping
    points: Mapping
    total: float
    linear_predictor: float
    survival: Mapping
    median_survival: float | None = None
    imputed: tuple[str, ...] = field(default=())
    outside: tuple[str, ...] = field(default=())


SPREAD_PERCENTILES = (1.0, 5.0, 10.0, 25.0, 50.0, 75.0, 90.0, 95.0, 99.0)
"""Training percentiles kept for the signature axis (as clinical terms keep them)."""
