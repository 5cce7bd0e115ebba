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

The pieces: the fitted records and their encoding (:mod:`.clinical_terms`) and their use in
contributions and hazard-ratio rows (:mod:`.clinical_effects`); this module learns the terms
(:class:`ClinicalTransformer`) and re-exports the public names.
"""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd
from sklearn.base import BaseEstimator

from workbench.cohort import Cohort
from workbench.errors import CohortError, DataQualityWarning, NotFittedError, SpecError
from workbench.preprocess.clinical_effects import hazard_ratio_rows, term_contribution  # noqa: F401  (re-exported)
from workbench.preprocess.clinical_terms import (  # noqa: F401  (HazardRatioRow re-exported)
    _INVERSE_FUNCS,
    _TRANSFORM_FUNCS,
    PERCENTILES,
    DesignMatrix,
    HazardRatioRow,
    TermInfo,
    _encode,
    _impute_row,
)
from workbench.preprocess.predictor_spec import (  # noqa: F401  (re-exported)
    DEFAULT_KNOTS,
    KINDS,
    MISSING_POLICIES,
    TRANSFORMS,
    UNSEEN_POLICIES,
    PredictorSpec,
)
from workbench.preprocess.splines import harrell_knots
from workbench.preprocess.values import (
    RowContext,
    apply_detection_limit,
    check_positive,
    column_name,
    level_keys,
    level_order,
    read_levels,
    read_numbers,
    reference_level,
)

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
    order = level_order(count, allowed)
    if len(order) < 2:
        raise SpecError(
            f"{column_name(spec.column, spec.label)} has {len(order)} level(s) among the training patients "
            f"({', '.join(map(repr, order))}); at least two are needed to estimate an effect. "
            "Remove this predictor or merge it with another."
        )
    ref = reference_level(order, spec.reference)
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
