"""Minimum sample size for developing a prognostic Cox model.

Implements the criteria of Riley et al. (Stat Med 2019;38:1276-96) for a
time-to-event outcome, as summarised for users in Riley et al. (BMJ
2020;368:m441):

(i)   expected uniform shrinkage of at least ``S = 0.9``:
      ``n = p / ((S - 1) ln(1 - R2cs / S))``;
(ii)  a small absolute difference ``delta = 0.05`` between apparent and adjusted
      Nagelkerke R-squared: ``S = R2cs / (R2cs + delta * R2max)``, then (i)'s
      formula with that ``S``;
(iii) precise estimation of the overall risk at a time point: the 95% CI of the
      cumulative incidence ``1 - exp(-lambda t)`` within +/- ``margin`` of its
      estimate, with ``lambda`` the overall event rate, its CI
      ``lambda * exp(+/- 1.96 / sqrt(E))`` and ``E = n * rate * mean follow-up``
      (an exponential approximation, as in the papers' time-to-event example).

``R2max = 1 - exp(2 lnL_null / n)``, with ``lnL_null = E ln(E / n) - E`` for
``E`` events among ``n`` patients: the form used in the papers' time-to-event
example (from memory). It does not depend on the time unit, as a sample size
must not.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from workbench.errors import CohortError
from workbench.units import time_phrase


@dataclass(frozen=True)
class SampleSizeResult:
    """Minimum sample size by each criterion and overall."""

    n_parameters: int
    r2_cs: float
    r2_cs_source: str
    max_r2_cs: float
    shrinkage_target: float
    n_shrinkage: int
    n_optimism: int
    shrinkage_optimism: float
    n_overall_risk: int | None
    horizon: float | None
    n_required: int
    events_required: int
    events_per_parameter_required: float
    n_available: int
    events_available: int
    adequate: bool


def max_cox_snell_r2(n_events: int, n: int) -> float:
    """Largest Cox-Snell R-squared attainable, ``1 - exp(2 lnL_null / n)``."""
    if n_events <= 0 or n <= 0:
        raise CohortError("the maximum Cox-Snell R-squared needs events and patients.")
    lnl_null = n_events * math.log(n_events / n) - n_events
    return 1.0 - math.exp(2.0 * lnl_null / n)


def n_for_shrinkage(p: int, r2_cs: float, shrinkage: float = 0.9) -> int:
    """Criterion (i): ``n = p / ((S - 1) ln(1 - R2cs / S))``, rounded up."""
    if not 0 < r2_cs < shrinkage:
        raise CohortError(f"the anticipated Cox-Snell R-squared must lie between 0 and {shrinkage}, not {r2_cs}.")
    return math.ceil(p / ((shrinkage - 1.0) * math.log(1.0 - r2_cs / shrinkage)))


def n_for_overall_risk(rate: float, mean_followup: float, horizon: float, margin: float = 0.05) -> int:
    """Criterion (iii): smallest n giving the overall risk at ``horizon`` within +/- margin."""
    risk = 1.0 - math.exp(-rate * horizon)

    def ok(n):
        e = n * rate * mean_followup
        if e <= 0:
            return False
        lo = 1.0 - math.exp(-rate * math.exp(-1.96 / math.sqrt(e)) * horizon)
        hi = 1.0 - math.exp(-rate * math.exp(1.96 / math.sqrt(e)) * horizon)
        return (risk - lo) <= margin and (hi - risk) <= margin

    lo_n, hi_n = 1, 2
    while not ok(hi_n):
        hi_n *= 2
        if hi_n > 10**9:
            raise CohortError("criterion (iii) cannot be met: the event rate is too low for this horizon.")
    while lo_n < hi_n:
        mid = (lo_n + hi_n) // 2
        if ok(mid):
            hi_n = mid
        else:
            lo_n = mid + 1
    return hi_n


def minimum_sample_size(
    *,
    n_parameters: int,
    n: int,
    n_events: int,
    person_time: float,
    r2_cs: float | None = None,
    horizon: float | None = None,
    shrinkage: float = 0.9,
    delta: float = 0.05,
    margin: float = 0.05,
) -> SampleSizeResult:
    """Minimum sample size for a Cox model with ``n_parameters`` candidate parameters.

    Parameters
    ----------
    n_parameters : int
        Candidate predictor parameters (spline and dummy columns each count).
    n, n_events, person_time : observed cohort size, events and total follow-up
        (they give the event rate, mean follow-up and the maximum R-squared).
    r2_cs : float, optional
        Anticipated Cox-Snell R-squared, e.g. from a published model. When not
        given, 15% of the maximum is used: the conservative default proposed by
        Riley et al. (BMJ 2020) for when nothing better is known.
    horizon : float, optional
        Time point for criterion (iii), in the cohort's time unit.

    References
    ----------
    Riley RD, Snell KIE, Ensor J, et al. Minimum sample size for developing a
    multivariable prediction model: part II - binary and time-to-event
    outcomes. Stat Med 2019;38:1276-96.
    Riley RD, Ensor J, Snell KIE, et al. Calculating the sample size required
    for developing a clinical prediction model. BMJ 2020;368:m441.
    """
    if n_parameters < 1:
        raise CohortError("the sample-size calculation needs at least one candidate parameter.")
    r2max = max_cox_snell_r2(n_events, n)
    source = "anticipated (user-supplied)"
    if r2_cs is None:
        r2_cs = 0.15 * r2max
        source = "15% of the maximum (conservative default)"
    if r2_cs >= r2max:
        raise CohortError(
            f"the anticipated Cox-Snell R-squared {r2_cs:.3f} is not below its maximum {r2max:.3f} "
            "for this event rate; use a smaller value."
        )
    n1 = n_for_shrinkage(n_parameters, r2_cs, shrinkage)
    s2 = r2_cs / (r2_cs + delta * r2max)
    n2 = n_for_shrinkage(n_parameters, r2_cs, s2)
    rate = n_events / person_time
    mean_fu = person_time / n
    n3 = n_for_overall_risk(rate, mean_fu, horizon, margin) if horizon is not None else None
    need = max(x for x in (n1, n2, n3) if x is not None)
    events_needed = math.ceil(need * n_events / n)
    return SampleSizeResult(
        n_parameters=n_parameters,
        r2_cs=float(r2_cs),
        r2_cs_source=source,
        max_r2_cs=float(r2max),
        shrinkage_target=shrinkage,
        n_shrinkage=n1,
        n_optimism=n2,
        shrinkage_optimism=float(s2),
        n_overall_risk=n3,
        horizon=horizon,
        n_required=need,
        events_required=events_needed,
        events_per_parameter_required=events_needed / n_parameters,
        n_available=n,
        events_available=n_events,
        adequate=n >= need,
    )


def criteria_rows(ss, time_unit: str = "") -> list[tuple[str, int]]:
    """The sample-size criteria in plain words, as (what it guarantees, patients needed) rows.

    The last row is the number of patients the study needs: the most demanding criterion.
    Used by the text summary and the app so both say the same thing.
    """
    rows = [
        (f"fitted effects need shrinking by at most {1 - ss.shrinkage_target:.0%}", ss.n_shrinkage),
        ("explained variation overstated by at most 0.05 (Nagelkerke scale)", ss.n_optimism),
    ]
    if ss.n_overall_risk is not None:
        rows.append((f"risk at {time_phrase(ss.horizon, time_unit)} estimated to within 0.05 either way", ss.n_overall_risk))
    rows.append(("patients needed (the most demanding of these)", ss.n_required))
    return rows
