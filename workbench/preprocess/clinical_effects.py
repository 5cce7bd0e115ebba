"""Using fitted clinical terms: contributions to the linear predictor and hazard-ratio rows.

Drives the nomogram axes and the hazard-ratio table (see :mod:`workbench.preprocess.clinical`).
"""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike
from scipy.stats import norm

from workbench.errors import ModelError, SpecError
from workbench.preprocess.clinical_terms import HazardRatioRow, TermInfo, _as_series, _encode
from workbench.preprocess.values import (
    RowContext,
)

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
