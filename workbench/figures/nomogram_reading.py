"""Reading one patient off a nomogram's scales (points, total, survival or risk, median).

Split from :mod:`workbench.figures.nomogram_points`, which builds the scales and
re-exports these functions.
"""

from __future__ import annotations

from collections.abc import Mapping
from types import MappingProxyType

import numpy as np
from numpy.typing import ArrayLike

from workbench.errors import SpecError
from workbench.figures.nomogram_axes import (
    SIGNATURE_TERM,
    NomogramScales,
    PatientPoints,
    _is_missing,
)

__all__ = ["patient_values", "points_for_patient"]


def points_for_patient(scales: NomogramScales, raw_values: Mapping) -> PatientPoints:
    """Read one patient off the nomogram's scales.

    Parameters
    ----------
    scales : NomogramScales
    raw_values : mapping
        Value per axis name (the clinical column names, plus ``"imaging_signature"``
        for the signature score), as in the clinical table: numbers, level
        names, ``"<0.5"`` below a detection limit. A missing value is replaced
        by the training imputation value where the model defines one.

    Returns
    -------
    PatientPoints
    """
    absent = [t.name for t in scales.terms if t.name not in raw_values]
    if absent:
        raise SpecError(
            f"the patient has no value for {', '.join(map(repr, absent))}; the nomogram of "
            f"{scales.model!r} needs every one of: {', '.join(t.name for t in scales.terms)}."
        )
    values, points, imputed, outside = {}, {}, [], []
    for t in scales.terms:
        vals, miss = t.fill_missing([raw_values[t.name]])
        if miss[0]:
            imputed.append(t.name)
        values[t.name] = vals[0]
        p = float(t.points(vals)[0])
        if not np.isfinite(p):
            raise SpecError(f"{t.label}: the value {raw_values[t.name]!r} gives no points on the nomogram.")
        points[t.name] = p
        rng = t.training_range
        v = vals[0]
        if rng is not None and isinstance(v, (int, float, np.floating, np.integer)) and np.isfinite(float(v)):
            if not rng[0] <= float(v) <= rng[1]:
                outside.append(t.name)
    total = float(sum(points.values()))
    surv = {s.horizon: float(s.survival(total)) for s in scales.survival}
    med = scales.median_survival(total) if scales.median is not None else None
    return PatientPoints(
        values=MappingProxyType(values), points=MappingProxyType(points), total=total,
        linear_predictor=float(scales.linear_predictor(total)), survival=MappingProxyType(surv),
        median_survival=med, imputed=tuple(imputed), outside=tuple(outside),
    )


def patient_values(cohort, index: int, signature_scores: ArrayLike | None = None) -> dict:
    """Raw values of one cohort row as :func:`points_for_patient` expects them."""
    row = cohort.clinical.iloc[int(index)]
    out = {str(k): (None if _is_missing(v) else v) for k, v in row.items()}
    if signature_scores is not None:
        out[SIGNATURE_TERM] = float(np.asarray(signature_scores, dtype=float)[int(index)])
    return out
