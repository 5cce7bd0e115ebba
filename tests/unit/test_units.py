"""Wording of a time with its unit (workbench.units).

English usage (recalled from memory, as in any style guide): a count of exactly one takes the
singular noun ("1 year"), every other count, decimals included, the plural ("0.5 years", "3 years").
"""

from __future__ import annotations

import numpy as np
import pytest

from workbench.units import time_phrase, unit_after_list, unit_for, unit_singular


@pytest.mark.parametrize(("value", "unit", "text"), [
    (1, "years", "1 year"),
    (1.0, "months", "1 month"),
    (np.float64(1.0), "weeks", "1 week"),
    (1, "days", "1 day"),
    (3, "years", "3 years"),
    (0.5, "years", "0.5 years"),
    (13, "weeks", "13 weeks"),
    (1.5, "months", "1.5 months"),
    (12.0, "months", "12 months"),  # formatted with :g, as before
    (1, "mm", "1 mm"),  # a unit not ending in "s" is left as it is
    (2, "mm", "2 mm"),
    (1, "", "1"),  # no unit: the number alone, no trailing space
    (3, "", "3"),
])
def test_time_phrase(value, unit, text):
    assert time_phrase(value, unit) == text


def test_singular_and_unit_after_a_number():
    assert unit_singular("years") == "year" and unit_singular("") == "" and unit_singular("s") == "s"
    assert unit_for(1, "years") == "year" and unit_for(1.0001, "years") == "years"
    assert unit_for(float("nan"), "years") == "years"


def test_a_list_of_times_stays_plural_unless_it_is_the_single_time_one():
    assert unit_after_list([1, 3, 5], "years") == "years"
    assert unit_after_list((1,), "years") == "year"
    assert unit_after_list(np.array([2.0]), "years") == "years"
    assert unit_after_list([12, 24, 36], "months") == "months"
