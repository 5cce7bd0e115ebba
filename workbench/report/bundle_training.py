"""What a model bundle records about its training cohort: numbers only, no patients.

:class:`TrainingSummary` (counts, follow-up, Kaplan-Meier survival at the horizons,
patients per centre and scanner, imaging percentiles for out-of-range flags, the
risk-group cut-points of each model) and :func:`summarise_training`, which builds it
from the training cohort and the fitted models.
"""

from __future__ import annotations

from dataclasses import asdict, dataclass, field, replace

import numpy as np

from workbench.cohort.core import Cohort
from workbench.cohort.summary import CAUTION, CohortSummary, HorizonSurvival, summarise_cohort
from workbench.errors import BundleError
from workbench.models.registry import offered_models
from workbench.report.bundle_files import _jsonable
from workbench.stats.riskgroups import learn_cutpoints


@dataclass(frozen=True)
class TrainingSummary:
    """What a bundle records about its training cohort: numbers only, no patients.

    Attributes
    ----------
    n_patients, n_events, n_censored : int
    time_unit : str
    median_followup : float
        Reverse Kaplan-Meier median follow-up.
    max_followup, last_event_time : float
        Longest follow-up and latest event time (predictions beyond the last
        event carry the last estimate forward).
    horizons : tuple of HorizonSurvival
        Kaplan-Meier survival with 95% CI and numbers at risk at the horizons.
    centres, batches : dict of str to int
        Patients per centre and per scanner / batch.
    imaging_p01, imaging_p99 : dict of str to float
        1st and 99th training percentiles of each imaging feature (raw values,
        before harmonisation), for out-of-range flags on new patients.
    risk_cutpoints : dict of str to tuple of float
        Per model, the cut-points of the training risk scores (higher = worse;
        tertiles by default); a patient exactly on a cut-point joins the lower
        group (:mod:`workbench.stats.riskgroups`).
    caution : str
    """

    n_patients: int
    n_events: int
    n_censored: int
    time_unit: str
    median_followup: float
    max_followup: float
    last_event_time: float
    horizons: tuple[HorizonSurvival, ...] = ()
    centres: dict = field(default_factory=dict)
    batches: dict = field(default_factory=dict)
    imaging_p01: dict = field(default_factory=dict)
    imaging_p99: dict = field(default_factory=dict)
    risk_cutpoints: dict = field(default_factory=dict)
    caution: str = CAUTION

    def to_dict(self) -> dict:
        """A JSON-ready dictionary (missing numbers as null)."""
        return _jsonable(asdict(self))

    @classmethod
    def from_dict(cls, d: dict) -> TrainingSummary:
        try:
            hz = tuple(HorizonSurvival(**{k: _num(v) if k != "at_risk" else int(v) for k, v in h.items()})
                       for h in d.get("horizons", ()))
            return cls(
                n_patients=int(d["n_patients"]), n_events=int(d["n_events"]), n_censored=int(d["n_censored"]),
                time_unit=str(d["time_unit"]), median_followup=_num(d["median_followup"]),
                max_followup=_num(d["max_followup"]), last_event_time=_num(d["last_event_time"]),
                horizons=hz,
                centres={str(k): int(v) for k, v in d.get("centres", {}).items()},
                batches={str(k): int(v) for k, v in d.get("batches", {}).items()},
                imaging_p01={str(k): _num(v) for k, v in d.get("imaging_p01", {}).items()},
                imaging_p99={str(k): _num(v) for k, v in d.get("imaging_p99", {}).items()},
                risk_cutpoints={str(k): tuple(_num(x) for x in v) for k, v in d.get("risk_cutpoints", {}).items()},
                caution=str(d.get("caution", CAUTION)),
            )
        except (KeyError, TypeError, ValueError, AttributeError) as exc:
            raise BundleError(f"the bundle's training summary is incomplete or malformed ({exc}).") from None

    @classmethod
    def from_cohort_summary(cls, s: CohortSummary) -> TrainingSummary:
        """Counts, follow-up and horizons of a :class:`CohortSummary` (patient ids are left out).

        Without the cohort itself there are no risk-group cut-points or imaging
        percentiles; use :func:`summarise_training` to have them.
        """
        return cls(
            n_patients=s.n_patients, n_events=s.n_events, n_censored=s.n_censored, time_unit=s.time_unit,
            median_followup=s.median_followup, max_followup=s.max_followup, last_event_time=float("nan"),
            horizons=tuple(s.horizons), centres=dict(s.centres), batches=dict(s.batches),
        )


def summarise_training(cohort: Cohort, models: dict | None = None, horizons=(), groups=3) -> TrainingSummary:
    """Summarise the training cohort for a bundle, including what new-patient checks need.

    Parameters
    ----------
    cohort : Cohort
        The rows the models were fitted on.
    models : dict of str to fitted model, optional
        Their training risk scores give the cut-points of the risk groups
        (:func:`workbench.stats.riskgroups.learn_cutpoints`, the rule every route uses).
    groups : int, str or sequence of float, default 3
        Number of quantile groups (or a named method, or given cut-points).
    horizons : sequence of float
        Times for Kaplan-Meier survival (the study's horizons).
    """
    s = summarise_cohort(cohort, horizons)
    feats = cohort.features
    p01, p99 = {}, {}
    if feats.shape[1]:
        A = feats.to_numpy(dtype=float)
        lo, hi = np.nanpercentile(A, [1.0, 99.0], axis=0)
        p01 = {str(c): float(v) for c, v in zip(feats.columns, lo, strict=True)}
        p99 = {str(c): float(v) for c, v in zip(feats.columns, hi, strict=True)}
    cuts = {}
    for name, model in offered_models(models or {}).items():
        risk = model.predict_risk(cohort).values
        cuts[str(name)] = tuple(float(v) for v in learn_cutpoints(risk, groups))
    ev = cohort.time[cohort.event]
    return replace(
        TrainingSummary.from_cohort_summary(s),
        last_event_time=float(ev.max()) if ev.size else float("nan"),
        imaging_p01=p01, imaging_p99=p99, risk_cutpoints=cuts,
    )


def _as_training(s) -> TrainingSummary:
    if isinstance(s, TrainingSummary):
        return s
    if isinstance(s, CohortSummary):
        return TrainingSummary.from_cohort_summary(s)
    raise BundleError(
        f"training_summary must be a TrainingSummary (from summarise_training) or a CohortSummary, "
        f"not {type(s).__name__}."
    )


def _num(v) -> float:
    return float("nan") if v is None else float(v)
