"""Cause of the first event, for studies with competing events.

The event column holds one code per patient: an event code (the cause of interest),
a competing code (an event that rules the cause of interest out, such as death from
another disease) or a censoring code. :func:`parse_cause` turns it into 0 (censored),
1 (cause of interest) and 2 (competing), refusing any value it was not told about.
"""

from __future__ import annotations

import numpy as np

from workbench.cohort.schema import parse_event
from workbench.errors import CohortError

__all__ = ["check_competing_codes", "parse_cause"]


def check_competing_codes(event_codes, censor_codes, competing_codes, error=CohortError, where: str = "") -> None:
    """Refuse competing codes that cannot be told apart from the event or censoring codes."""
    comp = [str(c).strip() for c in (competing_codes or ())]
    if not comp:
        raise error(f"{where}competing_codes is empty; list the codes of the competing events, "
                    "e.g. competing_codes = [\"other\"], or leave the key out.")
    if not event_codes:
        raise error(f"{where}competing_codes needs event_codes as well: say which code is the event of interest "
                    "(e.g. event_codes = [\"cancer\"], competing_codes = [\"other\"]).")
    for name, codes in (("event_codes", event_codes), ("censor_codes", censor_codes or ())):
        both = sorted(set(comp) & {str(c).strip() for c in codes})
        if both:
            raise error(f"{where}competing_codes and {name} share {', '.join(repr(b) for b in both)}; "
                        "a code means one thing: the event of interest, a competing event or censoring.")


def parse_cause(values, source, col, rows, event_codes, competing_codes, censor_codes=None) -> np.ndarray:
    """Cause per patient: 0 censored, 1 event of interest, 2 competing event.

    Every non-missing value must be one of the codes given (a typo is never taken for
    censoring); each competing code must occur at least once, so a misspelt code in the
    study file is caught rather than silently matching nobody.
    """
    check_competing_codes(event_codes, censor_codes, competing_codes, CohortError, f"{source}, column {col!r}: ")
    comp = tuple(str(c).strip() for c in competing_codes)
    allowed_events = tuple(event_codes) + comp
    s = values.astype("string").str.strip()
    s = s.fillna("")
    absent = [c for c in comp if not (s == c).any()]
    if absent:
        seen = ", ".join(repr(v) for v in sorted(set(s))[:8])
        raise CohortError(f"{source}, column {col!r}: competing code(s) {', '.join(repr(a) for a in absent)} "
                          f"occur in no row; the values found are {seen}. Correct competing_codes.")
    # parse_event checks missing values and unknown codes with the competing codes counted as events
    any_event = parse_event(values, source, col, rows, allowed_events, censor_codes)
    is_comp = s.isin(comp).to_numpy()
    cause = np.zeros(len(s), dtype=np.int64)
    cause[any_event & ~is_comp] = 1
    cause[is_comp] = 2
    return cause
