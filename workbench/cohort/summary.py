"""An honest first look at a cohort, before any model is fitted.

Patients, events and censoring; median follow-up by the reverse Kaplan-Meier
method (Schemper & Smith, Control Clin Trials 1996); Kaplan-Meier survival at
the horizons the user cares about; missingness; imaging features by family;
events per candidate parameter; and the minimum sample size for a prognostic
Cox model (Riley et al.).
"""

from __future__ import annotations

import re
import warnings
from dataclasses import dataclass

import numpy as np
import pandas as pd

from workbench.cohort.codes import code_order
from workbench.cohort.core import Cohort
from workbench.cohort.samplesize import SampleSizeResult, criteria_rows, minimum_sample_size
from workbench.errors import CohortError, LowEventsWarning
from workbench.stats.km import (
    kaplan_meier,
    km_ci_at,
    median_survival,
    reverse_kaplan_meier_median_followup,
    survival_at,
)
from workbench.units import time_phrase

CAUTION = (
    "Research use only. Estimates come from a retrospective cohort and model; "
    "decisions rest with the treating clinicians and local guidelines."
)


@dataclass(frozen=True)
class HorizonSurvival:
    horizon: float
    survival: float
    ci_lower: float
    ci_upper: float
    at_risk: int


@dataclass(frozen=True)
class MissingCount:
    column: str
    table: str
    n_missing: int
    fraction: float


@dataclass(frozen=True)
class CohortSummary:
    """Everything the cohort summary shows, as data."""

    n_patients: int
    n_events: int
    n_censored: int
    time_unit: str
    max_followup: float
    median_followup: float
    median_followup_ci: tuple[float, float]
    median_survival: float
    median_survival_ci: tuple[float, float]
    horizons: tuple[HorizonSurvival, ...]
    missing: tuple[MissingCount, ...]
    feature_families: dict
    n_features: int
    centres: dict
    batches: dict
    n_clinical_parameters: int
    events_per_clinical_parameter: float
    events_per_feature: float
    sample_size: SampleSizeResult
    dropped_ids: tuple[str, ...]
    caution: str = CAUTION
    clinical_parameters_source: str = "counted from the clinical columns"
    n_imaging_candidates: int = 0
    events_per_candidate_parameter: float | None = None
    sample_size_imaging: SampleSizeResult | None = None
    # with competing events: patients whose first event is a competing one (counted among
    # n_censored, as the cause-specific view censors them)
    n_competing: int | None = None


def feature_family(name: str) -> str:
    """The family prefix of an imaging feature name: the text before the first '_' or '.'."""
    m = re.match(r"^([A-Za-z0-9]+)[_.]", name)
    return m.group(1) if m else "(no prefix)"


def clinical_parameter_count(clinical: pd.DataFrame, exclude=()) -> int:
    """Candidate parameters of the clinical columns: 1 per numeric column, levels-1 per categorical one."""
    total = 0
    for c in clinical.columns:
        if c in exclude:
            continue
        v = clinical[c].dropna()
        if v.empty:
            continue
        num = pd.to_numeric(v.astype(str).str.replace("<", "", regex=False), errors="coerce")
        if num.notna().mean() > 0.9:
            total += 1
        else:
            total += max(v.nunique() - 1, 1)
    return total


def summarise_cohort(
    cohort: Cohort,
    horizons=(),
    *,
    anticipated_r2: float | None = None,
    n_candidate_parameters: int | None = None,
    sample_size_horizon: float | None = None,
    n_imaging_candidates: int = 0,
) -> CohortSummary:
    """Summarise a cohort.

    Parameters
    ----------
    cohort : Cohort
    horizons : sequence of float
        Times (in the cohort's unit) for Kaplan-Meier survival with 95% CI.
    anticipated_r2 : float, optional
        Anticipated Cox-Snell R-squared for the sample-size criteria; when not
        given, 15% of the maximum (the conservative default of Riley et al.).
    n_candidate_parameters : int, optional
        Candidate clinical parameters: the degrees of freedom of the study's
        clinical predictors (``workbench run`` passes the clinical model's design
        columns). By default counted from all clinical columns (levels - 1 for
        categorical fields), which overcounts when not every column is a predictor.
    n_imaging_candidates : int, optional
        Candidate imaging features behind the imaging models. When positive, a
        second Riley verdict is given for clinical parameters plus these
        candidates (``sample_size_imaging``): a selected signature spends the
        degrees of freedom of every feature it was chosen from.
    sample_size_horizon : float, optional
        Horizon for the overall-risk criterion; default the first horizon.

    Warns
    -----
    LowEventsWarning
        When there are fewer than 10 events per candidate clinical parameter.
    """
    t, e = cohort.time, cohort.event
    km = kaplan_meier(t, e)
    hz = []
    for h in horizons:
        h = float(h)
        if h <= 0:
            raise CohortError(f"horizon {h} must be a positive time in {cohort.time_unit}.")
        if h > t.max():
            raise CohortError(
                f"horizon {time_phrase(h, cohort.time_unit)} lies beyond the longest follow-up "
                f"({t.max():g} {cohort.time_unit}); choose a horizon inside follow-up."
            )
        s = float(survival_at(km, h))
        lo, hi = km_ci_at(km, h)
        hz.append(HorizonSurvival(h, s, float(lo), float(hi), int(np.sum(t >= h))))

    fu = reverse_kaplan_meier_median_followup(t, e)
    med = median_survival(km)

    missing = []
    for table, frame in (("clinical", cohort.clinical), ("imaging", cohort.features)):
        counts = frame.isna().sum()
        for col, k in counts[counts > 0].items():
            missing.append(MissingCount(str(col), table, int(k), float(k) / cohort.n))

    families: dict[str, int] = {}
    for c in cohort.feature_names:
        fam = feature_family(c)
        families[fam] = families.get(fam, 0) + 1

    def counts(labels):
        if labels is None:
            return {}
        labels = np.asarray(labels).astype(str)
        return {c: int(np.sum(labels == c)) for c in code_order(labels)}

    src = cohort.source
    exclude = {x for x in (src.centre_column, src.batch_column) if x}
    p_clin = n_candidate_parameters or clinical_parameter_count(cohort.clinical, exclude)
    p_source = ("degrees of freedom of the study's clinical predictors" if n_candidate_parameters
                else "counted from the clinical columns")
    n_ev = cohort.n_events
    epv = n_ev / max(p_clin, 1)
    if epv < 10:
        warnings.warn(
            f"only {epv:.1f} events per candidate clinical parameter ({n_ev} events, {p_clin} parameters); "
            "fewer than 10 (common practice) makes the clinical model unstable. Consider fewer predictors.",
            LowEventsWarning,
            stacklevel=2,
        )
    ss_kw = dict(
        n=cohort.n,
        n_events=n_ev,
        person_time=float(t.sum()),
        r2_cs=anticipated_r2,
        horizon=sample_size_horizon if sample_size_horizon is not None else (float(horizons[0]) if len(horizons) else None),
    )
    ss = minimum_sample_size(n_parameters=max(p_clin, 1), **ss_kw)
    p_img = int(n_imaging_candidates or 0)
    ss_img = minimum_sample_size(n_parameters=max(p_clin, 1) + p_img, **ss_kw) if p_img > 0 else None
    return CohortSummary(
        n_patients=cohort.n,
        n_events=n_ev,
        n_censored=cohort.n - n_ev,
        time_unit=cohort.time_unit,
        max_followup=float(t.max()),
        median_followup=float(fu.median),
        median_followup_ci=(float(fu.ci_lower), float(fu.ci_upper)),
        median_survival=float(med.median),
        median_survival_ci=(float(med.ci_lower), float(med.ci_upper)),
        horizons=tuple(hz),
        missing=tuple(missing),
        feature_families=families,
        n_features=len(cohort.feature_names),
        centres=counts(cohort.centre),
        batches=counts(cohort.batch),
        n_clinical_parameters=int(p_clin),
        events_per_clinical_parameter=float(epv),
        # NaN for a clinical-only study: there is no imaging feature to count events against
        events_per_feature=n_ev / len(cohort.feature_names) if cohort.feature_names else float("nan"),
        sample_size=ss,
        dropped_ids=src.dropped_ids,
        clinical_parameters_source=p_source,
        n_imaging_candidates=p_img,
        events_per_candidate_parameter=n_ev / (max(p_clin, 1) + p_img) if p_img > 0 else None,
        sample_size_imaging=ss_img,
        n_competing=None if cohort.cause is None else int(np.sum(cohort.cause == 2)),
    )


def _num(x: float) -> str:
    return "not reached" if not np.isfinite(x) else f"{x:.1f}"


def _short(x: float) -> str:
    return f"{x:.1f}".rstrip("0").rstrip(".")


def followup_text(median, ci, unit: str, longest) -> str:
    """Median follow-up by the reverse Kaplan-Meier method, as the console, report and methods print it.

    "25.6 months (95% CI 23.1 to 28.0)"; with a missing upper limit "(95% CI from 23.1)". When few
    patients are censored the reverse Kaplan-Meier curve may stay above one half to the end: the
    median is then not reached, and the phrase says what that means instead of printing "n/a".
    """
    def ok(x) -> bool:
        return x is not None and np.isfinite(float(x))

    lo, hi = ci if ci is not None else (None, None)
    if ok(median):
        limits = (f" (95% CI {_short(lo)} to {_short(hi)})" if ok(lo) and ok(hi)
                  else f" (95% CI from {_short(lo)})" if ok(lo) else "")
        return f"{_short(median)} {unit}{limits}"
    return (f"not reached: more than half of the patients were still under follow-up at the longest follow-up "
            f"({_short(longest)} {unit}); few patients were censored")


def _per_feature_line(epf: float) -> str:
    if epf < 10:  # fewer than 10 events per candidate parameter: common practice
        return f"Events per imaging feature: {epf:.2f} (why the signature needs penalisation and honest validation)"
    return f"Events per imaging feature: {epf:.1f}"


def _median_line(what: str, median: float, ci: tuple[float, float], u: str) -> str:
    """'what: 12.3 months (95% CI ...)', or 'not reached' without a unit after it."""
    lo, hi = (_num(c) + ("" if not np.isfinite(c) else f" {u}") for c in ci)
    if not np.isfinite(median):
        return f"{what}: not reached within follow-up (95% CI {lo} to {hi})"
    return f"{what}: {median:.1f} {u} (95% CI {_num(ci[0])} to {_num(ci[1])})"


def format_summary(s: CohortSummary) -> str:
    """The summary as plain text for a terminal or a log."""
    u = s.time_unit
    lines = [
        "Cohort summary",
        "==============",
        f"Patients {s.n_patients}   events {s.n_events} ({100 * s.n_events / s.n_patients:.0f}%)   censored {s.n_censored}"
        if s.n_competing is None else
        f"Patients {s.n_patients}   events of interest {s.n_events} ({100 * s.n_events / s.n_patients:.0f}%)   "
        f"competing events {s.n_competing} ({100 * s.n_competing / s.n_patients:.0f}%)   "
        f"censored {s.n_censored - s.n_competing}",
        f"Median follow-up (reverse Kaplan-Meier): {followup_text(s.median_followup, s.median_followup_ci, u, s.max_followup)}"
        f"; longest {_short(s.max_followup)} {u}",
        _median_line("Median survival", s.median_survival, s.median_survival_ci, u),
    ]
    if s.n_competing is not None:
        lines.append("(Kaplan-Meier figures here censor the competing events: cause-specific, not the risk of the "
                     "event; 'workbench competing' gives the cumulative incidence of each cause.)")
    if s.horizons:
        lines.append("")
        lines.append(f"Kaplan-Meier survival{'':27s}at risk")
        for h in s.horizons:
            when = f"at {time_phrase(h.horizon, u)}:"
            lines.append(
                f"  {when:16s}{100 * h.survival:5.1f}% (95% CI {100 * h.ci_lower:4.1f} to "
                f"{100 * h.ci_upper:4.1f})  {h.at_risk:6d}"
            )
    if s.centres:
        lines.append("")
        lines.append("Centres: " + ", ".join(f"{k} {v}" for k, v in s.centres.items()))
    if s.batches:
        lines.append("Scanners/batches: " + ", ".join(f"{k} {v}" for k, v in s.batches.items()))
    lines.append("")
    if s.n_features:
        lines.append(
            f"Imaging features: {s.n_features} in {len(s.feature_families)} families ("
            + ", ".join(f"{k} {v}" for k, v in sorted(s.feature_families.items()))
            + ")"
        )
    else:
        lines.append("Imaging features: none (a clinical-only study)")
    lines.append("")
    if s.missing:
        lines.append("Missing values:")
        for m in sorted(s.missing, key=lambda m: -m.n_missing)[:15]:
            lines.append(f"  {m.table:8s} {m.column:28s} {m.n_missing:5d} ({100 * m.fraction:.1f}%)")
        if len(s.missing) > 15:
            lines.append(f"  ... and {len(s.missing) - 15} more columns")
    else:
        lines.append("Missing values: none")
    ss = s.sample_size
    lines += [
        "",
        f"Events per candidate clinical parameter: {s.events_per_clinical_parameter:.1f} "
        f"({s.n_events} events / {s.n_clinical_parameters} parameters, {s.clinical_parameters_source})",
        _per_feature_line(s.events_per_feature) if s.n_features
        else "Events per imaging feature: not applicable (no imaging features)",
        "",
        f"Minimum sample size for a Cox model with {ss.n_parameters} parameters (Riley et al. 2019/2020),",
        f"  Cox-Snell R-squared {ss.r2_cs:.3f}, {ss.r2_cs_source}; maximum {ss.max_r2_cs:.3f}:",
    ]
    lines += [f"  - {what}: {n} patients" for what, n in criteria_rows(ss, u)[:-1]]
    verdict = "meets" if ss.adequate else "falls short of"
    lines.append(
        f"  patients needed: {ss.n_required} ({ss.events_required} events), the most demanding of these; "
        f"this cohort ({ss.n_available}) {verdict} it."
    )
    si = s.sample_size_imaging
    if si is not None:
        v2 = "meets" if si.adequate else "falls short of"
        lines += [
            f"With the {s.n_imaging_candidates} candidate imaging features as well ({si.n_parameters} candidate "
            f"parameters, {s.events_per_candidate_parameter:.2f} events per parameter):",
            f"  required {si.n_required} patients ({si.events_required} events); this cohort {v2} it"
            + ("" if si.adequate else ": an imaging model needs penalisation and honest validation"),
        ]
    if s.dropped_ids:
        lines.append("")
        lines.append(f"Patients left out because they were in only one table: {len(s.dropped_ids)}")
    lines += ["", f"Caution: {s.caution}"]
    return "\n".join(lines)
