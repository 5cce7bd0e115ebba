"""Is a new cohort (or patient) on the same scale as the bundle's training data?

A bundle applied to times counted in days when it was trained in months, or
to a tumour volume in mm³ when it was trained in cm³, gives numbers that look
fine and mean nothing. These checks compare the new data with what the bundle
records about its training cohort (numbers only, no patients) and raise a
:class:`~workbench.errors.UnitWarning` naming the likely cause. They never
change the data.

* :func:`check_cohort_scale` (``workbench apply``): median follow-up (reverse
  Kaplan-Meier) against the training median, and the median of each imaging
  feature and continuous clinical predictor against the training range;
* :func:`check_patient_scale` (``workbench estimate``): one patient's values
  against the training ranges.

Thresholds are rules of thumb (stated beside each constant), not published values.
"""

from __future__ import annotations

import warnings

import numpy as np

from workbench.errors import UnitWarning
from workbench.stats.km import reverse_kaplan_meier_median_followup

FOLLOWUP_RATIO = 4.0
"""Median follow-up more than this many times longer or shorter than in training is flagged
(cohorts from different hospitals differ, but rarely by this much: rule of thumb)."""

MATCH_FACTOR = 2.0
"""A ratio within this factor of a known unit ratio is named as that unit change (rule of thumb)."""

VALUE_RATIO = 2.5
"""A median (or a patient's value) beyond this multiple of the training 99th percentile or maximum, or below
the training 1st percentile or minimum divided by it, is flagged (rule of thumb)."""

TIME_RATIOS = {
    365.25: "days read as years", 52.18: "weeks read as years", 30.44: "days read as months",
    12.0: "months read as years", 7.0: "days read as weeks", 4.35: "weeks read as months",
}
VALUE_RATIOS = {
    10.0: "a factor of 10 (such as mm vs cm)", 100.0: "a factor of 100 (such as percent vs fraction, mm² vs cm²)",
    1000.0: "a factor of 1000 (such as mm³ vs cm³ or ml, g vs kg)", 12.0: "a factor of 12 (such as months vs years)",
}


def scale_cause(ratio: float, candidates: dict) -> str | None:
    """The known unit change closest to ``ratio`` (either direction), if within :data:`MATCH_FACTOR`."""
    if not np.isfinite(ratio) or ratio <= 0:
        return None
    r = max(ratio, 1.0 / ratio)
    best = min(candidates, key=lambda c: abs(np.log(r / c)))
    if abs(np.log(r / best)) > np.log(MATCH_FACTOR):
        return None
    text = candidates[best]
    if ratio < 1 and " read as " in text:  # times shorter than in training: the reverse mix-up
        small, big = text.split(" read as ")
        text = f"{big} read as {small}"
    return text


def _warn(msg: str) -> None:
    warnings.warn(msg, UnitWarning, stacklevel=3)


def check_cohort_scale(cohort, training, clinical_inputs=(), *, source: str = "the new cohort") -> list[str]:
    """Warn when a new cohort's follow-up or values are far from the bundle's training data.

    Parameters
    ----------
    cohort : Cohort
        The new cohort as read with the bundle's column mapping.
    training : TrainingSummary
        ``bundle.training``.
    clinical_inputs : sequence of ClinicalInput
        Continuous clinical predictors with their training ranges.
    source : str
        How to name the cohort in messages (e.g. the clinical file).

    Returns
    -------
    list of str
        The messages (each also raised as a :class:`UnitWarning`).
    """
    msgs = []
    unit = training.time_unit
    clin_file = getattr(cohort.source, "clinical_file", "") or source
    feat_file = getattr(cohort.source, "feature_file", "") or source
    new_median = float(reverse_kaplan_meier_median_followup(cohort.time, cohort.event).median)
    if not np.isfinite(new_median):
        new_median = float(np.median(cohort.time))
    ratio = new_median / training.median_followup if training.median_followup > 0 else np.nan
    if np.isfinite(ratio) and (ratio > FOLLOWUP_RATIO or ratio < 1 / FOLLOWUP_RATIO):
        cause = scale_cause(ratio, TIME_RATIOS)
        likely = (f" The ratio matches {cause}: convert the times to {unit} before applying the bundle."
                  if cause else " Check that the times are in " + unit + " and counted from the same start point.")
        msgs.append(
            f"{clin_file}: median follow-up {new_median:.4g} {unit} against {training.median_followup:.4g} {unit} in "
            f"the training cohort ({ratio:.3g} times).{likely}"
        )
    flagged = []
    for name, values in cohort.features.items():
        lo, hi = training.imaging_p01.get(name), training.imaging_p99.get(name)
        r = _value_ratio(values.to_numpy(dtype=float), lo, hi)
        if r is not None:
            flagged.append((name, r, lo, hi))
    msgs += _scale_messages(flagged, feat_file, "1st-99th percentile")
    flagged = []
    for c in clinical_inputs:
        if c.kind not in ("linear", "spline") or c.column not in cohort.clinical.columns or c.train_min is None:
            continue
        vals = cohort.clinical[c.column].astype(str).str.lstrip("<").str.strip()
        num = np.asarray(vals.map(_number), dtype=float)
        r = _value_ratio(num, c.train_min, c.train_max)
        if r is not None:
            flagged.append((c.column, r, c.train_min, c.train_max))
    msgs += _scale_messages(flagged, clin_file, "range")
    for m in msgs:
        _warn(m)
    return msgs


def _scale_messages(flagged, source, what: str) -> list[str]:
    if not flagged:
        return []
    flagged.sort(key=lambda f: -max(f[1], 1 / f[1]))
    parts = []
    for name, r, lo, hi in flagged[:5]:
        cause = scale_cause(r, VALUE_RATIOS)
        parts.append(f"{name!r} (median {r:.3g} times the training scale, training {what} {lo:.4g} to {hi:.4g}"
                     + (f"; {cause}?" if cause else "") + ")")
    return [
        f"{source}: {len(flagged)} column(s) have a median far outside the training range: {'; '.join(parts)}"
        f"{' ...' if len(flagged) > 5 else ''}. A different unit or a different extraction setting looks like "
        "this; convert the values to the training units before applying the bundle."
    ]


def _number(text: str) -> float:
    try:
        return float(text)
    except ValueError:
        return np.nan


def _value_ratio(values: np.ndarray, lo, hi) -> float | None:
    """Median over the centre of the training range when the median lies far outside [lo, hi]; else None.

    The centre is the geometric mid-point of a positive range (the arithmetic one otherwise), so that
    the ratio estimates the factor of a unit change.
    """
    if lo is None or hi is None or values.size == 0 or np.all(np.isnan(values)):
        return None
    med = float(np.nanmedian(values))
    centre = float(np.sqrt(lo * hi)) if lo > 0 else (lo + hi) / 2.0
    if centre <= 0 or lo <= med <= hi:
        return None
    if (med > hi and hi > 0 and med / hi >= VALUE_RATIO) or (0 < med < lo and lo / med >= VALUE_RATIO):
        return med / centre
    return None


def check_patient_scale(checks, *, source: str = "the patient") -> list[str]:
    """Warn when a patient's out-of-range values look like a unit change.

    ``checks`` is the :class:`~workbench.estimate.PatientChecks` of the estimate
    (its flags carry the value and the training range as text).
    """
    msgs = []
    for f in tuple(checks.flags) + tuple(checks.imaging_worst):
        if f.kind not in ("continuous", "imaging"):
            continue
        try:
            x = float(f.value)
            lo, hi = (float(v) for v in f.expected.split(" to "))
        except ValueError:
            continue
        r = _value_ratio(np.array([x]), lo, hi)
        if r is None:
            continue
        cause = scale_cause(r, VALUE_RATIOS)
        msgs.append(
            f"{source}: {f.field} = {x:g} is {r:.3g} times the training scale (range {lo:g} to {hi:g})"
            + (f"; {cause} looks like this" if cause else "")
            + ". Check the unit before using the estimate."
        )
    for m in msgs:
        _warn(m)
    return msgs


def check_bundle_cohort(bundle, cohort, source) -> list[str]:
    """:func:`check_cohort_scale` with everything taken from a loaded bundle (the hook ``apply`` calls)."""
    seen, inputs = set(), []
    for name in bundle.models:
        for c in bundle.inputs(name).clinical:
            if c.column not in seen:
                seen.add(c.column)
                inputs.append(c)
    return check_cohort_scale(cohort, bundle.training, inputs, source=str(source))
