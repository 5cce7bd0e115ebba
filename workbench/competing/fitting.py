"""Fit the competing-risks models of a study on training rows and predict incidences.

One *arm* is a clinical design (learned on the training rows) with, for the
clinical + imaging model, the study's imaging signature fitted on the same rows
with the outcome of the target cause (the other causes censored). On that design
the arm fits the cause-specific Cox models of every cause and the Fine-Gray model
of the cause of interest. As in the main route's clinical + signature Cox model
(:class:`~workbench.models.cox.CombinedCox`), the coefficients of the signature term
are by default estimated on cross-fitted (out-of-fold) signature scores
(``[models.combined] coefficient = "prevalidated"``): a coefficient fitted on the
scores of the very patients the signature was selected on is too large, and the
bootstrap's optimism correction does not take all of it back. Everything learned (clinical terms, feature medians,
harmonisation, signature, coefficients) lives in the fitted arm and is reapplied
unchanged to evaluation rows: inside a bootstrap replicate the signature never sees
the rows it is judged on.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass

import numpy as np
from sklearn.base import clone

from workbench.cohort.core import Cohort
from workbench.cohort.outcome import make_competing_outcome, make_outcome
from workbench.competing.outcome import IncidenceCurves
from workbench.competing.regression import (
    CauseSpecificFit,
    FineGrayFit,
    fit_cause_specific,
    fit_fine_gray,
    predict_incidence_cause_specific,
    predict_incidence_fine_gray,
)
from workbench.errors import EmptySignatureWarning, SpecError
from workbench.models.cox import fill_missing
from workbench.models.penalized import patient_folds
from workbench.models.registry import build_signature
from workbench.preprocess.clinical import ClinicalTransformer
from workbench.study import StudySpec

__all__ = ["TARGETS", "FittedArm", "fit_arm", "target_outcome"]

TARGETS = ("cause", "all_cause")
TARGET_WORDS = {"cause": "cause-of-interest", "all_cause": "all-cause"}
"""``cause``: the cause of interest with competing events; ``all_cause``: the first
event of any cause (competing events counted as events), for contrast."""


def target_outcome(cohort: Cohort, target: str) -> np.ndarray:
    """The competing-risks outcome of a target: causes 0/1/2, or 0/1 for all-cause."""
    if cohort.cause is None:
        raise SpecError("the competing-risks route needs [data] competing_codes (the codes of the competing "
                        "events in the event column), e.g. competing_codes = [\"other\"].")
    if target == "cause":
        return make_competing_outcome(cohort.time, cohort.cause)
    if target == "all_cause":
        return make_competing_outcome(cohort.time, (cohort.cause > 0).astype(int))
    raise SpecError(f"unknown target {target!r}; use one of {', '.join(TARGETS)}.")


@dataclass
class FittedArm:
    """A fitted model arm: clinical terms, optional signature, cause-specific and Fine-Gray fits."""

    transformer: ClinicalTransformer
    signature: object | None
    medians: dict
    protect_cols: tuple[int, ...]
    cause_specific: CauseSpecificFit
    fine_gray: FineGrayFit | None
    n_selected: int

    def design(self, cohort: Cohort) -> np.ndarray:
        X = self.transformer.transform(cohort).X
        if self.signature is None or not self.n_selected:
            return X
        prot = X[:, list(self.protect_cols)] if self.protect_cols else None
        score = self.signature.score(fill_missing(cohort.features, self.medians), batch=cohort.batch,
                                     covariates=prot)
        return np.column_stack([X, score])

    def predict(self, cohort: Cohort, times, method: str) -> IncidenceCurves:
        """Predicted incidence of cause 1 by ``method`` ("cause_specific" or "fine_gray")."""
        X = self.design(cohort)
        if method == "fine_gray":
            return predict_incidence_fine_gray(self.fine_gray, X, times)
        return predict_incidence_cause_specific(self.cause_specific, X, times, cause=1)


def _signature_fit(rows: Cohort, spec: StudySpec, y_cause: np.ndarray, protect, random_state: int):
    """The study's signature fitted on ``rows`` for the outcome of cause 1 (others censored), with its medians."""
    medians = rows.features.median().to_dict()
    sig = clone(build_signature(spec, int(random_state))).fit(
        fill_missing(rows.features, medians), make_outcome(rows.time, y_cause == 1), groups=rows.ids,
        batch=rows.batch, covariates=protect)
    return sig, medians


def _cross_fitted_score(train: Cohort, spec: StudySpec, y, X: np.ndarray, protect_cols, random_state: int):
    """Out-of-fold signature scores on ``train`` (patient-grouped folds of the cause of interest)."""
    folds = patient_folds(train.ids, (y["cause"] == 1).astype(int), int(spec.models.combined.prevalidation_folds),
                          random_state=int(random_state))
    score = np.zeros(train.n)
    for k in np.unique(folds):
        tr, te = np.flatnonzero(folds != k), np.flatnonzero(folds == k)
        sub, held = train.take(tr), train.take(te)
        prot = X[:, list(protect_cols)] if protect_cols else None
        sig, med = _signature_fit(sub, spec, y["cause"][tr], None if prot is None else prot[tr], random_state)
        if sig.selected_features_:
            score[te] = sig.score(fill_missing(held.features, med), batch=held.batch,
                                  covariates=None if prot is None else prot[te])
    return score


def fit_arm(train: Cohort, spec: StudySpec, target: str, *, imaging: bool, random_state: int,
            fine_gray: bool = True) -> FittedArm:
    """Fit one arm on the training rows ``train`` for ``target`` (see :data:`TARGETS`)."""
    y = target_outcome(train, target)
    transformer = ClinicalTransformer(tuple(spec.predictors)).fit(train)
    X = transformer.transform(train).X
    protect = tuple(j for t in transformer.terms_ if t.column in spec.imaging.harmonise.protect
                    for j in range(t.start, t.stop))
    signature, medians, n_sel = None, {}, 0
    if imaging:
        signature, medians = _signature_fit(train, spec, y["cause"], X[:, list(protect)] if protect else None,
                                            random_state)
        n_sel = len(signature.selected_features_)
        if not n_sel:
            warnings.warn(f"the {TARGET_WORDS.get(target, target)} signature kept no imaging feature on all "
                          "patients: the clinical + signature arm has no signature term and equals the clinical "
                          "arm, so its differences say nothing about imaging; check the feature pool, the "
                          "screening threshold and the penalty rule.", EmptySignatureWarning, stacklevel=2)
    arm = FittedArm(transformer, signature, medians, protect, None, None, n_sel)  # type: ignore[arg-type]
    Xd = arm.design(train)
    if n_sel and spec.models.combined.coefficient == "prevalidated":
        # coefficients from out-of-fold scores; the arm keeps the signature fitted on all rows
        oof = _cross_fitted_score(train, spec, y, X, protect, random_state)
        if np.ptp(oof) == 0.0:
            # no fold's signature kept a feature: the signature gets no estimable weight and the arm is
            # the clinical arm (as CombinedCox does), rather than a fit that fails on a constant column
            warnings.warn(f"the signature kept {n_sel} feature(s) on all patients but none in any pre-validation "
                          "fold; its pre-validated coefficient cannot be estimated, so the arm is the clinical "
                          "arm.", EmptySignatureWarning, stacklevel=2)
            arm.n_selected = n_sel = 0
            Xd = X
        else:
            Xd = np.column_stack([Xd[:, :-1], oof])
    arm.cause_specific = fit_cause_specific(Xd, y, min_events_per_parameter=0)
    if fine_gray and np.any(y["cause"] > 1):
        arm.fine_gray = fit_fine_gray(Xd, y, cause=1, min_events_per_parameter=0)
    return arm
