"""Individual-patient estimates of cause-specific absolute risk with confidence limits.

The competing-risks counterpart of :mod:`workbench.estimate`. :func:`estimate_competing_patient`
applies one fitted competing-risks arm (:class:`workbench.competing.fitting.FittedArm`, the
clinical or the clinical + imaging signature model of the cause of interest) to one patient's
raw values and returns a frozen :class:`CompetingPatientEstimate`: the absolute risk of the
cause of interest at each horizon by Fine-Gray, the absolute risks of the cause of interest
and of the competing cause plus the event-free survival by the cause-specific Cox models,
all with pointwise limits (:mod:`workbench.competing.absolute_risk`), the input checks of
the ordinary route (values outside the training data are flagged as extrapolation), and the
caution every estimate carries. :func:`format_competing_estimate` gives the plain text the
command line prints.

The arms keep no training data, and the limits need the training rows: the estimate takes
the training cohort and the study with the arm (the command line refits the arm from the
study file, with the study's seed, as ``workbench competing`` does).
"""

from __future__ import annotations

import warnings
from collections.abc import Sequence
from dataclasses import dataclass, replace

import numpy as np
import pandas as pd

from workbench.cohort.core import Cohort
from workbench.cohort.summary import CAUTION
from workbench.competing.absolute_risk import AbsoluteRisk, cause_specific_risks, fine_gray_risk
from workbench.competing.fitting import FittedArm, _cross_fitted_score, target_outcome
from workbench.competing.refit_limits import (
    refit_note,
    refit_withheld,
    replicate_risks,
    with_refit_limits,
)
from workbench.errors import CohortError, ModelError, SpecError
from workbench.estimate import (
    PatientChecks,
    RangeFlag,
    TrainingRanges,
    checks_lines,
    patient_cohort,
)
from workbench.report.bundle import ClinicalInput
from workbench.study import StudySpec
from workbench.units import time_phrase

__all__ = ["SIGNATURE_LIMITS_WITHHELD", "CompetingPatientEstimate", "arm_training_design", "competing_ranges", "estimate_competing_patient",
           "risk_table",
           "format_competing_estimate"]


@dataclass(frozen=True)
class CompetingPatientEstimate:
    """A patient's absolute risks (see :func:`estimate_competing_patient`).

    ``fine_gray`` is None when the cohort has no competing event (no Fine-Gray model);
    ``cause_specific`` holds every cause and the event-free survival.
    """

    model: str
    time_unit: str
    cause_names: dict
    fine_gray: AbsoluteRisk | None
    cause_specific: AbsoluteRisk
    checks: PatientChecks
    signature_score: float | None = None
    notes: tuple[str, ...] = ()
    caution: str = CAUTION
    limits_method: str = "influence function"
    """``"influence function"``, ``"refit bootstrap"`` (:mod:`workbench.competing.refit_limits`) or ``"none"``."""

    @property
    def out_of_range(self) -> bool:
        return self.checks.out_of_range


def arm_training_design(arm: FittedArm, train: Cohort, spec: StudySpec, *, random_state: int) -> np.ndarray:
    """The design matrix the arm's regressions were fitted on (training rows).

    With a signature fitted under ``[models.combined] coefficient = "prevalidated"`` the
    last column holds the cross-fitted scores, recomputed with the arm's ``random_state``
    exactly as :func:`workbench.competing.fitting.fit_arm` made them.
    """
    Xd = arm.design(train)
    if arm.n_selected and spec.models.combined.coefficient == "prevalidated":
        X = arm.transformer.transform(train).X
        score = _cross_fitted_score(train, spec, target_outcome(train, "cause"), X, arm.protect_cols,
                                    int(random_state))
        Xd = np.column_stack([Xd[:, :-1], score])
    return Xd


def competing_ranges(arm: FittedArm, train: Cohort, *, batch_column: str = "batch") -> TrainingRanges:
    """What the training cohort of ``arm`` looked like, for checking a new patient."""
    clinical = tuple(
        ClinicalInput(column=t.column, label=t.label, kind=t.kind, unit=t.unit, transform=t.transform,
                      levels=tuple(t.levels), reference=t.reference, detection_limit=t.detection_limit,
                      has_limit_indicator=t.has_limit_indicator, missing=t.missing, unseen=t.unseen,
                      impute_value=t.impute_value, train_min=t.train_min, train_max=t.train_max)
        for t in arm.transformer.terms_)
    sig = arm.signature if arm.n_selected else None
    feats = tuple(str(f) for f in sig.feature_names_in_) if sig is not None else ()
    combat = getattr(sig, "combat_", None) if sig is not None else None
    p01, p99 = {}, {}
    if train.features.shape[1]:
        lo, hi = np.nanpercentile(train.features.to_numpy(dtype=float), [1.0, 99.0], axis=0)
        p01 = {str(c): float(v) for c, v in zip(train.features.columns, lo, strict=True)}
        p99 = {str(c): float(v) for c, v in zip(train.features.columns, hi, strict=True)}
    ev = train.time[train.cause == 1] if train.cause is not None else train.time[train.event]
    return TrainingRanges(
        clinical=clinical, imaging_features=feats, imaging_p01=p01, imaging_p99=p99,
        harmonised=combat is not None, batches=() if combat is None else tuple(str(b) for b in combat.batches_),
        batch_column=batch_column, last_event_time=float(ev.max()) if ev.size else float("nan"),
        time_unit=train.time_unit, known_columns=frozenset(p01) | {batch_column},
    )


def _score_flag(score: float, train_scores: np.ndarray) -> RangeFlag | None:
    lo, hi = float(np.min(train_scores)), float(np.max(train_scores))
    if lo <= score <= hi:
        return None
    side = "below" if score < lo else "above"
    return RangeFlag("signature score", "continuous", f"{score:g}", f"{lo:.4g} to {hi:.4g}",
                     f"signature score = {score:g} is {side} the training range {lo:.4g} to {hi:.4g}; "
                     "the model extrapolates")


def estimate_competing_patient(arm: FittedArm, train: Cohort, spec: StudySpec, patient, horizons=None, *,
                               random_state: int | None = None, signature_score: float | None = None,
                               training_ranges: TrainingRanges | None = None, conf_level: float = 0.95,
                               ignore: Sequence[str] = (), training_design=None,
                               refits=None) -> CompetingPatientEstimate:
    """Absolute risk of the cause of interest and of the competing cause for one new patient.

    Parameters
    ----------
    arm : FittedArm
        Fitted by :func:`workbench.competing.fitting.fit_arm` on ``train`` for target ``"cause"``.
    train : Cohort
        The training rows of ``arm`` (needed for the limits).
    spec : StudySpec
    patient : dict or one-row DataFrame
        Raw values: clinical fields as typed and, for the clinical + imaging model, either
        the imaging features (and scanner / batch where the signature harmonises) or
        ``signature_score``.
    horizons : sequence of float, optional
        Default: the study's horizons.
    random_state : int, optional
        The seed ``arm`` was fitted with (default: the study's seed, as ``workbench competing`` uses).
    signature_score : float, optional
        The patient's signature score, instead of the imaging values (combined model only).
    training_ranges : TrainingRanges, optional
        Default :func:`competing_ranges` of ``arm`` on ``train``.
    conf_level : float
    ignore : sequence of str
        Further fields of the patient's record to leave aside.
    training_design : ndarray, optional
        :func:`arm_training_design` of ``arm`` on ``train``, when already at hand (it refits
        the cross-fitted signature scores, the slow step for several patients).
    refits : RefitBootstrap, optional
        Combined model only: the arm refitted on bootstrap samples of ``train``
        (:func:`workbench.competing.refit_limits.refit_arms`); the limits then come from the
        refits (:func:`workbench.competing.refit_limits.with_refit_limits`), when the
        simulation verdict allows them and the patient's imaging values (not a score) are given.

    Returns
    -------
    CompetingPatientEstimate

    Notes
    -----
    For the combined model the signature score enters as one covariate, and the only limits
    at hand would treat the signature's selection and weights as fixed. They are withheld
    (NaN, with :data:`SIGNATURE_LIMITS_WITHHELD` among the notes): in bench/bench_competing_patient.py
    --pipeline (150 cohorts of 300 from the demo generator, the signature reselected in every
    cohort, 8 fixed patients) their SE was 0.80 of the estimate's spread over cohorts (median;
    0.30 for the most extreme patient) and they held the mean estimate in 86% of cohorts, where
    the clinical model's limits held it in 94% (SE/SD 0.97). A bootstrap refitting the whole
    pipeline (:mod:`workbench.competing.refit_limits`; same bench with ``--refits 100``, 40 cohorts)
    held the mean estimate in 97% of cohorts (SE/SD 1.1; the project's target 92-98%), and the
    generator's full-information risk in 78-80% (the clinical model's limits: 45%); given
    ``refits`` (the patient's imaging values needed) the estimate carries those limits, with
    :data:`workbench.competing.refit_limits.REFIT_CAVEAT` among the notes.

    References
    ----------
    Fine JP, Gray RJ. J Am Stat Assoc 1999;94:496-509.
    Cheng SC, Fine JP, Wei LJ. Biometrics 1998;54:219-28.
    """
    h = np.atleast_1d(np.asarray(spec.horizons if horizons is None else horizons, dtype=float))
    if h.size == 0 or not np.all(np.isfinite(h)) or np.any(h <= 0):
        raise SpecError(f"horizons must be positive times, for example [12, 24, 36]; got {list(h)}.")
    if not 0 < conf_level < 1:
        raise SpecError(f"conf_level must lie between 0 and 1 (for example 0.95), not {conf_level}.")
    seed = int(spec.seed if random_state is None else random_state)
    has_signature = bool(arm.signature is not None and arm.n_selected)
    if refits is not None and not has_signature:
        raise SpecError("refit-bootstrap limits are for the clinical + signature model; the clinical model's "
                        "limits come from influence functions (leave refits out).")
    if signature_score is not None and not has_signature:
        raise SpecError("a signature score was given, but this model has no imaging signature; "
                        "use the combined model or leave the score out.")
    ranges = training_ranges if training_ranges is not None else competing_ranges(
        arm, train, batch_column=spec.data.batch or "batch")
    if signature_score is not None:
        s = float(signature_score)
        if not np.isfinite(s):
            raise CohortError(f"the signature score must be a finite number, not {signature_score!r}.")
        # the score stands in for the imaging values: they are neither needed nor read
        pool = set(ranges.imaging_features) | {ranges.batch_column, "batch"}
        ranges = TrainingRanges(clinical=ranges.clinical, time_unit=ranges.time_unit,
                                last_event_time=ranges.last_event_time,
                                known_columns=frozenset(ranges.known_columns) | pool)
    cohort, checks, unestimable = patient_cohort(patient, ranges, ignore=ignore)
    if unestimable:
        raise ModelError(f"{unestimable[0].message}. The model has no estimate for a level it never saw; correct "
                         "or merge the value, or refit with unseen = 'missing' and missing = 'impute' for it.")
    notes = []
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        X_train = arm_training_design(arm, train, spec, random_state=seed) if training_design is None \
            else np.asarray(training_design, dtype=float)
        if X_train.shape[0] != train.n:
            raise SpecError(f"training_design has {X_train.shape[0]} rows for {train.n} training patients; "
                            "build it with arm_training_design(arm, train, spec).")
        y_train = target_outcome(train, "cause")
        if signature_score is not None:
            x_new = np.column_stack([arm.transformer.transform(cohort).X, [[float(signature_score)]]])
            flag = _score_flag(float(signature_score), arm.design(train)[:, -1])
            if flag is not None:
                checks = PatientChecks(checks.flags + (flag,), checks.imaging_checked, checks.imaging_outside,
                                       checks.imaging_worst, checks.imputed)
            score = float(signature_score)
        else:
            x_new = arm.design(cohort)
            score = float(x_new[0, -1]) if has_signature else None
        cs = cause_specific_risks(arm.cause_specific, X_train, y_train, x_new, h, conf_level=conf_level)
        fg = None if arm.fine_gray is None else fine_gray_risk(arm.fine_gray, X_train, y_train, x_new, h,
                                                               conf_level=conf_level)
    for msg in {(w.category, str(w.message)): w for w in caught}.values():
        warnings.warn(str(msg.message), msg.category, stacklevel=2)
    if fg is None:
        notes.append("The training cohort has no competing event, so there is no Fine-Gray model.")
    how = "influence function"
    if has_signature:
        why = refit_withheld(refits, from_score=signature_score is not None)
        if why is None:
            draws = replicate_risks(refits, cohort, h)
            cs, fg = with_refit_limits(cs, fg, draws, conf_level=conf_level)
            how = "refit bootstrap"
            notes.append(refit_note(refits))
        else:
            fg = None if fg is None else _without_limits(fg)
            cs = _without_limits(cs)
            how = "none"
            notes.append(SIGNATURE_LIMITS_WITHHELD if refits is None else why)
    late = h[h > ranges.last_event_time] if np.isfinite(ranges.last_event_time) else h[:0]
    if late.size:
        notes.append(f"Horizon(s) {', '.join(f'{t:g}' for t in late)} {ranges.time_unit} lie beyond the last "
                     f"training event of the cause of interest ({ranges.last_event_time:g}); the risk there is "
                     "carried forward.")
    d = spec.data
    names = {1: ", ".join(d.event_codes or ("event",)), 2: ", ".join(d.competing_codes or ("competing",))}
    return CompetingPatientEstimate(
        model="combined" if has_signature else "clinical", time_unit=train.time_unit, cause_names=names,
        fine_gray=fg, cause_specific=cs, checks=checks, signature_score=score, notes=tuple(notes), limits_method=how)


SIGNATURE_LIMITS_WITHHELD = (
    "No confidence limits for the clinical + signature model: the limits available treat the imaging signature "
    "as fixed, leaving out the uncertainty of selecting and weighting its features, and in a simulation of the "
    "whole pipeline (the signature reselected in every cohort) they were too narrow for patients with unusual "
    "imaging values. The estimate itself is shown; the clinical model's estimate comes with limits."
    " Limits from a bootstrap that refits the whole model come with the patient's imaging values and refits "
    "(workbench competing-estimate --refits).")
"""Why the combined model's patient limits are withheld (measured in bench/bench_competing_patient.py
--pipeline; see :func:`estimate_competing_patient`, Notes)."""


def _without_limits(r: AbsoluteRisk) -> AbsoluteRisk:
    nan = np.full_like(r.risk, np.nan)
    free = np.full_like(r.event_free, np.nan)
    return replace(r, lower=nan, upper=nan.copy(), se=nan.copy(), event_free_lower=free, event_free_upper=free.copy(),
                   event_free_se=free.copy())


def _pct(x: float) -> str:
    return "n/a" if not np.isfinite(x) else f"{100 * x:.1f}%"


def _ci(est, lo, hi, level) -> str:
    if not (np.isfinite(lo) and np.isfinite(hi)):
        return f"{_pct(est)} (no limits)"
    return f"{_pct(est)} ({100 * level:g}% CI {_pct(lo)} to {_pct(hi)})"


def risk_table(est: CompetingPatientEstimate) -> pd.DataFrame:
    """The estimate as a long table: one row per route, quantity and horizon."""
    rows = []
    r = est.cause_specific
    if est.fine_gray is not None:
        f = est.fine_gray
        for j, t in enumerate(f.horizons):
            rows.append(("Fine-Gray", f"risk of {est.cause_names[1]}", t, f.risk[0, j], f.lower[0, j], f.upper[0, j]))
    for k, c in enumerate(r.causes):
        for j, t in enumerate(r.horizons):
            rows.append(("cause-specific Cox", f"risk of {est.cause_names.get(c, c)}", t, r.risk[k, j],
                         r.lower[k, j], r.upper[k, j]))
    for j, t in enumerate(r.horizons):
        rows.append(("cause-specific Cox", "free of any event", t, r.event_free[j], r.event_free_lower[j],
                     r.event_free_upper[j]))
    return pd.DataFrame(rows, columns=["route", "quantity", "horizon", "estimate", "lower", "upper"])


def format_competing_estimate(est: CompetingPatientEstimate) -> str:
    """The estimate as plain text, ending with the caution."""
    u, r, lvl = est.time_unit, est.cause_specific, est.cause_specific.conf_level
    lines = [f"Individual competing-risks estimate, {est.model} model "
             f"(cause of interest: {est.cause_names[1]}; competing: {est.cause_names[2]})", ""]
    if est.signature_score is not None:
        lines += [f"Signature score: {est.signature_score:.4g}", ""]
    if est.fine_gray is not None:
        f = est.fine_gray
        lines.append(f"Fine-Gray model, risk of {est.cause_names[1]}:")
        lines += [f"  by {time_phrase(t, u)}: {_ci(f.risk[0, j], f.lower[0, j], f.upper[0, j], lvl)}"
                  for j, t in enumerate(f.horizons)]
        lines.append("")
    lines.append("Cause-specific Cox models:")
    for j, t in enumerate(r.horizons):
        parts = [f"risk of {est.cause_names.get(c, c)} {_ci(r.risk[k, j], r.lower[k, j], r.upper[k, j], lvl)}"
                 for k, c in enumerate(r.causes)]
        parts.append(f"free of any event {_ci(r.event_free[j], r.event_free_lower[j], r.event_free_upper[j], lvl)}")
        lines.append(f"  by {time_phrase(t, u)}: " + "; ".join(parts))
    if np.any(np.isfinite(r.lower)) and est.limits_method == "influence function":
        lines += ["", "Limits: influence-function standard errors, symmetric on the log(-log) scale."]
    return "\n".join(lines + checks_lines(est.checks, est.notes, est.caution))
