"""Unpenalised Cox models on clinical terms, optionally plus an imaging signature.

:class:`ClinicalCox` is the clinical-only baseline: clinical predictors turned
into terms by :class:`~workbench.preprocess.clinical.ClinicalTransformer`
(learned on the training rows) and an Efron-ties Cox fit.

:class:`CombinedCox` adds one term, the imaging signature score, produced by an
:class:`~workbench.models.signature.ImagingSignature` fitted on the same
training rows. The signature's whole pipeline (harmonisation, filters,
screening, penalty choice) is refitted every time the model is fitted, so
resampling never validates a signature that has seen the evaluation rows.
"""

from __future__ import annotations

from dataclasses import asdict

import numpy as np
import pandas as pd
from sklearn.base import clone

from workbench.cohort.core import Cohort
from workbench.errors import ModelError
from workbench.models.base import ModelDescription, TermRow, as_times, check_fitted
from workbench.predictions import RiskScores, SurvivalCurves
from workbench.preprocess.clinical import ClinicalTransformer, PredictorSpec, hazard_ratio_rows
from workbench.stats.coxph import (
    CoxPHFit,
    fit_coxph,
    linear_predictor,
    predict_survival,
    predict_survival_with_ci,
)
from workbench.stats.schoenfeld import proportional_hazards_test

SIGNATURE_TERM = "imaging_signature"


def fill_missing(features: pd.DataFrame, medians: dict) -> pd.DataFrame:
    """Missing imaging values replaced by training medians (a copy only when something is missing)."""
    features = features.reset_index(drop=True)
    values = features.to_numpy(dtype=float)
    holes = np.isnan(values)
    if not holes.any():
        return features
    fill = np.array([medians[c] for c in features.columns], dtype=float)
    values = np.where(holes, fill[None, :], values)
    return pd.DataFrame(values, columns=features.columns)


def _complete_rows(design, cohort: Cohort, model: str) -> None:
    if design.n_dropped:
        bad = cohort.ids[~design.rows_used]
        raise ModelError(
            f"model {model!r}: {design.n_dropped} patient(s) have a missing value in a clinical predictor "
            f"that is handled by complete-case analysis (first: {', '.join(bad[:5])}); predictions need every "
            "predictor. Remove these patients first, or choose missing = 'impute' for that predictor."
        )


class _CoxBase:
    """Shared fitting, prediction and description of our Cox models."""

    name = "cox"

    def _design(self, cohort: Cohort) -> np.ndarray:  # pragma: no cover - abstract
        raise NotImplementedError

    def _fit_cox(self, X: np.ndarray, cohort: Cohort, names) -> None:
        self.fit_: CoxPHFit = fit_coxph(X, cohort.time, cohort.event, ties=self.ties, names=names)
        self.loglik_ = float(self.fit_.loglik)
        self.n_params_ = int(self.fit_.n_params)
        self.n_train_ = int(cohort.n)
        self.n_events_ = int(cohort.n_events)

    def linear_predictor(self, cohort: Cohort) -> np.ndarray:
        """Linear predictor, centred on the training means of the design columns."""
        check_fitted(self, "fit_")
        return linear_predictor(self.fit_, self._design(cohort))

    def predict_risk(self, cohort: Cohort) -> RiskScores:
        return RiskScores(self.linear_predictor(cohort), self.name)

    def predict_survival(self, cohort: Cohort, times) -> SurvivalCurves:
        check_fitted(self, "fit_")
        t = as_times(times)
        return SurvivalCurves(t, predict_survival(self.fit_, self._design(cohort), t), self.name)

    def predict_survival_with_ci(self, cohort: Cohort, times, conf_level: float = 0.95):
        """Survival with delta-method pointwise CIs (see :func:`workbench.stats.coxph.predict_survival_with_ci`)."""
        check_fitted(self, "fit_")
        return predict_survival_with_ci(self.fit_, self._design(cohort), as_times(times), conf_level)

    def ph_test(self, cohort: Cohort, time_transform: str = "km"):
        """Scaled Schoenfeld residual test of proportional hazards on the training cohort."""
        check_fitted(self, "fit_")
        return proportional_hazards_test(
            self.fit_, self._design(cohort), cohort.time, cohort.event, time_transform=time_transform
        )

    def coefficient_rows(self) -> tuple[TermRow, ...]:
        f = self.fit_
        return tuple(
            TermRow(
                term=self._term_of(name),
                column=name,
                coef=float(f.coef[j]),
                se=float(f.se[j]),
                hazard_ratio=float(f.hazard_ratio[j]),
                ci_lower=float(np.exp(f.ci_lower[j])),
                ci_upper=float(np.exp(f.ci_upper[j])),
                p_value=float(f.p_value[j]),
            )
            for j, name in enumerate(f.names)
        )

    def hazard_ratio_table(self) -> pd.DataFrame:
        """Hazard ratios per clinically meaningful contrast (per doubling for log2 terms)."""
        check_fitted(self, "fit_")
        rows = []
        for term in self.transformer_.terms_:
            for r in hazard_ratio_rows(term, self.fit_.coef, self.fit_.cov):
                rows.append(asdict(r))
        return pd.DataFrame(rows)

    def _term_of(self, column: str) -> str:
        for t in self.transformer_.terms_:
            if column in t.columns:
                return t.column
        return column

    def describe(self) -> ModelDescription:
        check_fitted(self, "fit_")
        f = self.fit_
        return ModelDescription(
            name=self.name,
            kind="cox",
            n_train=self.n_train_,
            n_events=self.n_events_,
            terms=self.coefficient_rows(),
            details={
                "ties": f.ties,
                "loglik": float(f.loglik),
                "loglik_null": float(f.loglik_null),
                "lr_statistic": float(f.lr_statistic),
                "lr_df": int(f.lr_df),
                "lr_p_value": float(f.lr_p_value),
                "converged": bool(f.converged),
            },
        )


class ClinicalCox(_CoxBase):
    """Clinical-only Cox model (unpenalised, Efron ties).

    Parameters
    ----------
    predictors : tuple of PredictorSpec
        How each clinical column enters the model.
    ties : {"efron", "breslow"}
    name : str
        Name used in tables and figures.

    Attributes
    ----------
    transformer_ : ClinicalTransformer
        Clinical terms learned on the training rows.
    fit_ : CoxPHFit
        Coefficients, standard errors, baseline hazard.
    loglik_, n_params_ : float, int
        For likelihood-ratio tests between nested models.
    """

    def __init__(self, predictors: tuple[PredictorSpec, ...] = (), ties: str = "efron", name: str = "clinical"):
        self.predictors = predictors
        self.ties = ties
        self.name = name

    def _design(self, cohort: Cohort) -> np.ndarray:
        design = self.transformer_.transform(cohort)
        _complete_rows(design, cohort, self.name)
        return design.X

    def fit(self, cohort: Cohort) -> ClinicalCox:
        self.transformer_ = ClinicalTransformer(tuple(self.predictors)).fit(cohort)
        X = self._design(cohort)
        self._fit_cox(X, cohort, self.transformer_.columns_)
        return self


class CombinedCox(_CoxBase):
    """Cox model of the clinical terms plus the imaging signature score as one term.

    Parameters
    ----------
    predictors : tuple of PredictorSpec
    signature : ImagingSignature
        Unfitted signature pipeline; a fresh clone is fitted in every ``fit``.
    protect : tuple of str
        Clinical predictors whose effects the harmonisation must preserve.
    ties : {"efron", "breslow"}
    name : str

    Attributes
    ----------
    transformer_, fit_, loglik_, n_params_
        As in :class:`ClinicalCox`.
    signature_ : ImagingSignature
        The fitted signature (its ``steps_`` say what was kept at each step).
    selected_features_ : tuple of str
        Imaging features with a non-zero coefficient in the signature.
    """

    def __init__(
        self,
        predictors: tuple[PredictorSpec, ...] = (),
        signature=None,
        protect: tuple[str, ...] = (),
        ties: str = "efron",
        name: str = "combined",
    ):
        self.predictors = predictors
        self.signature = signature
        self.protect = protect
        self.ties = ties
        self.name = name

    def _protected(self, cohort: Cohort) -> np.ndarray | None:
        if not self.protect:
            return None
        design = self.transformer_.transform(cohort)
        cols = [j for t in self.transformer_.terms_ if t.column in self.protect for j in range(t.start, t.stop)]
        return design.X[:, cols]

    def _features(self, cohort: Cohort) -> pd.DataFrame:
        # Missing imaging values get the training medians learned in fit, never evaluation-row values.
        return fill_missing(cohort.features, self.feature_medians_)

    def signature_score(self, cohort: Cohort) -> np.ndarray:
        check_fitted(self, "signature_")
        return self.signature_.score(self._features(cohort), batch=cohort.batch, covariates=self._protected(cohort))

    def _design(self, cohort: Cohort) -> np.ndarray:
        design = self.transformer_.transform(cohort)
        _complete_rows(design, cohort, self.name)
        if not self.selected_features_:
            # The signature kept no feature: its score is 0 for everyone and carries no
            # information, so the model is the clinical model (the honest answer on noise).
            return design.X
        return np.column_stack([design.X, self.signature_score(cohort)])

    def fit(self, cohort: Cohort) -> CombinedCox:
        if self.signature is None:
            raise ModelError("CombinedCox needs an ImagingSignature (signature=...).")
        self.transformer_ = ClinicalTransformer(tuple(self.predictors)).fit(cohort)
        self.feature_medians_ = cohort.features.median().to_dict()
        self.signature_ = clone(self.signature).fit(
            self._features(cohort),
            cohort.y,
            groups=cohort.ids,
            batch=cohort.batch,
            covariates=self._protected(cohort),
        )
        self.selected_features_ = tuple(self.signature_.selected_features_)
        X = self._design(cohort)
        names = (*self.transformer_.columns_, SIGNATURE_TERM) if self.selected_features_ else self.transformer_.columns_
        self._fit_cox(X, cohort, names)
        return self

    def _term_of(self, column: str) -> str:
        return SIGNATURE_TERM if column == SIGNATURE_TERM else super()._term_of(column)
