"""Fit the competing-risks models of a study on training rows and predict incidences.

One *arm* is a clinical design (learned on the training rows) with, for the
clinical + imaging model, the study's imaging signature fitted on the same rows
with the outcome of the target cause (the other causes censored). On that design
the arm fits the cause-specific Cox models of every cause and the Fine-Gray model
of the cause of interest. Everything learned (clinical terms, feature medians,
harmonisation, signature, coefficients) lives in the fitted arm and is reapplied
unchanged to evaluation rows: inside a bootstrap replicate the signature never sees
the rows it is judged on.
"""

from __future__ import annotations

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
from workbench.errors import SpecError
from workbench.models.cox import fill_missing
from workbench.models.registry import build_signature
from workbench.preprocess.clinical import ClinicalTransformer
from workbench.study import StudySpec

__all__ = ["TARGETS", "FittedArm", "fit_arm", "target_outcome"]

TARGETS = ("cause", "all_cause")
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
        medians = train.features.median().to_dict()
        signature = clone(build_signature(spec, int(random_state))).fit(
            fill_missing(train.features, medians), make_outcome(y["time"], y["cause"] == 1), groups=train.ids,
            batch=train.batch, covariates=X[:, list(protect)] if protect else None)
        n_sel = len(signature.selected_features_)
    arm = FittedArm(transformer, signature, medians, protect, None, None, n_sel)  # type: ignore[arg-type]
    Xd = arm.design(train)
    arm.cause_specific = fit_cause_specific(Xd, y, min_events_per_parameter=0)
    if fine_gray and np.any(y["cause"] > 1):
        arm.fine_gray = fit_fine_gray(Xd, y, cause=1, min_events_per_parameter=0)
    return arm
