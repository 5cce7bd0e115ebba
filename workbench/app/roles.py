"""Guesses for a new user's own tables: column roles from names and types, horizons from follow-up.

Everything here is a suggestion shown in the page for the user to confirm; nothing
is applied without the user seeing it. Pure functions of pandas objects, so that
they can be tested without a browser.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass

import numpy as np
import pandas as pd

ID_WORDS = ("patient_id", "patientid", "pid", "patient", "subject", "case", "id", "record", "mrn")
TIME_WORDS = ("time", "surv", "follow", "fu", "os", "pfs", "dfs", "rfs", "efs", "months", "days", "years",
              "duration", "ttr", "tte", "weeks", "week", "month", "day")  # "week": lifelines' Rossi data
EVENT_WORDS = ("event", "status", "cens", "death", "dead", "died", "vital", "relapse", "recur", "progress",
               "outcome", "fail")
CENTRE_WORDS = ("centre", "center", "site", "hospital", "institution", "institute", "clinic")
BATCH_WORDS = ("scanner", "batch", "vendor", "manufacturer", "device", "protocol", "machine")

EVENT_CODE_WORDS = ("dead", "died", "death", "deceased", "event", "yes", "relapse", "relapsed", "recurrence",
                    "recurred", "progression", "progressed", "failure", "true", "y")
CENSOR_CODE_WORDS = ("alive", "censored", "censor", "no", "none", "event-free", "eventfree", "false", "n",
                     "free", "ned", "lost")
BINARY = {"0", "1", "0.0", "1.0", "true", "false"}

OUTCOME_WORDS = (("death", "death"), ("dead", "death"), ("died", "death"), ("vital", "death"),
                 ("os", "death"), ("relapse", "relapse"), ("recur", "recurrence"), ("rfs", "recurrence"),
                 ("dfs", "recurrence or death"), ("progress", "progression"), ("pfs", "progression or death"))


@dataclass(frozen=True)
class RoleGuess:
    """Suggested column roles; every field may be None when nothing fits."""

    id: str | None = None
    time: str | None = None
    event: str | None = None
    time_unit: str | None = None
    event_codes: tuple[str, ...] = ()
    censor_codes: tuple[str, ...] = ()
    centre: str | None = None
    batch: str | None = None


def _tokens(name: str) -> list[str]:
    return [t for t in re.split(r"[^a-z0-9]+", re.sub(r"([a-z])([A-Z])", r"\1_\2", str(name)).lower()) if t]


def _score(name: str, words) -> int:
    """How well a column name matches a list of words (whole tokens count more than substrings)."""
    low, toks = str(name).lower(), _tokens(name)
    best = 0
    for rank, w in enumerate(words):
        weight = len(words) - rank
        if w in toks or low == w:
            best = max(best, 100 + weight)
        elif len(w) > 3 and w in low:
            best = max(best, 50 + weight)
    return best


def _numeric(s: pd.Series) -> pd.Series:
    return pd.to_numeric(s, errors="coerce")


def _is_numeric(s: pd.Series) -> bool:
    v = s.dropna()
    return len(v) > 0 and _numeric(v).notna().mean() > 0.95


def _levels(s: pd.Series) -> list[str]:
    v = s.dropna().astype(str).str.strip()
    return sorted(v[v != ""].unique().tolist())


def _pick(cands: dict[str, int]) -> str | None:
    cands = {k: v for k, v in cands.items() if v > 0}
    return max(cands, key=lambda k: cands[k]) if cands else None


def guess_id(clinical: pd.DataFrame, features: pd.DataFrame) -> str | None:
    # no features table (a clinical-only study): the id is one of the clinical table's columns
    shared = [c for c in clinical.columns if c in features.columns] if len(features.columns) else list(clinical.columns)
    scores = {}
    for c in shared:
        unique = clinical[c].notna().all() and clinical[c].is_unique
        scores[c] = _score(c, ID_WORDS) + (30 if unique else -200)
    return _pick(scores)


def guess_time(clinical: pd.DataFrame, taken=()) -> str | None:
    scores = {}
    for c in clinical.columns:
        if c in taken or not _is_numeric(clinical[c]):
            continue
        v = _numeric(clinical[c]).dropna()
        if (v < 0).any() or v.nunique() < 5:
            continue
        scores[c] = _score(c, TIME_WORDS)
    return _pick(scores)


MAX_EVENT_LEVELS = 8
"""An event column named like one (status, event...) may hold up to this many codes: censored, the
event and competing events such as relapse and death (a rule of thumb: more look like a measurement)."""


def guess_event(clinical: pd.DataFrame, taken=()) -> str | None:
    """The event column: two-valued columns, and columns named like an event with a few codes.

    A competing-risks status (censored / event / relapse / death) has more than two values;
    taking only two-valued columns once proposed a two-valued diagnosis column instead.
    """
    scores = {}
    for c in clinical.columns:
        if c in taken:
            continue
        n = len(_levels(clinical[c]))
        name = _score(c, EVENT_WORDS)
        if n == 2:
            scores[c] = name + 10
        elif 2 < n <= MAX_EVENT_LEVELS and name > 0 and not _is_numeric(clinical[c]):
            scores[c] = name
    return _pick(scores)


def guess_codes(levels: list[str]) -> tuple[tuple[str, ...], tuple[str, ...]]:
    """(event codes, censoring codes) for a two-valued event column; empty for 0/1 and true/false.

    With more than two codes (an event and competing events) only the censoring code is
    suggested: which code is the event of interest is the user's choice.
    """
    if {x.lower() for x in levels} <= BINARY:
        return (), ()
    if len(levels) > 2:
        cz = [x for x in levels if _score(x, CENSOR_CODE_WORDS) > 0]
        return (), tuple(cz) if len(cz) == 1 else ()
    if len(levels) != 2:
        return (), ()
    ev = [x for x in levels if _score(x, EVENT_CODE_WORDS) > 0 and _score(x, CENSOR_CODE_WORDS) == 0]
    cz = [x for x in levels if _score(x, CENSOR_CODE_WORDS) > 0]
    if len(ev) == 1 and len(cz) == 1 and ev != cz:
        return (ev[0],), (cz[0],)
    if len(ev) == 1:
        return (ev[0],), tuple(x for x in levels if x != ev[0])
    if len(cz) == 1:
        return tuple(x for x in levels if x != cz[0]), (cz[0],)
    return (), ()


MAX_GUESS_YEARS = 40.0
"""Longest follow-up believed when the unit is guessed from the values alone (rule of thumb: few
clinical cohorts follow anyone for more than 40 years); cohort/followup.py refuses only beyond a lifetime."""
_PER_YEAR = {"days": 365.25, "weeks": 365.25 / 7.0, "months": 12.0, "years": 1.0}  # as cohort.core.TIME_UNITS


def guess_unit(name: str | None, values: pd.Series | None) -> str | None:
    if name:
        toks, low = _tokens(name), str(name).lower()
        for unit, words in (("days", ("days", "day", "d")), ("weeks", ("weeks", "week", "wk")),
                            ("months", ("months", "month", "mo", "mon")), ("years", ("years", "year", "yrs", "y"))):
            if any(w in toks for w in words) or any(len(w) > 3 and w in low for w in words):
                return unit
    if values is None:
        return None
    v = _numeric(values).dropna()
    if v.empty:
        return None
    med = float(v.median())
    # common practice for unlabelled follow-up: hundreds are days, tens are months, single figures years
    unit = "days" if med > 200 else "months" if med > 15 else "years"
    # ... unless the longest time would then be a follow-up of more than MAX_GUESS_YEARS: a cohort with
    # short survival (veterans' lung cancer: median 80, longest 999) is in days, not months
    longest = float(v.max())
    if unit != "days" and longest / _PER_YEAR[unit] > MAX_GUESS_YEARS:
        unit = "days" if longest / _PER_YEAR["months"] > MAX_GUESS_YEARS else "months"
    return unit


def guess_roles(clinical: pd.DataFrame, features: pd.DataFrame) -> RoleGuess:
    id_col = guess_id(clinical, features)
    time_col = guess_time(clinical, taken={id_col})
    event_col = guess_event(clinical, taken={id_col, time_col})
    ev, cz = guess_codes(_levels(clinical[event_col])) if event_col else ((), ())
    every = [c for c in list(clinical.columns) + list(features.columns) if c not in {id_col, time_col, event_col}]
    centre = _pick({c: _score(c, CENTRE_WORDS) for c in every})
    batch = _pick({c: _score(c, BATCH_WORDS) for c in every if c != centre})
    unit = guess_unit(time_col, clinical[time_col] if time_col else None)
    return RoleGuess(id_col, time_col, event_col, unit, ev, cz, centre, batch)


def outcome_name(event_column: str | None, event_codes=()) -> str:
    """The outcome in words (death, recurrence, progression...), from the event column and its codes."""
    for text in (*[str(c) for c in event_codes or ()], str(event_column or "")):
        toks, low = _tokens(text), text.lower()
        for word, outcome in OUTCOME_WORDS:
            if word in toks or (len(word) > 3 and word in low):
                return outcome
    return "the event"


def _nice(x: float) -> float:
    """``x`` rounded to a number people use for horizons (1, 2, 3, 5, 6, 12, 24, 36, 100, 365...)."""
    if x <= 0 or not math.isfinite(x):
        return 0.0
    mag = 10 ** math.floor(math.log10(x))
    steps = np.array([1, 1.2, 1.5, 2, 2.5, 3, 4, 5, 6, 8, 10]) * mag
    # as written (3 * 0.1 is 0.30000000000000004): the Design page shows a horizon as "0.3" and reads it
    # back; a proposal that did not survive that round trip counted as typed by the user, which replaced
    # the horizons box and lost the user's first edit
    return float(f"{steps[np.argmin(np.abs(steps - x))]:.10g}")


def propose_horizons(time, event, unit: str) -> tuple[float, ...]:
    """Up to three horizons inside follow-up: near the 25th, 50th and 75th percentiles of the observed times.

    Whole years (12/24/36 months, 365/730 days, 1/2/3 years) are preferred when
    they fall between the quartiles (three consecutive years around the median);
    otherwise the quartiles are rounded to nice numbers.
    Each horizon keeps patients at risk (below the 90th percentile of follow-up).
    """
    t = np.asarray(time, float)
    t = t[np.isfinite(t) & (t > 0)]
    if t.size < 5:
        return ()
    q25, q50, q75, q90 = np.percentile(t, [25, 50, 75, 90])
    year = {"days": 365.0, "weeks": 52.0, "months": 12.0, "years": 1.0}.get(unit)
    if year is not None:
        years = [k * year for k in range(1, 21) if q25 * 0.8 <= k * year <= min(q75 * 1.2, q90)]
        if len(years) >= 2:
            # three consecutive whole years, centred as near the median follow-up as they can be
            starts = range(max(len(years) - 2, 1))
            i = min(starts, key=lambda j: abs(years[min(j + 1, len(years) - 1)] - q50))
            return tuple(float(y) for y in years[i:i + 3])
    out = sorted({_nice(q) for q in (q25, q50, q75) if 0 < _nice(q) <= q90})
    return tuple(out)
