"""Nice tick values and number labels (pure arithmetic, shared by the nomogram and plots)."""

from __future__ import annotations

import numpy as np

_STEPS = (1.0, 2.0, 2.5, 5.0)
_LOG_SETS = ((1.0,), (1.0, 3.0), (1.0, 2.0, 5.0), (1.0, 2.0, 3.0, 5.0, 7.0))


def format_number(v: float, sig: int = 4) -> str:
    """Short label of a number: up to ``sig`` significant digits, no trailing zeros or exponent."""
    v = float(v)
    if v == 0 or not np.isfinite(v):
        return "0" if v == 0 else str(v)
    digits = sig - 1 - int(np.floor(np.log10(abs(v))))
    r = round(v, max(digits, 0)) if digits >= 0 else round(v, digits)
    text = np.format_float_positional(r, precision=max(digits, 0), unique=True, trim="-")
    return "0" if text in ("-0", "") else text


def _candidate_steps(span: float):
    k = int(np.floor(np.log10(span))) - 2
    for e in range(k, k + 5):
        for m in _STEPS:
            yield m * 10.0**e


def nice_ticks(lo: float, hi: float, max_ticks: int, *, cover: bool = False) -> np.ndarray:
    """Round tick values at a 1-2-2.5-5 step, at most ``max_ticks`` of them.

    ``cover=False``: ticks inside [lo, hi]. ``cover=True``: from a tick at or
    below ``lo`` to one at or above ``hi``.
    """
    lo, hi = float(lo), float(hi)
    if hi < lo:
        lo, hi = hi, lo
    if hi == lo:
        return np.array([lo])
    span = hi - lo
    best = None
    for step in _candidate_steps(span):
        if cover:
            a, b = np.floor(lo / step + 1e-9) * step, np.ceil(hi / step - 1e-9) * step
        else:
            a, b = np.ceil(lo / step - 1e-9) * step, np.floor(hi / step + 1e-9) * step
        n = int(round((b - a) / step)) + 1
        if n <= max_ticks:
            best = a + step * np.arange(n)
            break
    if best is None or best.size == 0:
        best = np.array([lo, hi])
    # remove floating noise such as 0.30000000000000004
    return np.array([float(f"{v:.12g}") for v in best])


def nice_log_ticks(lo: float, hi: float, max_ticks: int) -> np.ndarray:
    """Ticks at 1-2-5 style values on a log scale inside [lo, hi] (positive values).

    Uses the densest mantissa set with at most ``max_ticks`` ticks; falls back to
    :func:`nice_ticks` when the range is too narrow for two log-spaced values.
    """
    lo, hi = float(min(lo, hi)), float(max(lo, hi))
    e0, e1 = int(np.floor(np.log10(lo))), int(np.ceil(np.log10(hi)))
    chosen = None
    for mset in _LOG_SETS:
        vals = np.array([m * 10.0**e for e in range(e0, e1 + 1) for m in mset])
        vals = vals[(vals >= lo * (1 - 1e-9)) & (vals <= hi * (1 + 1e-9))]
        if vals.size <= max_ticks:
            chosen = vals
        else:
            break
    if chosen is None or chosen.size < 2:
        return nice_ticks(lo, hi, max_ticks)
    return np.array([float(f"{v:.12g}") for v in chosen])


# Ticks at the study's own time unit: whole years of months, weeks or days where they fit.
_TIME_STEPS = {
    "months": (3.0, 6.0, 12.0, 24.0, 36.0, 60.0, 120.0),
    "weeks": (4.0, 13.0, 26.0, 52.0, 104.0, 260.0),
    "days": (30.0, 90.0, 180.0, 365.0, 730.0, 1825.0),
    "years": (0.5, 1.0, 2.0, 5.0, 10.0),
}
# Days: whole years (0, 365, 730, 1095 ...) when they give four ticks or more; otherwise 90 or 180 days.
# Quarter years in days (91, 182, 273, 364) put "364" beside a 365-day horizon, which reads as a slip.
_WHOLE_YEARS = {"days": (365.0, 730.0, 1825.0)}


def time_ticks(t_max: float, time_unit: str = "", max_ticks: int = 7) -> np.ndarray:
    """Ticks from 0 to ``t_max`` at the calendar steps of ``time_unit`` (12/24/36 months ...).

    For months the step is a multiple or simple fraction of a year (3, 6, 12, 24 ...), for
    weeks the same in weeks; days step by whole years when that gives four ticks or more, else
    by 30, 90 or 180 days; other units fall back to :func:`nice_ticks`.
    Uses the smallest such step giving at most ``max_ticks`` ticks.
    """
    t_max = float(t_max)
    unit = str(time_unit).strip().lower()
    steps = _TIME_STEPS.get(unit)
    if steps is None or t_max <= 0:
        return nice_ticks(0.0, max(t_max, 0.0), max_ticks)
    for step in _WHOLE_YEARS.get(unit, ()):
        n = int(np.floor(t_max / step + 1e-9)) + 1
        if 4 <= n <= max_ticks:
            return step * np.arange(n)
    for step in steps:
        n = int(np.floor(t_max / step + 1e-9)) + 1
        if n <= max_ticks:
            return step * np.arange(n)
    return nice_ticks(0.0, t_max, max_ticks)
