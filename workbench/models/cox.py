"""Unpenalised Cox models on clinical terms, optionally plus an imaging signature.

:class:`ClinicalCox` is the clinical-only baseline: clinical predictors turned
into terms by :class:`~workbench.preprocess.clinical.ClinicalTransformer`
(learned on the training rows) and an Efron-ties Cox fit.

:class:`CombinedCox` adds one term, the imaging signature score, produced by an
:class:`~workbench.models.signature.ImagingSignature` fitted on the same
training rows. The signature's whole pipeline (harmonisation, filters,
screening, penalty choice) is refitted every time the model is fitted, so
resampling never validates a signature that has seen the evaluation rows.

The coefficient of the signature term is by default estimated on cross-fitted
(out-of-fold, "pre-validated") signature scores: the signature is refitted on
the patients outside each fold and scores the patients in it, so the hazard
ratio per unit of signature is not inflated by scoring the signature on the
patients it was selected on (Tibshirani & Efron 2002). By default the whole
signature, with its own penalty choice, is refitted without each fold
(``cross_fit="refit"``); ``"inner_folds"`` reuses the fold fits the signature's own
penalty choice already made, at the penalty it chose (cheaper, slightly
optimistic). Optionally the whole
linear predictor is shrunk by the cross-validated calibration slope
(van Houwelingen & le Cessie 1990).

References
----------
.. [1] Tibshirani RJ, Efron B. Pre-validation and inference in microarrays. Stat Appl
       Genet Mol Biol 2002;1:Article 1.
.. [2] van Houwelingen JC, le Cessie S. Predictive value of statistical models. Stat Med
       1990;9:1303-25.
"""

from __future__ import annotations

import warnings
from dataclasses import asdict, replace

import numpy as np
import pandas as pd
from sklearn.base import clone

from workbench.cohort.core import Cohort
from workbench.errors import ConvergenceWarning, EmptySignatureWarning, ModelError, WorkbenchError
from workbench.models.base import ModelDescription, TermRow, as_times, check_fitted
from workbench.models.penalized import patient_folds
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


def shrink_fit(fit: CoxPHFit, X: np.ndarray, time, event, factor: float) -> CoxPHFit:
    """The Cox fit with every coefficient multiplied by ``factor`` and the baseline hazard re-estimated.

    The baseline hazard is refitted with the shrunk linear predictor as an offset,
    so predicted survival stays calibrated in the large on the training rows
    (van Houwelingen & le Cessie 1990). Standard errors and limits are scaled by
    the same factor; ``baseline_xbar`` (used only for the delta-method survival
    intervals) is kept from the unshrunk fit, an approximation.
    """
    lp = linear_predictor(fit, X) * factor
    null = fit_coxph(np.empty((len(lp), 0)), time, event, ties=fit.ties, offset=lp, min_events_per_parameter=0)
    c = fit.coef * factor
    return replace(
        fit, coef=c, se=fit.se * abs(factor), cov=fit.cov * factor**2, ci_lower=np.minimum(fit.ci_lower * factor,
        fit.ci_upper * factor), ci_upper=np.maximum(fit.ci_lower * factor, fit.ci_upper * factor),
        hazard_ratio=np.exp(c), loglik=float(null.loglik), baseline_cumhaz=null.baseline_cumhaz,
        baseline_var=null.baseline_var)


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
    coefficient : {"prevalidated", "in_sample"}, default "prevalidated"
        ``"prevalidated"``: the Cox model is fitted on cross-fitted signature scores
        (each patient scored by a signature refitted without the patient's fold),
        so the signature's hazard ratio is not the optimistic in-sample one.
        ``"in_sample"``: on the scores of the signature fitted on all rows (the
        older behaviour; optimistic).
    prevalidation_folds : int, default 5
        Patient-grouped folds of the cross-fitting (also used for shrinkage).
    shrinkage : {"none", "cross_validated_slope"}, default "none"
        ``"cross_validated_slope"`` multiplies every coefficient of the final
        model by the calibration slope of the cross-fitted linear predictor
        (the whole model refitted without each fold) and re-estimates the
        baseline hazard (van Houwelingen & le Cessie 1990).
    cross_fit : {"refit", "inner_folds"}, default "refit"
        How the cross-fitted signatures are made. ``"refit"``: the whole signature,
        with its own inner cross-validation, refitted without each fold.
        ``"inner_folds"``: they are the fold fits of the signature's own penalty
        choice at the penalty it chose (a shared penalty; the harmonisation, scaling
        and unsupervised filters learned once on all rows), so pre-validation costs no
        extra path (about a third of a bootstrap replicate's CPU at 500 x 1,000). A
        fold's scores see that fold's outcomes through the one shared penalty, and on
        simulated cohorts that raised the pre-validated coefficient by about a tenth
        of its true value against ``"refit"`` (bench/bench_prevalidation.py), so it is
        not the default. Falls back to ``"refit"`` when the signature's ``n_folds``
        differs from ``prevalidation_folds`` (the signature fitted on all rows never
        depends on the route), and for signatures with an outcome screen or
        stability selection.
    Attributes
    ----------
    transformer_, fit_, loglik_, n_params_
        As in :class:`ClinicalCox`.
    signature_ : ImagingSignature
        The fitted signature (its ``steps_`` say what was kept at each step).
    selected_features_ : tuple of str
        Imaging features with a non-zero coefficient in the signature.
    coefficient_source_ : str
        How the signature coefficient was estimated (``"prevalidated"``,
        ``"in_sample"``, or ``"in_sample (...)"`` with the reason pre-validation
        could not be done).
    signature_coef_in_sample_ : float
        The signature coefficient of the in-sample fit, for comparison (NaN when
        the signature is empty).
    shrinkage_factor_ : float
        1.0 unless shrinkage was applied.
    """

    def __init__(
        self,
        predictors: tuple[PredictorSpec, ...] = (),
        signature=None,
        protect: tuple[str, ...] = (),
        ties: str = "efron",
        name: str = "combined",
        coefficient: str = "prevalidated",
        prevalidation_folds: int = 5,
        shrinkage: str = "none",
        cross_fit: str = "refit",
    ):
        self.predictors = predictors
        self.signature = signature
        self.protect = protect
        self.ties = ties
        self.name = name
        self.coefficient = coefficient
        self.prevalidation_folds = prevalidation_folds
        self.shrinkage = shrinkage
        self.cross_fit = cross_fit

    def _protected(self, cohort: Cohort) -> np.ndarray | None:
        if not self.protect:
            return None
        design = self.transformer_.transform(cohort)
        cols = [j for t in self.transformer_.terms_ if t.column in self.protect for j in range(t.start, t.stop)]
        return design.X[:, cols]

    def _features(self, cohort: Cohort) -> pd.DataFrame:
        # Missing imaging values get the training medians learned in fit, never evaluation-row values.
        return fill_missing(cohort.features, self.feature_medians_)

    def harmonisation_inputs(self, cohort: Cohort):
        """(features as the signature's ComBat receives them, protected covariate design, that ComBat or None)."""
        check_fitted(self, "signature_")
        X = self._features(cohort)[list(self.signature_.feature_names_in_)]
        return X, self._protected(cohort), getattr(self.signature_, "combat_", None)

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

    def _prevalidation_fold(self, cohort: Cohort) -> np.ndarray:
        seed = getattr(self.signature, "random_state", None)
        return patient_folds(cohort.ids, cohort.event, int(self.prevalidation_folds), random_state=seed)

    def _inner_fold_fit(self, X_clin: np.ndarray, cohort: Cohort, names, fold_scores):
        """Out-of-fold scores and linear predictors from the signature's own fold fits."""
        fold, S = fold_scores.fold, fold_scores.scores
        oof_score = fold_scores.out_of_fold
        oof_lp = np.zeros(cohort.n)
        if self.shrinkage == "cross_validated_slope":
            for k in np.unique(fold):
                tr, te = fold != k, fold == k
                oof_lp[te] = self._fold_lp(X_clin, S[tr, k], oof_score[te], tr, te, cohort, names)
        return oof_score, oof_lp

    def _fold_lp(self, X_clin, s_tr, s_te, tr, te, cohort: Cohort, names) -> np.ndarray:
        """The held-out rows' linear predictor from a Cox fit of clinical terms + fold score on the fold's rows.

        A fold whose signature kept no feature scores everyone alike: its score gets weight 0 and
        the fold's model is the clinical model (as for an empty signature on all rows), rather
        than a fit that fails on a constant column and takes the shrinkage away.
        """
        if np.ptp(s_tr) == 0.0:
            f = fit_coxph(X_clin[tr], cohort.time[tr], cohort.event[tr], ties=self.ties, names=names[:-1],
                          min_events_per_parameter=0)
            return linear_predictor(f, X_clin[te])
        f = fit_coxph(np.column_stack([X_clin[tr], s_tr]), cohort.time[tr], cohort.event[tr], ties=self.ties,
                      names=names, min_events_per_parameter=0)
        return linear_predictor(f, np.column_stack([X_clin[te], s_te]))

    def _cross_fit(self, cohort: Cohort, X_clin: np.ndarray, names):
        """Out-of-fold signature scores and (for shrinkage) out-of-fold linear predictors."""
        fold = self._prevalidation_fold(cohort)
        oof_score = np.zeros(cohort.n)
        oof_lp = np.zeros(cohort.n)
        want_lp = self.shrinkage == "cross_validated_slope"
        for k in np.unique(fold):
            tr, te = np.flatnonzero(fold != k), np.flatnonzero(fold == k)
            sub, held = cohort.take(tr), cohort.take(te)
            med = sub.features.median().to_dict()
            prot_tr = None if self._protected(sub) is None else self._protected(sub)
            sig = clone(self.signature).fit(fill_missing(sub.features, med), sub.y, groups=sub.ids,
                                            batch=sub.batch, covariates=prot_tr)
            oof_score[te] = sig.score(fill_missing(held.features, med), batch=held.batch,
                                      covariates=self._protected(held))
            if want_lp:
                s_tr = sig.score(fill_missing(sub.features, med), batch=sub.batch, covariates=prot_tr)
                oof_lp[te] = self._fold_lp(X_clin, s_tr, oof_score[te], tr, te, cohort, names)
        return oof_score, oof_lp

    def fit(self, cohort: Cohort) -> CombinedCox:
        if self.signature is None:
            raise ModelError("CombinedCox needs an ImagingSignature (signature=...).")
        if self.coefficient not in ("prevalidated", "in_sample"):
            raise ModelError(f"CombinedCox coefficient {self.coefficient!r}; choose 'prevalidated' or 'in_sample'.")
        if self.shrinkage not in ("none", "cross_validated_slope"):
            raise ModelError(f"CombinedCox shrinkage {self.shrinkage!r}; choose 'none' or 'cross_validated_slope'.")
        cross_fit = self.cross_fit
        if cross_fit not in ("inner_folds", "refit"):
            raise ModelError(f"CombinedCox cross_fit {cross_fit!r}; choose 'inner_folds' or 'refit'.")
        self.transformer_ = ClinicalTransformer(tuple(self.predictors)).fit(cohort)
        self.feature_medians_ = cohort.features.median().to_dict()
        sig = clone(self.signature)
        fit_kw = dict(groups=cohort.ids, batch=cohort.batch, covariates=self._protected(cohort))
        fold_scores = None
        same_folds = int(getattr(sig, "n_folds", -1)) == int(self.prevalidation_folds)
        if (cross_fit == "inner_folds" and same_folds
                and (self.coefficient == "prevalidated" or self.shrinkage != "none")):
            # the signature's own penalty-choice folds are the pre-validation folds; its fit
            # on all rows is the one every other route makes
            _, fold_scores = sig.fit_fold_scores(self._features(cohort), cohort.y, **fit_kw)
        else:
            sig.fit(self._features(cohort), cohort.y, **fit_kw)
        self.signature_ = sig
        self.selected_features_ = tuple(self.signature_.selected_features_)
        X = self._design(cohort)
        names = (*self.transformer_.columns_, SIGNATURE_TERM) if self.selected_features_ else self.transformer_.columns_
        self._fit_cox(X, cohort, names)
        self.coefficient_source_ = "in_sample"
        self.signature_coef_in_sample_ = float(self.fit_.coef[-1]) if self.selected_features_ else float("nan")
        self.shrinkage_factor_ = 1.0
        cross = self.selected_features_ and (self.coefficient == "prevalidated" or self.shrinkage != "none")
        if not cross:
            return self
        X_clin = X[:, :-1]
        try:
            if fold_scores is not None:
                oof_score, oof_lp = self._inner_fold_fit(X_clin, cohort, names, fold_scores)
            else:
                oof_score, oof_lp = self._cross_fit(cohort, X_clin, names)
        except WorkbenchError as exc:
            # e.g. a scanner batch found only in one fold: say so and keep the in-sample fit
            self.coefficient_source_ = f"in_sample (cross-fitting failed: {exc})"
            warnings.warn(f"model {self.name!r}: the signature coefficient could not be pre-validated ({exc}); "
                          "the in-sample coefficient is used and is optimistic.", ConvergenceWarning, stacklevel=2)
            return self
        if self.coefficient == "prevalidated" and np.ptp(oof_score) == 0.0:
            # No fold's signature kept a feature: the cross-fitted scores are constant and give the
            # signature no estimable weight, so the model is the clinical model (as with an empty
            # signature). Dropping the replicate instead would keep only those where imaging helps.
            kept = ", ".join(self.selected_features_)
            self.selected_features_ = ()
            self._fit_cox(X_clin, cohort, self.transformer_.columns_)
            self.coefficient_source_ = "prevalidated (no cross-fitted signature kept a feature: weight 0)"
            warnings.warn(f"model {self.name!r}: the signature kept {kept} on all patients but no feature in any of "
                          f"the {self.prevalidation_folds} pre-validation folds, so its pre-validated coefficient "
                          "cannot be estimated; the model is the clinical model.", EmptySignatureWarning, stacklevel=2)
            return self
        if self.coefficient == "prevalidated":
            # The signature of the final model is the one fitted on all rows; only the
            # coefficients (and baseline hazard) come from the cross-fitted scores.
            self._fit_cox(np.column_stack([X_clin, oof_score]), cohort, names)
            self.coefficient_source_ = "prevalidated"
        if self.shrinkage == "cross_validated_slope":
            slope = fit_coxph(oof_lp[:, None], cohort.time, cohort.event, ties=self.ties,
                              min_events_per_parameter=0).coef[0]
            self.shrinkage_factor_ = float(np.clip(slope, 0.0, 1.0))
            design = np.column_stack([X_clin, oof_score]) if self.coefficient == "prevalidated" else X
            self.fit_ = shrink_fit(self.fit_, design, cohort.time, cohort.event, self.shrinkage_factor_)
            self.loglik_ = float(self.fit_.loglik)
        return self

    def ph_test(self, cohort: Cohort, time_transform: str = "km"):
        """Scaled Schoenfeld residual test on the training cohort.

        With a pre-validated or shrunk coefficient the final fit does not solve the
        score equations of the full-data design, which the residual test needs; the
        diagnostic then uses the in-sample refit of the same terms (a check of the
        model's form, not of its coefficients).
        """
        check_fitted(self, "fit_")
        if getattr(self, "coefficient_source_", "in_sample") == "in_sample" and getattr(self, "shrinkage_factor_", 1.0) == 1.0:
            return super().ph_test(cohort, time_transform)
        X = self._design(cohort)
        fit = fit_coxph(X, cohort.time, cohort.event, ties=self.ties, names=self.fit_.names)
        return proportional_hazards_test(fit, X, cohort.time, cohort.event, time_transform=time_transform)

    def coefficient_rows(self) -> tuple[TermRow, ...]:
        # A Wald p-value of the signature term would test a score built on these patients
        # (too liberal even when pre-validated, Hoefling & Tibshirani 2008): left out.
        return tuple(replace(r, p_value=float("nan")) if r.column == SIGNATURE_TERM else r
                     for r in super().coefficient_rows())

    def describe(self) -> ModelDescription:
        d = super().describe()
        details = dict(d.details)
        if self.selected_features_:
            # The signature was selected on these patients: a likelihood-ratio p-value against
            # the null model would score it in-sample. Keep the statistic as descriptive only.
            details["lr_p_value"] = None
            details["lr_note"] = ("apparent (descriptive) statistic only: the signature was built on the same "
                                  "patients; see the added-value permutation test")
        # getattr: bundles saved before these attributes existed still describe themselves
        details["signature_coefficient"] = getattr(self, "coefficient_source_", "in_sample")
        details["signature_coef_in_sample"] = getattr(self, "signature_coef_in_sample_", float("nan"))
        details["shrinkage_factor"] = getattr(self, "shrinkage_factor_", 1.0)
        return replace(d, details=details)

    def _term_of(self, column: str) -> str:
        return SIGNATURE_TERM if column == SIGNATURE_TERM else super()._term_of(column)
