"""Follow-up times that cannot be meant as written, or only in another unit.

Rules (each with the file, column and spreadsheet rows in its message):

* a follow-up time of exactly 0 is an error: a patient never at risk adds
  nothing to a survival model, and an event at time 0 usually means the start
  point is wrong (the user removes the rows or gives the real time);
* a follow-up longer than :data:`MAX_YEARS` years in the declared unit is an
  error (no study follows anyone that long; a missing-value code such as 99999
  or times in a smaller unit look like this), with the unit the times most
  likely are in;
* a median follow-up longer than :data:`MEDIAN_WARN_YEARS` years is a
  :class:`~workbench.errors.UnitWarning` naming the likely unit (days declared
  as months give a median of several hundred months).
"""

from __future__ import annotations

import warnings

import numpy as np

from workbench.cohort.core import TIME_UNITS
from workbench.cohort.schema import rows_text
from workbench.errors import CohortError, UnitWarning

MAX_YEARS = 120.0
"""Longest believable follow-up: longer than a human life (common sense, not a published threshold)."""

MEDIAN_WARN_YEARS = 25.0
"""A median follow-up beyond this is very unusual for a clinical cohort (rule of thumb)."""

TYPICAL_MEDIAN_YEARS = 3.0
"""Typical median follow-up of a prognostic cohort, used only to rank candidate units (rule of thumb)."""


def in_years(t, unit: str) -> np.ndarray:
    return np.asarray(t, dtype=float) / TIME_UNITS[unit]


def likely_unit(median: float, longest: float, declared: str) -> str | None:
    """The unit in which times with this median and maximum look most like a clinical follow-up.

    Only units giving a longest follow-up below :data:`MAX_YEARS` are candidates;
    among them the one whose median is closest (on a log scale) to a typical
    median follow-up. ``None`` when no other unit fits better than ``declared``.
    """
    best, best_gap = None, np.inf
    for unit in TIME_UNITS:
        if in_years(longest, unit) > MAX_YEARS or median <= 0:
            continue
        gap = abs(np.log(in_years(median, unit) / TYPICAL_MEDIAN_YEARS))
        if gap < best_gap:
            best, best_gap = unit, gap
    return None if best in (None, declared) else best


def unit_hint(median: float, longest: float, declared: str) -> str:
    """' If the times are in days, ...' text, or '' when no other unit fits better."""
    u = likely_unit(median, longest, declared)
    if u is None:
        return ""
    return (
        f" If the times are in {u}, the median is {in_years(median, u):.1f} years and the longest "
        f"{in_years(longest, u):.1f} years: set time_unit = \"{u}\" (command line: --time-unit {u})."
    )


def check_followup(time: np.ndarray, event: np.ndarray, unit: str, source, col: str, rows) -> None:
    """Refuse zero and lifetime-long follow-up; warn when the median suggests another unit."""
    rows = np.asarray(rows)
    zero = time == 0
    if zero.any():
        n_ev = int(event[zero].sum())
        raise CohortError(
            f"{source}, column {col!r}: follow-up time is 0 in {rows_text(rows[zero])} ({n_ev} with the event, "
            f"{int(zero.sum()) - n_ev} censored). A patient with no time at risk adds nothing to a survival "
            "model, and an event at time 0 usually means the start point is wrong. Remove these rows, or give "
            "the real time (for an event on the day of the start point, for example 0.5 days in the table's unit)."
        )
    years = in_years(time, unit)
    median, longest = float(np.median(time)), float(np.max(time))
    too_long = years > MAX_YEARS
    if too_long.any():
        raise CohortError(
            f"{source}, column {col!r}: follow-up longer than {MAX_YEARS:g} years in {rows_text(rows[too_long])} "
            f"(up to {longest:.6g} {unit}), longer than a human life. A missing-value code (such as 99999) or "
            f"times in another unit look like this.{unit_hint(median, longest, unit)} Otherwise correct the cells."
        )
    if in_years(median, unit) > MEDIAN_WARN_YEARS:
        warnings.warn(
            f"{source}, column {col!r}: the median follow-up time in the table is {median:.6g} {unit} "
            f"({in_years(median, unit):.0f} years), longer than almost any study follows its patients; "
            f"the times may be in a smaller unit than {unit!r}.{unit_hint(median, longest, unit)}",
            UnitWarning,
            stacklevel=3,
        )
