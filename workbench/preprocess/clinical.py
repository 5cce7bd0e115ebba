"""Clinical predictors: learned once on training rows, reapplied unchanged.

A :class:`PredictorSpec` says how one column of the clinical table enters the
model (linear, restricted cubic spline, categorical, ordinal; log transforms;
values below a detection limit; missing values). :class:`ClinicalTransformer`
learns everything that depends on data -- category levels and reference, spline
knots, imputation values, the detection limit -- from the training rows only, and
stores it in frozen :class:`TermInfo` records. ``transform`` then applies those
records, unchanged, to evaluation rows and new patients, so nothing learned from
held-out patients can leak into a model (the formulaic pattern: learn a frozen
spec once, reapply it).

The same records drive the nomogram and the hazard-ratio table through
:func:`term_contribution` and :func:`hazard_ratio_rows`.

Values below a detection limit
------------------------------
A cell such as ``"<0.5"`` is never replaced by half the limit or any other
guess. Following Royston, Sauerbrei & Becher (2010), who model a "spike" of
values at zero with a binary indicator plus a continuous function of the
positive values, a predictor with a detection limit gets two parts: the usual
continuous term, which for below-limit patients is evaluated at the limit, and
an indicator column that is 1 for below-limit patients. The indicator's
coefficient is the log hazard ratio of a below-limit patient against one
measured exactly at the limit, estimated from the data rather than assumed.

References
----------
.. [1] Royston P, Sauerbrei W, Becher H. Modelling continuous exposures with a
   'spike' at zero: a new procedure based on fractional polynomials.
   Stat Med 2010;29:1219-1227.
.. [2] Harrell FE Jr. Regression Modeling Strategies, 2nd ed. Springer, 2015,
   Sections 2.4 (splines, knots) and 3 (missing data).
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass

import numpy as np
import pandas as pd
from numpy.typing import ArrayLike
from scipy.stats import norm
from sklearn.base import BaseEstimator

from workbench.cohort import Cohort
from workbench.errors import CohortError, DataQualityWarning, ModelError, NotFittedError, SpecError
from workbench.preprocess.predictor_spec import (  # noqa: F401  (re-exported)
    DEFAULT_KNOTS,
    KINDS,
    MISSING_POLICIES,
    TRANSFORMS,
    UNSEEN_POLICIES,
    PredictorSpec,
)
from workbench.preprocess.splines import harrell_knots, rcs_basis
from workbench.preprocess.values import (
    RowContext,
    apply_detection_limit,
    check_positive,
    column_name,
    level_keys,
    natural_order,
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


# ------------------------------------------------------------------ learning


def _design_names(spec: PredictorSpec, levels=(), reference=None, indicator=False) -> tuple[str, ...]:
    col = spec.column
    if spec.kind == "categorical":
        return tuple(f"{col}={lv}" for lv in levels if lv != reference)
    if spec.kind == "ordinal":
        return (f"{col}:score",)
    base = col if spec.transform is None else f"{spec.transform}({col})"
    names = [base]
    if spec.kind == "spline":
        names += [f"{base}:nl{j}" for j in range(1, spec.knots - 1)]
    if indicator:
        names.append(f"{col}:below_limit")
    return tuple(names)


def _missing_in_training(spec: PredictorSpec, series: pd.Series, where: RowContext) -> np.ndarray:
    """Missing cells (after the unseen policy), checking the cells can be read at all."""
    if spec.kind in ("categorical", "ordinal"):
        if spec.levels is None:
            return level_keys(series)[1]
        return read_levels(spec.column, spec.label, series, spec.levels, spec.unseen, where, "fit")[1]
    return read_numbers(spec.column, spec.label, series, where).missing


def _learn_levels(spec: PredictorSpec, series: pd.Series, where: RowContext, start: int) -> TermInfo:
    allowed = spec.levels
    keys, missing = (level_keys(series) if allowed is None
                     else read_levels(spec.column, spec.label, series, allowed, spec.unseen, where, "fit"))
    seen, counts = np.unique(keys[~missing].astype(str), return_counts=True)
    count = dict(zip(seen.tolist(), counts.tolist(), strict=True))
    order = natural_order(count) if allowed is None else [lv for lv in allowed if lv in count]
    if len(order) < 2:
        raise SpecError(
            f"{column_name(spec.column, spec.label)} has {len(order)} level(s) among the training patients "
            f"({', '.join(map(repr, order))}); at least two are needed to estimate an effect. "
            "Remove this predictor or merge it with another."
        )
    ref = order[0] if spec.reference is None else spec.reference
    if ref not in count:
        raise SpecError(
            f"{column_name(spec.column, spec.label)}: the reference level {ref!r} does not occur among the "
            f"training patients (levels seen: {', '.join(map(repr, order))}). Choose another reference."
        )
    scores: tuple[float, ...] = ()
    if spec.kind == "ordinal":
        pos = {lv: i for i, lv in enumerate(allowed)}
        scores = tuple(float(pos[lv] - pos[ref]) for lv in order)
    mode = max(order, key=lambda lv: count[lv])  # first in display order among ties
    return TermInfo(
        column=spec.column, label=spec.label, unit=spec.unit, kind=spec.kind, transform=None,
        missing=spec.missing, unseen=spec.unseen,
        columns=_design_names(spec, order, ref), start=start,
        stop=start + (1 if spec.kind == "ordinal" else len(order) - 1),
        levels=tuple(order), reference=ref, scores=scores,
        level_counts=tuple(count[lv] for lv in order),
        impute_value=mode if spec.missing == "impute" else None,
        n_missing_train=int(missing.sum()),
        hr_note="per category step" if spec.kind == "ordinal" else f"vs {ref}",
    )


def _learn_numeric(spec: PredictorSpec, series: pd.Series, where: RowContext, start: int) -> TermInfo:
    parsed = read_numbers(spec.column, spec.label, series, where)
    stated = parsed.below_limit & ~parsed.missing
    limit: float | None
    if spec.detection_limit == "auto":
        limits = np.unique(parsed.value[stated])
        limit = float(limits.max()) if limits.size else None
        if limits.size > 1:
            warnings.warn(
                f"{column_name(spec.column, spec.label)} gives several detection limits "
                f"({', '.join(f'{v:.6g}' for v in limits)}); the largest, {limit:.6g}, is used for all.",
                DataQualityWarning,
                stacklevel=3,
            )
    else:
        limit = spec.detection_limit
    value, below = apply_detection_limit(spec.column, spec.label, parsed, limit, where)
    obs = ~parsed.missing
    if not obs.any():
        raise CohortError(f"{column_name(spec.column, spec.label)} has no values among the training patients.")
    check_positive(spec.column, spec.label, spec.transform, value, parsed.missing, where)
    detectable = obs & ~below
    if not detectable.any():
        raise SpecError(
            f"{column_name(spec.column, spec.label)}: every training value lies below the detection limit "
            f"{limit:.6g}, so no effect of the measured value can be estimated. Use a yes/no "
            "categorical predictor instead."
        )
    has_indicator = bool(limit is not None and below[obs].any())
    raw = value[detectable]
    tf = _TRANSFORM_FUNCS[spec.transform]
    knots: tuple[float, ...] = ()
    knots_raw: tuple[float, ...] = ()
    if spec.kind == "spline":
        # Knots describe the detectable values; the below-limit spike has its own indicator.
        t = harrell_knots(tf(raw), spec.knots, name=spec.column)
        knots, knots_raw = tuple(t.tolist()), tuple(_INVERSE_FUNCS[spec.transform](t).tolist())
    impute: float | str | None = None
    if spec.missing == "impute":
        if has_indicator and below[obs].mean() >= 0.5:
            impute = f"<{float(limit)!r}"
        else:
            impute = float(np.median(value[obs]))
    names = _design_names(spec, indicator=has_indicator)
    note = {None: f"per 1 {spec.unit}".rstrip(), "log2": "per doubling",
            "log": "per e-fold increase (and per doubling)"}[spec.transform]
    return TermInfo(
        column=spec.column, label=spec.label, unit=spec.unit, kind=spec.kind,
        transform=spec.transform, missing=spec.missing, unseen=spec.unseen,
        columns=names, start=start, stop=start + len(names),
        knots=knots, knots_raw=knots_raw,
        detection_limit=limit, has_limit_indicator=has_indicator,
        limit_requested=spec.detection_limit is not None,
        n_below_limit_train=int(below[obs].sum()),
        train_min=float(raw.min()), train_max=float(raw.max()),
        percentiles=tuple(zip(PERCENTILES, np.percentile(raw, PERCENTILES).tolist(), strict=True)),
        impute_value=impute, n_missing_train=int(parsed.missing.sum()),
        hr_note="75th vs 25th percentile" if spec.kind == "spline" else note,
    )


# ------------------------------------------------------------------ transformer


def _as_frame(data) -> tuple[pd.DataFrame, np.ndarray | None]:
    if isinstance(data, Cohort):
        return data.clinical, data.ids
    if isinstance(data, pd.DataFrame):
        return data, None
    raise CohortError(
        f"clinical predictors are read from a Cohort or a pandas DataFrame, not a {type(data).__name__}."
    )


def _check_columns(frame: pd.DataFrame, specs) -> None:
    absent = [s.column for s in specs if s.column not in frame.columns]
    if absent:
        raise CohortError(
            f"the clinical table has no column(s) {', '.join(map(repr, absent))}. Columns present: "
            f"{', '.join(map(repr, map(str, frame.columns[:20])))}. Check the spelling in the study file."
        )
    dup = frame.columns[frame.columns.duplicated()]
    wanted = [s.column for s in specs if s.column in set(dup)]
    if wanted:
        raise CohortError(f"the clinical table has more than one column named {wanted[0]!r}; rename one.")


def _check_specs(predictors) -> tuple[PredictorSpec, ...]:
    specs = tuple(predictors) if isinstance(predictors, (tuple, list)) else None
    if not specs or not all(isinstance(s, PredictorSpec) for s in specs):
        raise SpecError("ClinicalTransformer needs a non-empty tuple of PredictorSpec, one per clinical predictor.")
    cols = [s.column for s in specs]
    repeated = sorted({c for c in cols if cols.count(c) > 1})
    if repeated:
        raise SpecError(f"column(s) {', '.join(map(repr, repeated))} are listed as predictors more than once.")
    return specs


class ClinicalTransformer(BaseEstimator):
    """Turn raw clinical columns into model terms learned on training rows.

    Parameters
    ----------
    predictors : tuple of PredictorSpec
        One specification per clinical predictor, in design order.

    Attributes
    ----------
    terms_ : tuple of TermInfo
        What was learned for each predictor (levels, knots, limits, imputation
        values, training range) and where it sits in the design.
    columns_ : tuple of str
        Design column names.
    n_train_ : int
        Training rows given to ``fit``.
    n_dropped_train_ : int
        Training rows left out for a missing value in a complete-case predictor;
        everything is learned on the remaining rows, the ones the model sees.
    n_imputed_train_ : dict of str to int
        Training cells imputed, per ``impute`` predictor.

    Notes
    -----
    No reference to the training table is kept; only the summaries above.
    """

    def __init__(self, predictors: tuple[PredictorSpec, ...] = ()):
        self.predictors = predictors

    def fit(self, X: Cohort | pd.DataFrame, y=None) -> ClinicalTransformer:
        """Learn levels, knots, limits and imputation values from training rows.

        Parameters
        ----------
        X : Cohort or DataFrame
            Training patients (a cohort's ``clinical`` table is used).
        y : ignored
        """
        specs = _check_specs(self.predictors)
        frame, ids = _as_frame(X)
        _check_columns(frame, specs)
        where = RowContext(frame.index, ids)
        drop = np.zeros(len(frame), dtype=bool)
        for s in specs:
            miss = _missing_in_training(s, frame[s.column], where)
            if s.missing == "complete_case":
                drop |= miss
        keep = np.flatnonzero(~drop)
        if keep.size == 0:
            raise CohortError("no training patient has all complete-case predictors recorded.")
        sub, sub_where = frame[[s.column for s in specs]].iloc[keep], where.take(keep)
        terms, start = [], 0
        for s in specs:
            learn = _learn_levels if s.kind in ("categorical", "ordinal") else _learn_numeric
            term = learn(s, sub[s.column], sub_where, start)
            terms.append(term)
            start = term.stop
        self.terms_ = tuple(terms)
        self.columns_ = tuple(c for t in terms for c in t.columns)
        self.n_train_ = len(frame)
        self.n_dropped_train_ = int(drop.sum())
        self.n_imputed_train_ = {t.column: t.n_missing_train for t in terms if t.missing == "impute"}
        return self

    def transform(self, X: Cohort | pd.DataFrame) -> DesignMatrix:
        """Apply the learned terms, unchanged, to any rows.

        Parameters
        ----------
        X : Cohort or DataFrame
            Rows to encode; never modified.

        Returns
        -------
        DesignMatrix
            Rows with a missing complete-case predictor are left out and
            flagged in ``rows_used``.
        """
        if not hasattr(self, "terms_"):
            raise NotFittedError("the clinical transformer has not been fitted; call fit on training rows first.")
        frame, ids = _as_frame(X)
        _check_columns(frame, self.terms_)
        where = RowContext(frame.index, ids)
        blocks, drop, imputed = [], np.zeros(len(frame), dtype=bool), {}
        for term in self.terms_:
            z, miss = _encode(term, frame[term.column], where)
            if term.missing == "impute":
                z[miss] = _impute_row(term)
                imputed[term.column] = miss
            else:
                drop |= miss
            blocks.append(z)
        keep = ~drop
        design = np.hstack(blocks)[keep] if blocks else np.empty((int(keep.sum()), 0))
        return DesignMatrix(
            X=design,
            columns=self.columns_,
            terms=self.terms_,
            rows_used=keep,
            n_dropped=int(drop.sum()),
            n_imputed={c: int((m & keep).sum()) for c, m in imputed.items()},
        )

    def fit_transform(self, X: Cohort | pd.DataFrame, y=None) -> DesignMatrix:
        """``fit(X).transform(X)``."""
        return self.fit(X).transform(X)


# ------------------------------------------------------------------ using fitted terms


def _term_params(term: TermInfo, coef, cov=None):
    b = np.asarray(coef, dtype=float).ravel()
    w = term.width
    if b.size != w:
        if b.size < term.stop:
            raise ModelError(
                f"{term.column!r} has {w} design column(s) at positions {term.start}-{term.stop - 1}, "
                f"but {b.size} coefficient(s) were given; pass the term's coefficients or the full vector."
            )
        b = b[term.design_slice]
    if cov is None:
        return b, None
    v = np.asarray(cov, dtype=float)
    if v.shape != (w, w):
        if v.ndim != 2 or v.shape[0] != v.shape[1] or v.shape[0] < term.stop:
            raise ModelError(
                f"the covariance matrix for {term.column!r} has shape {v.shape}; expected ({w}, {w}) "
                "or the full model's square matrix."
            )
        v = v[term.design_slice, term.design_slice]
    return b, v


def term_contribution(term_info: TermInfo, coef_slice: ArrayLike, values: ArrayLike) -> np.ndarray:
    """Contribution of one term to the linear predictor for raw values.

    Parameters
    ----------
    term_info : TermInfo
        A fitted term (from ``ClinicalTransformer.terms_``).
    coef_slice : array-like
        The term's coefficients (``term_info.width`` values) or the full
        coefficient vector of the model (sliced by the term's position).
    values : array-like of shape (n,)
        Raw predictor values as they appear in the clinical table: numbers,
        ``"<0.5"`` texts for detection-limit terms, level names.

    Returns
    -------
    ndarray of shape (n,)
        ``design_row @ coef`` for each value: the spline evaluated at the
        value for spline terms; 0 for the reference level; NaN for missing.
    """
    b, _ = _term_params(term_info, coef_slice)
    z, missing = _encode(term_info, _as_series(values), RowContext.plain(np.size(values)))
    out = np.where(missing[:, None], 0.0, z) @ b
    out[missing] = np.nan
    return out


def _row(term, names, contrast, log_hr, se, level) -> HazardRatioRow:
    zc = norm.ppf(0.5 + level / 2.0)
    p = float(2.0 * norm.sf(abs(log_hr / se))) if se > 0 else float("nan")
    return HazardRatioRow(
        column=term.column, label=term.label, design_columns=tuple(names), contrast=contrast,
        log_hr=float(log_hr), se=float(se), hr=float(np.exp(log_hr)),
        lower=float(np.exp(log_hr - zc * se)), upper=float(np.exp(log_hr + zc * se)),
        p_value=p, level=level,
    )


def hazard_ratio_rows(
    term_info: TermInfo, coef: ArrayLike, cov: ArrayLike, *, level: float = 0.95, per: float = 1.0
) -> tuple[HazardRatioRow, ...]:
    """Hazard ratios with Wald confidence intervals for one term.

    Parameters
    ----------
    term_info : TermInfo
    coef : array-like
        The term's coefficients or the full model's coefficient vector.
    cov : array-like
        The matching covariance matrix (term block or the full matrix).
    level : float
        Confidence level.
    per : float
        Increment of an untransformed linear term (HR per ``per`` units).

    Returns
    -------
    tuple of HazardRatioRow
        * linear, no transform: HR per ``per`` units, ``exp(per * b)``;
        * log2: HR per doubling, ``exp(b)``;
        * log: HR per e-fold increase, ``exp(b)``, and per doubling, ``exp(b ln 2)``;
        * spline: HR of the 75th against the 25th training percentile, from the
          contrast ``c = s(x75) - s(x25)`` of the basis rows: ``log HR = c'b`` with
          variance ``c' V c`` (the spline has no single per-unit HR);
        * detection-limit terms also get "below limit vs at the limit", ``exp(b_ind)``;
        * categorical: each level against the reference; ordinal: per category step.

    Notes
    -----
    Intervals are ``exp(log HR +- z se)`` with ``z`` the normal quantile; this
    is the Wald interval a Cox fit reports for a single coefficient. For a
    contrast, ``c'b`` is asymptotically normal with variance ``c'Vc``.

    References
    ----------
    .. [1] Harrell FE Jr. Regression Modeling Strategies, 2nd ed. Springer,
       2015 (inter-quartile-range hazard ratios for nonlinear effects).
    """
    if not 0.0 < level < 1.0:
        raise SpecError(f"confidence level must lie between 0 and 1; got {level}.")
    b, v = _term_params(term_info, coef, cov)
    t, names, rows = term_info, term_info.columns, []
    if t.kind in ("categorical", "ordinal"):
        if t.kind == "ordinal":
            step = f"per category step ({' < '.join(t.levels)})"
            rows.append(_row(t, names, step, b[0], np.sqrt(v[0, 0]), level))
        others = [lv for lv in t.levels if lv != t.reference] if t.kind == "categorical" else []
        for j, lv in enumerate(others):
            rows.append(_row(t, (names[j],), f"{lv} vs {t.reference}", b[j], np.sqrt(v[j, j]), level))
        return tuple(rows)
    unit = f" {t.unit}" if t.unit else ""
    if per == 1.0 and unit.endswith("s") and unit.strip() in ("years", "months", "weeks", "days"):
        unit = unit[:-1]  # "per 1 year", not "per 1 years"
    if t.kind == "linear":
        se = np.sqrt(v[0, 0])
        scales = {None: [(per, f"per {per:g}{unit}")], "log2": [(1.0, "per doubling")],
                  "log": [(1.0, "per e-fold increase"), (np.log(2.0), "per doubling")]}[t.transform]
        rows += [_row(t, names[:1], text, s * b[0], s * se, level) for s, text in scales]
    else:
        hi, lo = t.percentile(75.0), t.percentile(25.0)
        d, _ = _encode(t, _as_series([hi, lo]), RowContext.plain(2))
        c = d[0] - d[1]
        text = f"75th vs 25th percentile ({hi:.4g} vs {lo:.4g}{unit})"
        spline_names = names[:-1] if t.has_limit_indicator else names
        rows.append(_row(t, spline_names, text, c @ b, np.sqrt(max(c @ v @ c, 0.0)), level))
    if t.has_limit_indicator:
        j = t.width - 1
        text = f"below the detection limit vs at the limit ({t.detection_limit:.4g}{unit})"
        rows.append(_row(t, names[j:], text, b[j], np.sqrt(v[j, j]), level))
    return tuple(rows)
