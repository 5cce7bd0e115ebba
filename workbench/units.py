"""Wording of a time with its unit ("1 year", "3 years").

A study names its time unit in the plural ("years", "months", "weeks", "days") and every
horizon is printed after a number; a horizon of exactly 1 takes the singular. This module
imports nothing from the workbench, so every layer (cohort/ up to cli) may use it.
"""

from __future__ import annotations


def unit_singular(unit: str) -> str:
    """The singular of a plural time unit ("years" -> "year"); other units are left as they are."""
    return unit[:-1] if unit.endswith("s") and len(unit) > 1 else unit


def unit_for(value: float, unit: str) -> str:
    """The unit as it reads after ``value``: singular when ``value`` is exactly 1, else unchanged.

    For callers that format the number themselves (for instance with ``format_number``).
    """
    try:
        one = float(value) == 1.0
    except (TypeError, ValueError):
        one = False
    return unit_singular(unit) if one else unit


def time_phrase(value: float, unit: str) -> str:
    """A time with its unit: ``time_phrase(1, "years") == "1 year"``, ``time_phrase(3, "years") == "3 years"``.

    The number is formatted with ``:g``; an empty unit leaves the number alone.
    """
    return f"{float(value):g} {unit_for(value, unit)}".rstrip()


def unit_after_list(values, unit: str) -> str:
    """The unit after a list of times ("at 1, 3 and 5 years"): plural, unless the list is the single time 1."""
    values = list(values)
    return unit_for(values[0], unit) if len(values) == 1 else unit
