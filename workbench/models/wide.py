"""Models that use every imaging feature directly, behind the model protocol.

:class:`PenalisedAllCox`: penalised Cox on the clinical terms (unpenalised,
penalty factor 0) plus every imaging feature of the pool, penalty chosen by
patient-grouped cross-validation. :class:`ForestModel`: random survival forest
on the clinical terms plus the imaging features.

Both harmonise the imaging features by batch with ComBat learned on the
training rows (when a batch column exists and harmonisation is asked for), so
that they compete with the signature model on equal terms.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from workbench.cohort.core import Cohort
from workbench.models.base import ModelDescription, TermRow, as_times, check_fitted
from workbench.models.cox import _complete_rows, fill_missing
from workbench.models.forest import SurvivalForest
from workbench.models.signature import ClinicalPlusImagingCox
from workbench.predictions import RiskScores, SurvivalCurves
from workbench.preprocess.clinical import ClinicalTransformer, PredictorSpec
from workbench.preprocess.harmonize import ComBat
from workbench.stats.coxph import fit_coxph, predict_survival


class _WideInputs:
    """Clinical design plus (optionally harmonised) imaging features, learned on training rows."""

    def _learn_inputs(self, cohort: Cohort) -> None:
        self.transformer_ = ClinicalTransformer(tuple(self.predictors)).fit(cohort)
        self.feature_names_in_ = tuple(cohort.features.columns)
        self.feature_medians_ = cohort.features.median().to_dict()
        self.combat_ = None
        if self.harmonise and cohort.batch is not None:
            self.combat_ = ComBat(prior=self.combat_prior, unseen_batch=self.unseen_batch,
                                 min_new_batch=self.min_new_batch, reference_batch=self.reference_batch).fit(
                self._filled(cohort), cohort.batch, self._protected(cohort)
            )

    def _filled(self, cohort: Cohort) -> pd.DataFrame:
        # Missing imaging values get training medians (learned in fit), never evaluation-row values.
        return fill_missing(cohort.features[list(self.feature_names_in_)], self.feature_medians_)

    def _protected(self, cohort: Cohort):
        if not self.protect:
            return None
        design = self.transformer_.transform(cohort)
        cols = [j for t in self.transformer_.terms_ if t.column in self.protect for j in range(t.start, t.stop)]
        return design.X[:, cols]

    def harmonisation_inputs(self, cohort: Cohort):
        """(features as ComBat receives them, protected covariate design, the fitted ComBat or None)."""
        return self._filled(cohort), self._protected(cohort), getattr(self, "combat_", None)

    def _inputs(self, cohort: Cohort) -> pd.DataFrame:
        design = self.transformer_.transform(cohort)
        _complete_rows(design, cohort, self.name)
        feats = self._filled(cohort)
        if self.combat_ is not None:
            feats = self.combat_.transform(feats, cohort.batch, self._protected(cohort))
        feats = pd.DataFrame(np.asarray(feats, dtype=float), columns=list(self.feature_names_in_))
        clin = pd.DataFrame(design.X, columns=list(self.transformer_.columns_))
        return pd.concat([clin, feats], axis=1)


class PenalisedAllCox(_WideInputs):
    """Penalised Cox on clinical terms (unpenalised) plus all imaging features.

    Parameters
    ----------
    predictors : tuple of PredictorSpec
    harmonise : bool
        ComBat by batch when the cohort has a batch column.
    protect : tuple of str
        Clinical predictors preserved by the harmonisation.
    combat_prior, unseen_batch, min_new_batch, reference_batch : str, str, int, str or None
        See :class:`~workbench.preprocess.harmonize.ComBat`.
    l1_ratio, n_alphas, path_stop_ratio, n_folds, rule : penalty settings
        (the path first stops at ``path_stop_ratio`` x alpha_max and is extended
        when the cross-validated optimum lands on its end)
    random_state : int
    name : str

    Notes
    -----
    A forest nearly interpolates its training rows (its apparent C is close to
    1), so Harrell's optimism bootstrap does not apply to it;
    ``apparent_fit_interpolates`` tells the validation engine to use an
    out-of-bootstrap estimator instead (see :mod:`workbench.validation.estimators_bootstrap`).
    """

    apparent_fit_interpolates = True

    def __init__(
        self,
        predictors: tuple[PredictorSpec, ...] = (),
        harmonise: bool = True,
        protect: tuple[str, ...] = (),
        combat_prior: str = "parametric",
        unseen_batch: str = "error",
        min_new_batch: int = 20,
        reference_batch: str | None = None,
        l1_ratio: float = 1.0,
        n_alphas: int = 50,
        path_stop_ratio: float = 0.05,
        n_folds: int = 5,
        rule: str = "1se",
        random_state: int | None = None,
        name: str = "penalised_all",
    ):
        self.predictors = predictors
        self.harmonise = harmonise
        self.protect = protect
        self.combat_prior = combat_prior
        self.unseen_batch = unseen_batch
        self.min_new_batch = min_new_batch
        self.reference_batch = reference_batch
        self.l1_ratio = l1_ratio
        self.n_alphas = n_alphas
        self.path_stop_ratio = path_stop_ratio
        self.n_folds = n_folds
        self.rule = rule
        self.random_state = random_state
        self.name = name

    def fit(self, cohort: Cohort) -> PenalisedAllCox:
        self._learn_inputs(cohort)
        X = self._inputs(cohort)
        self.model_ = ClinicalPlusImagingCox(
            list(self.transformer_.columns_),
            l1_ratio=self.l1_ratio,
            n_alphas=self.n_alphas,
            path_stop_ratio=self.path_stop_ratio,
            n_folds=self.n_folds,
            rule=self.rule,
            random_state=self.random_state,
        ).fit(X, cohort.y, groups=cohort.ids)
        self.selected_features_ = tuple(self.model_.selected_features_)
        # Breslow baseline hazard with the penalised linear predictor as a fixed offset.
        lp = self.model_.score(X)
        self.lp_mean_ = float(np.mean(lp))
        self.baseline_ = fit_coxph(np.empty((cohort.n, 0)), cohort.time, cohort.event, offset=lp - self.lp_mean_)
        self.n_train_, self.n_events_ = cohort.n, cohort.n_events
        return self

    def linear_predictor(self, cohort: Cohort) -> np.ndarray:
        check_fitted(self, "model_")
        return self.model_.score(self._inputs(cohort)) - self.lp_mean_

    def predict_risk(self, cohort: Cohort) -> RiskScores:
        return RiskScores(self.linear_predictor(cohort), self.name)

    def predict_survival(self, cohort: Cohort, times) -> SurvivalCurves:
        t = as_times(times)
        lp = self.linear_predictor(cohort)
        probs = predict_survival(self.baseline_, np.empty((lp.size, 0)), t, offset=lp)
        return SurvivalCurves(t, probs, self.name)

    def describe(self) -> ModelDescription:
        check_fitted(self, "model_")
        coef = self.model_.coef_
        rows = tuple(TermRow(term=str(k), column=str(k), coef=float(v), note="per training SD") for k, v in coef.items() if v != 0)
        path = self.model_.path_
        return ModelDescription(
            name=self.name,
            kind="penalised cox",
            n_train=self.n_train_,
            n_events=self.n_events_,
            terms=rows,
            details={"alpha": float(path.alpha), "rule": self.rule, "n_imaging_selected": len(self.selected_features_)},
        )


class ForestModel(_WideInputs):
    """Random survival forest on clinical terms plus imaging features.

    Parameters
    ----------
    predictors : tuple of PredictorSpec
    harmonise, protect, combat_prior, unseen_batch, min_new_batch, reference_batch : as in :class:`PenalisedAllCox`
    n_estimators, min_samples_leaf, max_features, time_grid : forest settings
    extra_times : tuple of float
        Times added to the forest's time grid (the study horizons).
    random_state : int
    name : str
    """

    def __init__(
        self,
        predictors: tuple[PredictorSpec, ...] = (),
        harmonise: bool = True,
        protect: tuple[str, ...] = (),
        combat_prior: str = "parametric",
        unseen_batch: str = "error",
        min_new_batch: int = 20,
        reference_batch: str | None = None,
        n_estimators: int = 200,
        min_samples_leaf: int = 15,
        max_features="sqrt",
        time_grid: int = 100,
        extra_times: tuple[float, ...] = (),
        random_state: int | None = None,
        name: str = "forest",
    ):
        self.predictors = predictors
        self.harmonise = harmonise
        self.protect = protect
        self.combat_prior = combat_prior
        self.unseen_batch = unseen_batch
        self.min_new_batch = min_new_batch
        self.reference_batch = reference_batch
        self.n_estimators = n_estimators
        self.min_samples_leaf = min_samples_leaf
        self.max_features = max_features
        self.time_grid = time_grid
        self.extra_times = extra_times
        self.random_state = random_state
        self.name = name

    def _grid(self, cohort: Cohort) -> np.ndarray:
        # Leaf curves are stored at event-time quantiles plus the study horizons, so that
        # survival at each horizon is read exactly rather than from the nearest earlier
        # grid time (which can be far off in the sparse tail of follow-up).
        ev = np.sort(cohort.time[cohort.event])
        q = np.quantile(ev, np.linspace(0.0, 1.0, int(self.time_grid)), method="inverted_cdf")
        extra = np.asarray(self.extra_times, dtype=float)
        extra = extra[(extra >= ev[0]) & (extra <= ev[-1])]
        return np.unique(np.concatenate([q, extra]))

    def fit(self, cohort: Cohort) -> ForestModel:
        self._learn_inputs(cohort)
        X = self._inputs(cohort)
        self.columns_ = tuple(X.columns)
        self.forest_ = SurvivalForest(
            self.n_estimators,
            min_samples_leaf=self.min_samples_leaf,
            max_features=self.max_features,
            time_grid=self._grid(cohort),
            random_state=self.random_state,
        ).fit(X.to_numpy(), cohort.y)
        self.n_train_, self.n_events_ = cohort.n, cohort.n_events
        return self

    def predict_risk(self, cohort: Cohort) -> RiskScores:
        check_fitted(self, "forest_")
        return RiskScores(self.forest_.predict_risk(self._inputs(cohort).to_numpy()), self.name)

    def predict_survival(self, cohort: Cohort, times) -> SurvivalCurves:
        check_fitted(self, "forest_")
        t = as_times(times)
        return SurvivalCurves(t, self.forest_.predict_survival(self._inputs(cohort).to_numpy(), t), self.name)

    def describe(self) -> ModelDescription:
        check_fitted(self, "forest_")
        return ModelDescription(
            name=self.name,
            kind="random survival forest",
            n_train=self.n_train_,
            n_events=self.n_events_,
            details={
                "trees": self.n_estimators,
                "min_leaf": self.min_samples_leaf,
                "max_features": self.max_features,
                "oob_c": float(getattr(self.forest_, "oob_score_", float("nan"))),
                "n_inputs": len(self.columns_),
            },
        )
