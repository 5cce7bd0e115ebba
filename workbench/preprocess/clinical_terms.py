"""Fitted records of clinical terms and their encoding (see :mod:`workbench.preprocess.clinical`).

:class:`TermInfo` holds what a term learned from training rows; :class:`DesignMatrix` and
:class:`HazardRatioRow` are the transformer's outputs; ``_encode`` applies a record to raw values.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from workbench.errors import ModelError, SpecError
from workbench.preprocess.splines import rcs_basis
from workbench.preprocess.values import (
    RowContext,
    apply_detection_limit,
    check_positive,
    column_name,
    read_levels,
    read_numbers,
)

PERCENTILES = (1.0, 5.0, 10.0, 25.0, 50.0, 75.0, 90.0, 95.0, 99.0)
"""Training percentiles kept on every continuous term (for axes and contrasts)."""

_TRANSFORM_FUNCS = {None: lambda v: v, "log": np.log, "log2": np.log2}
_INVERSE_FUNCS = {None: lambda v: v, "log": np.exp, "log2": np.exp2}



# ------------------------------------------------------------------ fitted records


@dataclass(frozen=True)
class TermInfo:
    """Everything learned for one predictor, and where it sits in the design.

    Attributes
    ----------
    column, label, unit, kind, transform, missing, unseen
        As in :class:`PredictorSpec`.
    columns : tuple of str
        Design column names of this term.
    start, stop : int
        Position of the term's columns in the design matrix (``X[:, start:stop]``).
    knots : tuple of float
        Spline knots on the transformed scale (empty unless spline).
    knots_raw : tuple of float
        The same knots on the original scale of the column.
    levels : tuple of str
        Categorical / ordinal levels seen in training, in display order.
    reference : str or None
        Reference level (hazard ratio 1, contribution 0).
    scores : tuple of float
        Ordinal scores per level (0 at the reference).
    level_counts : tuple of int
        Training rows per level.
    detection_limit : float or None
        Detection limit on the original scale, if any.
    has_limit_indicator : bool
        True if the term has a "below the detection limit" indicator column
        (the last of ``columns``).
    limit_requested : bool
        True if the specification asked for detection-limit handling (so a
        below-limit value without training counterparts is an unestimable case,
        not a specification mistake).
    n_below_limit_train : int
        Training rows below the detection limit.
    train_min, train_max : float or None
        Range of the detectable training values (original scale); None for
        categorical and ordinal terms.
    percentiles : tuple of (float, float)
        ``(q, value)`` pairs for ``PERCENTILES`` of the detectable training values.
    impute_value : float, str or None
        Value filled in for missing cells when ``missing == "impute"`` (a level
        name, a number, or ``"<limit"`` when most training values were below it).
    n_missing_train : int
        Training rows with this value missing (imputed, or dropped).
    hr_note : str
        What one unit of the hazard ratio refers to (for example "per doubling").
    """

    column: str
    label: str
    unit: str
    kind: str
    transform: str | None
    missing: str
    unseen: str
    columns: tuple[str, ...]
    start: int
    stop: int
    knots: tuple[float, ...] = ()
    knots_raw: tuple[float, ...] = ()
    levels: tuple[str, ...] = ()
    reference: str | None = None
    scores: tuple[float, ...] = ()
    level_counts: tuple[int, ...] = ()
    detection_limit: float | None = None
    has_limit_indicator: bool = False
    limit_requested: bool = False
    n_below_limit_train: int = 0
    train_min: float | None = None
    train_max: float | None = None
    percentiles: tuple[tuple[float, float], ...] = ()
    impute_value: float | str | None = None
    n_missing_train: int = 0
    hr_note: str = ""

    @property
    def width(self) -> int:
        """Number of design columns."""
        return self.stop - self.start

    @property
    def design_slice(self) -> slice:
        return slice(self.start, self.stop)

    def percentile(self, q: float) -> float:
        """A stored training percentile (``q`` one of ``PERCENTILES``)."""
        for qq, v in self.percentiles:
            if np.isclose(qq, q):
                return v
        raise SpecError(f"percentile {q} of {self.column!r} is not stored; available: {[p for p, _ in self.percentiles]}.")


@dataclass(frozen=True)
class DesignMatrix:
    """Model terms for the rows kept.

    Attributes
    ----------
    X : ndarray of float, shape (n_used, n_columns)
        Design matrix of the rows where ``rows_used`` is true.
    columns : tuple of str
        Names of the design columns.
    terms : tuple of TermInfo
        One per predictor, mapping it to its columns.
    rows_used : ndarray of bool, shape (n_input,)
        Rows of the input kept (complete cases for ``complete_case`` predictors);
        drop the same rows from the outcome: ``y[rows_used]``.
    n_dropped : int
        Rows dropped for a missing value.
    n_imputed : dict of str to int
        Imputed cells per ``impute`` predictor, among the rows used.
    """

    X: np.ndarray
    columns: tuple[str, ...]
    terms: tuple[TermInfo, ...]
    rows_used: np.ndarray
    n_dropped: int
    n_imputed: dict[str, int]

    def to_frame(self) -> pd.DataFrame:
        """The design matrix as a DataFrame with the design column names."""
        return pd.DataFrame(self.X, columns=list(self.columns))


@dataclass(frozen=True)
class HazardRatioRow:
    """One row of a hazard-ratio table.

    Attributes
    ----------
    column, label : str
        Predictor column and its human-readable name.
    design_columns : tuple of str
        Design columns the contrast combines.
    contrast : str
        What is compared (for example "per doubling", "III vs I").
    log_hr, se : float
        Log hazard ratio and its standard error.
    hr, lower, upper : float
        Hazard ratio and confidence limits.
    p_value : float
        Two-sided Wald p-value.
    level : float
        Confidence level of ``lower`` and ``upper``.
    """

    column: str
    label: str
    design_columns: tuple[str, ...]
    contrast: str
    log_hr: float
    se: float
    hr: float
    lower: float
    upper: float
    p_value: float
    level: float


# ------------------------------------------------------------------ encoding


def _no_estimate_below(term: TermInfo, below: np.ndarray, where: RowContext) -> str:
    limit = "" if term.detection_limit is None else f" {term.detection_limit:.6g}"
    return (
        f"{column_name(term.column, term.label)}: {where.rows(below)} lie below the detection "
        f"limit{limit}, but no training patient did, so the model has no estimate for them. "
        "Refit on data that include such patients, or correct the values."
    )


def _encode(term: TermInfo, series: pd.Series, where: RowContext) -> tuple[np.ndarray, np.ndarray]:
    """Design columns of one term (NaN rows where missing) and the missing mask."""
    if term.kind in ("categorical", "ordinal"):
        keys, missing = read_levels(term.column, term.label, series, term.levels, term.unseen, where, "transform")
        k = np.where(missing, "", keys.astype(str))
        if term.kind == "categorical":
            others = [lv for lv in term.levels if lv != term.reference]
            z = (k[:, None] == np.asarray(others, dtype=str)[None, :]).astype(float)
        else:
            score = dict(zip(term.levels, term.scores, strict=True))
            z = np.array([score.get(v, np.nan) for v in k], dtype=float)[:, None]
    else:
        parsed = read_numbers(term.column, term.label, series, where)
        missing = parsed.missing
        stated = parsed.below_limit & ~missing
        if term.limit_requested and term.detection_limit is None and stated.any():
            raise ModelError(_no_estimate_below(term, stated, where))
        value, below = apply_detection_limit(term.column, term.label, parsed, term.detection_limit, where)
        if below.any() and not term.has_limit_indicator:
            raise ModelError(_no_estimate_below(term, below, where))
        check_positive(term.column, term.label, term.transform, value, missing, where)
        with np.errstate(invalid="ignore", divide="ignore"):
            x = _TRANSFORM_FUNCS[term.transform](np.where(missing, np.nan, value))
        z = x[:, None] if term.kind == "linear" else rcs_basis(x, term.knots)
        if term.has_limit_indicator:
            z = np.column_stack([z, below.astype(float)])
    z[missing] = np.nan
    return z, missing


def _as_series(values) -> pd.Series:
    if isinstance(values, pd.Series):
        return values.reset_index(drop=True)
    arr = np.asarray(values, dtype=object)
    return pd.Series(np.atleast_1d(arr).ravel(), dtype=object)


def _impute_row(term: TermInfo) -> np.ndarray:
    z, missing = _encode(term, _as_series([term.impute_value]), RowContext.plain(1))
    if missing.any():  # cannot happen for values learned in fit; guards hand-made TermInfo
        raise ModelError(f"the imputation value of {term.column!r} cannot be encoded.")
    return z[0]
