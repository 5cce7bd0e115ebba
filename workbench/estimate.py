"""Individual-patient estimates: survival with confidence limits, risk group and range checks.

:func:`estimate_patient` applies one fitted model to one patient's raw values
(clinical fields as typed, imaging features, scanner / batch) and returns a
frozen :class:`PatientEstimate`: the survival curve on a time grid, survival at
the horizons with pointwise confidence limits, the linear predictor, the
patient's risk group among the training tertiles, flags for every value outside
the training data, and the caution text every estimate carries.

The input checks (:func:`check_patient`, :class:`TrainingRanges`) and the patient
files (:func:`read_patient_file`) live in :mod:`workbench.patient_values` and are
offered here too; :func:`format_estimate` gives the plain text the command line prints.
"""

from __future__ import annotations

import warnings
from collections.abc import Sequence
from dataclasses import dataclass, replace

import numpy as np

from workbench.cohort.core import Cohort
from workbench.cohort.summary import CAUTION
from workbench.errors import ModelError, SpecError
from workbench.models.base import as_times, clone_model
from workbench.models.cox import ClinicalCox, CombinedCox
from workbench.patient_values import (  # noqa: F401  (the names estimate offered before the split)
    PatientChecks,
    RangeFlag,
    TrainingRanges,
    _validate,
    check_patient,
    patient_cohort,
    ranges_from_bundle,
    ranges_from_model,
    read_patient_file,
    read_patient_rows,
)
from workbench.stats.riskgroups import assign_groups, group_labels
from workbench.units import time_phrase

METHODS = ("delta", "bootstrap")
MIN_BOOTSTRAP = 20  # fewer refits give unstable 2.5th / 97.5th percentiles (common practice)


# ---------------------------------------------------------------- records


@dataclass(frozen=True)
class HorizonEstimate:
    horizon: float
    survival: float
    lower: float
    upper: float


@dataclass(frozen=True)
class PatientEstimate:
    """An individual estimate (see :func:`estimate_patient`).

    ``lower``/``upper`` are NaN when the model and method give no interval;
    ``linear_predictor`` is NaN for the forest, whose ``risk_score`` is the
    ensemble cumulative hazard instead.
    """

    model: str
    time_unit: str
    times: np.ndarray
    survival: np.ndarray
    lower: np.ndarray
    upper: np.ndarray
    horizons: tuple[HorizonEstimate, ...]
    conf_level: float
    interval_method: str  # "delta", "bootstrap" or "none"
    n_bootstrap: int
    linear_predictor: float
    risk_score: float
    risk_group: str | None
    risk_cutpoints: tuple[float, ...] | None
    checks: PatientChecks
    notes: tuple[str, ...] = ()
    caution: str = CAUTION
    alive_at: float | None = None
    conditional: tuple[HorizonEstimate, ...] = ()
    """Survival to each later horizon given survival to ``alive_at`` (S(t)/S(s)), with the
    limits of the same interval method; empty without ``alive_at``."""

    @property
    def out_of_range(self) -> bool:
        return self.checks.out_of_range


# ---------------------------------------------------------------- estimate


def estimate_patient(model, patient, horizons, *, training_ranges: TrainingRanges | None = None,
                     conf_level: float = 0.95, method: str = "delta", bootstrap_models=None,
                     times=None, ignore: Sequence[str] = (), alive_at: float | None = None) -> PatientEstimate:
    """Survival estimate with confidence limits for one new patient.

    Parameters
    ----------
    model : fitted ClinicalCox, CombinedCox, PenalisedAllCox or ForestModel
    patient : dict or one-row DataFrame
        Raw values: clinical fields as typed (``"<0.5"`` allowed where the model
        has a detection limit), imaging features and the scanner / batch field.
    horizons : sequence of float
        Times (in the training time unit) for survival with confidence limits.
    training_ranges : TrainingRanges, optional
        From :func:`ranges_from_bundle` or :func:`ranges_from_model`; default
        :func:`ranges_from_model` of ``model`` alone (no imaging percentiles,
        no risk groups).
    conf_level : float
    method : {"delta", "bootstrap"}
        ``"delta"``: pointwise limits on the log cumulative hazard from the Cox
        model's covariance and baseline variance (Cox models only; the forest and
        the penalised model get no interval this way). For the combined model
        the signature score enters as one covariate, so the interval treats the
        signature's coefficients (and its harmonisation and feature selection)
        as fixed and is too narrow by the signature's own uncertainty.
        ``"bootstrap"``: percentile limits over ``bootstrap_models``, models of
        the same kind refitted on bootstrap samples of the training cohort (see
        :func:`refit_bootstrap`); this carries every fitted step's uncertainty.
    bootstrap_models : sequence of fitted models, optional
    times : array-like, optional
        Time grid of the curve; default 121 points from 0 to the last horizon.
    ignore : sequence of str
        Further fields of the patient's record to leave aside (for example an id).
    alive_at : float, optional
        A time the patient is known to have survived to (a follow-up visit): adds the
        conditional survival S(t | alive at s) = S(t) / S(s) at every later horizon, with
        limits from the same method ("delta": over (s, t] from the Cox model, see
        :func:`workbench.competing.conditional.conditional_survival_cox`; "bootstrap":
        percentiles of the refits' ratios; none for the forest and penalised model).

    Returns
    -------
    PatientEstimate

    References
    ----------
    .. [1] Link CL. Confidence intervals for the survival function using Cox's
       proportional hazard model with covariates. Biometrics 1984;40:601-9.
    .. [2] Efron B, Tibshirani RJ. An Introduction to the Bootstrap. Chapman &
       Hall, 1993, chapter 13 (percentile intervals).
    """
    if method not in METHODS:
        raise SpecError(f"method {method!r} is not known; choose 'delta' or 'bootstrap'.")
    if not 0 < conf_level < 1:
        raise SpecError(f"conf_level must lie between 0 and 1 (for example 0.95), not {conf_level}.")
    h = np.atleast_1d(np.asarray(horizons, dtype=float))
    if h.size == 0 or not np.all(np.isfinite(h)) or np.any(h <= 0):
        raise SpecError(f"horizons must be positive times, for example [12, 24, 36]; got {list(h)}.")
    ranges = training_ranges if training_ranges is not None else ranges_from_model(model)
    if alive_at is not None:
        a = float(alive_at)
        if not np.isfinite(a) or a <= 0 or a >= float(h.max()):
            unit = getattr(ranges, "time_unit", "") or ""
            raise SpecError(f"the time the patient is known to be alive (--alive-at) must be after 0 and before "
                            f"the last horizon ({time_phrase(h.max(), unit)}); got {a:g}.".replace(" )", ")"))
    cohort, checks, unestimable = _validate(patient, ranges, ignore)
    if unestimable:
        raise ModelError(
            f"{unestimable[0].message}. The model has no estimate for a level it never saw; correct or "
            "merge the value, or refit with unseen = 'missing' and missing = 'impute' for this predictor.")
    base = np.linspace(0.0, float(h.max()), 121) if times is None else np.asarray(times, dtype=float)
    grid = as_times(np.concatenate([base.ravel(), h]))
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        est = _predict(model, cohort, grid, h, conf_level, method, bootstrap_models, ranges, checks)
        if alive_at is not None:
            est = replace(est, alive_at=float(alive_at),
                          conditional=_conditional(model, cohort, h, float(alive_at), conf_level, est.interval_method,
                                                   bootstrap_models))
    # each prediction call re-encodes the patient; pass every distinct warning on once
    for msg in {(w.category, str(w.message)): w for w in caught}.values():
        warnings.warn(str(msg.message), msg.category, stacklevel=2)
    return est


def _predict(model, cohort, grid, h, conf_level, method, bootstrap_models, ranges, checks) -> PatientEstimate:
    notes = []
    nan = np.full(grid.size, np.nan)
    if method == "delta":
        if isinstance(model, (ClinicalCox, CombinedCox)):
            ci = model.predict_survival_with_ci(cohort, grid, conf_level)
            surv, lo, hi, how = ci.survival[0], ci.lower[0], ci.upper[0], "delta"
            if isinstance(model, CombinedCox):
                notes.append("The interval treats the imaging signature as fixed; it leaves out the "
                             "uncertainty of selecting and weighting its features.")
        else:
            surv, lo, hi, how = model.predict_survival(cohort, grid).probs[0], nan, nan, "none"
            notes.append("No closed-form interval for this model; use method='bootstrap' with refitted models.")
        n_boot = 0
    else:
        boots = list(bootstrap_models or ())
        if len(boots) < MIN_BOOTSTRAP:
            raise ModelError(
                f"method='bootstrap' needs at least {MIN_BOOTSTRAP} refitted models (bootstrap_models=); "
                f"got {len(boots)}. Build them with refit_bootstrap(model, training_cohort, 200, random_state=...).")
        surv = model.predict_survival(cohort, grid).probs[0]
        draws = np.vstack([m.predict_survival(cohort, grid).probs[0] for m in boots])
        a = 100 * (1 - conf_level) / 2
        lo, hi = np.percentile(draws, [a, 100 - a], axis=0)
        how, n_boot = "bootstrap", len(boots)
    idx = np.searchsorted(grid, h)
    hz = tuple(HorizonEstimate(float(t), float(surv[i]), float(lo[i]), float(hi[i])) for t, i in zip(h, idx, strict=True))
    late = h[h > ranges.last_event_time] if np.isfinite(ranges.last_event_time) else h[:0]
    if late.size:
        notes.append(f"Horizon(s) {', '.join(f'{t:g}' for t in late)} {ranges.time_unit} lie beyond the last "
                     f"training event ({ranges.last_event_time:g}); survival there is carried forward.")
    lp = float(model.linear_predictor(cohort)[0]) if hasattr(model, "linear_predictor") else float("nan")
    risk = float(model.predict_risk(cohort).values[0])
    cuts = tuple(ranges.risk_cutpoints) if ranges.risk_cutpoints else None
    group = None if cuts is None else group_labels(len(cuts) + 1)[int(assign_groups([risk], cuts)[0])]
    return PatientEstimate(
        model=str(getattr(model, "name", type(model).__name__)), time_unit=ranges.time_unit, times=grid,
        survival=surv, lower=np.asarray(lo, dtype=float), upper=np.asarray(hi, dtype=float), horizons=hz,
        conf_level=float(conf_level), interval_method=how, n_bootstrap=n_boot, linear_predictor=lp,
        risk_score=risk, risk_group=group, risk_cutpoints=cuts, checks=checks, notes=tuple(notes),
    )


def _conditional(model, cohort, h, since: float, conf_level: float, how: str, bootstrap_models):
    """S(t | alive at ``since``) at the horizons after it, with limits by the estimate's method."""
    later = h[h > since]
    if not later.size:
        return ()
    grid = as_times(np.concatenate([[since], later]))
    surv = model.predict_survival(cohort, grid).probs[0]
    if not surv[0] > 0:
        raise ModelError(f"the model gives no survival to {since:g}; conditional survival after it is undefined.")
    est = surv[1:] / surv[0]
    lo = hi = np.full(later.size, np.nan)
    if how == "delta":
        from workbench.competing.conditional import conditional_survival_cox

        cs = conditional_survival_cox(model.fit_, model._design(cohort), later, since, conf_level=conf_level)
        lo, hi = cs.lower[0], cs.upper[0]
    elif how == "bootstrap":
        from workbench.competing.conditional import refit_ratio_limits

        draws = np.vstack([m.predict_survival(cohort, grid).probs[0] for m in bootstrap_models])
        lo, hi = refit_ratio_limits(draws, conf_level)
    return tuple(HorizonEstimate(float(t), float(e), float(a_), float(b))
                 for t, e, a_, b in zip(later, est, lo, hi, strict=True))


def refit_bootstrap(model, cohort: Cohort, n_replicates: int = 200, *, random_state) -> list:
    """Unfitted copies of ``model`` fitted on ``n_replicates`` bootstrap samples of ``cohort``.

    Inner cross-validation of the signature groups rows by patient id, so the
    copies one bootstrap sample holds of a patient never straddle a fold.
    """
    if int(n_replicates) < 1:
        raise SpecError(f"n_replicates must be at least 1, not {n_replicates}.")
    rng = np.random.default_rng(random_state)
    return [clone_model(model).fit(cohort.take(rng.integers(0, cohort.n, cohort.n)))
            for _ in range(int(n_replicates))]


def _pct(x: float) -> str:
    return "n/a" if not np.isfinite(x) else f"{100 * x:.1f}%"


def format_estimate(est: PatientEstimate) -> str:
    """The estimate as plain text, ending with the caution."""
    u, lines = est.time_unit, [f"Individual estimate from model {est.model!r}", ""]
    label = {"delta": "delta method", "bootstrap": f"bootstrap, {est.n_bootstrap} refits", "none": ""}[est.interval_method]
    for hz in est.horizons:
        ci = (f" ({100 * est.conf_level:g}% CI {_pct(hz.lower)} to {_pct(hz.upper)}; {label})"
              if est.interval_method != "none" else " (no interval)")
        lines.append(f"  Survival at {time_phrase(hz.horizon, u)}: {_pct(hz.survival)}{ci}")
    if est.alive_at is not None:
        lines.append(f"  Alive at {time_phrase(est.alive_at, u)}: chance of being alive at")
        for hz in est.conditional:
            ci = (f" ({100 * est.conf_level:g}% CI {_pct(hz.lower)} to {_pct(hz.upper)})"
                  if np.isfinite(hz.lower) else " (no interval)")
            lines.append(f"    {time_phrase(hz.horizon, u)}: {_pct(hz.survival)}{ci}")
        if not est.conditional:
            lines.append("    (no horizon lies after it)")
    lines.append("")
    if np.isfinite(est.linear_predictor):
        lines.append(f"Linear predictor: {est.linear_predictor:.3f} (0 = average training patient)")
    else:
        lines.append(f"Risk score: {est.risk_score:.4g}")
    if est.risk_group is not None:
        cuts = " / ".join(f"{c:.3g}" for c in est.risk_cutpoints)
        lines.append(f"Risk group: {est.risk_group} of {len(est.risk_cutpoints) + 1} (training quantile groups, "
                     f"cut-points {cuts}; a score on a cut-point joins the lower group)")
    return "\n".join(lines + checks_lines(est.checks, est.notes, est.caution))


def checks_lines(ch, notes, caution: str) -> list[str]:
    """The closing lines of a printed estimate: values outside the training data, imputations,
    notes and the caution (shared with :mod:`workbench.estimate_competing`)."""
    lines = []
    if ch.out_of_range:
        lines += ["", "Values outside the training data:"]
        lines += [f"  {f.message}" for f in ch.flags]
        if ch.imaging_outside:
            lines.append(f"  {ch.imaging_outside} of {ch.imaging_checked} imaging features lie beyond the "
                         "training 1st-99th percentiles; furthest:")
            lines += [f"    {f.message}" for f in ch.imaging_worst]
    else:
        lines += ["", "All values lie within the training data."]
    if ch.imputed:
        lines += ["", "Imputed:"] + [f"  {t}" for t in ch.imputed]
    if notes:
        lines += ["", "Notes:"] + [f"  {t}" for t in notes]
    return lines + ["", f"Caution: {caution}"]
