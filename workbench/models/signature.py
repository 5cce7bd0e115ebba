"""The imaging signature: harmonise, reduce and fit a penalised Cox model, as one object.

:class:`ImagingSignature` chains, learned on training rows only:

1. optional ComBat by batch, protecting given clinical covariates;
2. standardisation with the training mean and SD;
3. near-zero-variance filter;
4. redundancy filter (|r| above a threshold, keeping the member that represents
   the others best: an unsupervised choice);
5. optional univariate Cox screening at a false discovery rate, each original
   patient counted once;
6. penalised Cox with the penalty chosen by patient-grouped cross-validation.

Its score (the linear predictor) is the signature. :class:`ClinicalPlusImagingCox`
fits one penalised Cox model on clinical terms (unpenalised) plus all imaging
features, with the same cross-validation machinery. :func:`volume_correlation` and
:func:`check_volume_dominance` test whether a signature is mostly tumour volume.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass

import numpy as np
import pandas as pd
from scipy import stats
from sklearn.base import BaseEstimator

from workbench.cohort.outcome import check_outcome
from workbench.errors import (
    CohortError,
    ModelError,
    NotFittedError,
    SpecError,
    VolumeDominanceWarning,
)
from workbench.models.penalized import (
    PenalizedPathResult,
    fit_penalized_path,
    fit_penalized_path_folds,
)
from workbench.predictions import RiskScores
from workbench.preprocess.harmonize import ComBat
from workbench.preprocess.reduce import (
    CoxScreen,
    NearZeroVarianceFilter,
    RedundancyFilter,
    Standardizer,
    StepRecord,
)


def _frame(X, where: str) -> pd.DataFrame:
    if isinstance(X, pd.DataFrame):
        return X
    A = np.asarray(X, dtype=float)
    if A.ndim != 2:
        raise CohortError(f"{where}: expected a table of imaging features, got shape {A.shape}.")
    return pd.DataFrame(A, columns=[f"x{j}" for j in range(A.shape[1])])


@dataclass(frozen=True)
class FoldScores:
    """Scores of an :class:`ImagingSignature`'s inner fold signatures on its training rows.

    Attributes
    ----------
    fold : ndarray of int of shape (n_samples,)
        Inner fold of every training row.
    scores : ndarray of shape (n_samples, n_folds)
        Column ``k``: the signature fitted without fold ``k`` at the chosen penalty (with
        the all-rows harmonisation, scaling and filters, which use no outcome), scoring
        every training row; ``out_of_fold`` picks each row's own fold.
    """

    fold: np.ndarray
    scores: np.ndarray

    @property
    def out_of_fold(self) -> np.ndarray:
        return self.scores[np.arange(self.fold.size), self.fold]


class ImagingSignature(BaseEstimator):
    """Leakage-safe imaging signature fitted as one object.

    Parameters
    ----------
    harmonize : bool, default True
        Apply ComBat when ``batch`` is given to :meth:`fit`.
    combat_prior : {"parametric", "nonparametric", "none"}
    unseen_batch : {"error", "reference", "estimate"}
    min_new_batch : int
    reference_batch : str, optional
        See :class:`~workbench.preprocess.harmonize.ComBat`.
        See :class:`~workbench.preprocess.harmonize.ComBat`.
    nzv_freq_ratio, nzv_unique_percent : float
        See :class:`~workbench.preprocess.reduce.NearZeroVarianceFilter`.
    redundancy_threshold : float or None, default 0.90
        ``None`` skips the redundancy filter.
    screen_fdr : float or None, default None
        Benjamini-Hochberg level of univariate Cox screening; ``None`` skips it.
    l1_ratio, n_alphas, alpha_min_ratio, path_stop_ratio, n_folds, rule, cv_score
        Penalised Cox and its cross-validation, see
        :func:`~workbench.models.penalized.fit_penalized_path` (``cv_score`` is its ``score``).
    random_state : int, Generator or None

    Attributes
    ----------
    steps_ : tuple of StepRecord
        Counts, kept names and dropped names with reasons, step by step.
    path_ : PenalizedPathResult or None
        None when no feature survived the filters.
    coef_ : pandas.Series
        Non-zero coefficients on the standardised scale (per training SD).
    coef_original_ : pandas.Series
        The same on the scale of the (harmonised) input features; with
        ``intercept_original_`` the score is ``X @ coef_original_ + intercept_original_``.
    intercept_original_ : float
    selected_features_ : tuple of str
    feature_names_in_ : ndarray of str

    References
    ----------
    .. [1] Johnson WE, Li C, Rabinovic A. Biostatistics 2007;8(1):118-27.
    .. [2] Simon N, Friedman J, Hastie T, Tibshirani R. J Stat Softw 2011;39(5):1-13.
    .. [3] Verweij PJM, van Houwelingen HC. Stat Med 1993;12(24):2305-14.
    """

    def __init__(self, *, harmonize=True, combat_prior="parametric", unseen_batch="error", min_new_batch=20,
                 reference_batch=None,
                 nzv_freq_ratio=95 / 5, nzv_unique_percent=10.0, redundancy_threshold=0.90,
                 screen_fdr=None, l1_ratio=0.9, n_alphas=100, alpha_min_ratio=0.01,
                 path_stop_ratio=0.05, n_folds=5, rule="min", cv_score="basic", random_state=None,
                 selection="cv", stability_pairs=50, stability_threshold=0.75, stability_max_false=1.0):
        self.harmonize = harmonize
        self.combat_prior = combat_prior
        self.unseen_batch = unseen_batch
        self.min_new_batch = min_new_batch
        self.reference_batch = reference_batch
        self.nzv_freq_ratio = nzv_freq_ratio
        self.nzv_unique_percent = nzv_unique_percent
        self.redundancy_threshold = redundancy_threshold
        self.screen_fdr = screen_fdr
        self.l1_ratio = l1_ratio
        self.n_alphas = n_alphas
        self.alpha_min_ratio = alpha_min_ratio
        self.path_stop_ratio = path_stop_ratio
        self.n_folds = n_folds
        self.rule = rule
        self.cv_score = cv_score
        self.random_state = random_state
        self.selection = selection
        self.stability_pairs = stability_pairs
        self.stability_threshold = stability_threshold
        self.stability_max_false = stability_max_false

    def fit(self, X_features, y, *, groups=None, batch=None, covariates=None) -> ImagingSignature:
        """Fit every step on these (training) rows; returns self.

        See :meth:`fit_fold_scores` for the same fit plus out-of-fold scores.

        Parameters
        ----------
        X_features : DataFrame of shape (n_samples, n_features)
        y : outcome array
        groups : array-like or None
            Original patient ids (required after bootstrap resampling).
        batch : array-like or None
            Scanner / centre label per row; triggers ComBat when ``harmonize``.
        covariates : array-like of shape (n_samples, n_covariates) or None
            Numeric clinical covariates whose effect ComBat must preserve.
        """
        self._fit(X_features, y, groups, batch, covariates, None)
        return self

    def fit_fold_scores(self, X_features, y, *, groups=None, batch=None, covariates=None, folds=None):
        """:meth:`fit`, plus the scores of the inner cross-validation's fold signatures.

        The penalty's inner cross-validation fits a path without each fold; at the chosen
        penalty these are fold signatures that never saw their fold's outcomes except
        through the choice of that one penalty. Scoring the training rows with them costs
        no extra path (used for pre-validated scores, see
        :class:`~workbench.models.cox.CombinedCox` ``cross_fit="inner_folds"``).

        Parameters
        ----------
        X_features, y, groups, batch, covariates
            As for :meth:`fit`.
        folds : array-like of int of shape (n_samples,) or None
            The inner folds (patient-grouped; every row of a patient in one fold);
            ``None``: the signature forms its ``n_folds`` folds itself, as in :meth:`fit`.

        Returns
        -------
        self : ImagingSignature
        fold_scores : FoldScores or None
            ``None`` when no fold fits exist to reuse: stability selection, an outcome
            screen (``screen_fdr``, fitted on all rows, so its folds would have seen every
            outcome), or no feature left after the filters.
        """
        return self, self._fit(X_features, y, groups, batch, covariates, folds)

    def _fit(self, X_features, y, groups, batch, covariates, folds):
        y = check_outcome(y)
        X = _frame(X_features, "ImagingSignature.fit")
        if X.shape[0] != y.shape[0]:
            raise CohortError(f"ImagingSignature.fit: X has {X.shape[0]} rows but y has {y.shape[0]}.")
        self.feature_names_in_ = np.asarray(X.columns.astype(str), dtype=object)
        X = X.set_axis(list(self.feature_names_in_), axis=1)
        records = []
        self.combat_ = None
        if batch is not None and self.harmonize:
            self.combat_ = ComBat(prior=self.combat_prior, unseen_batch=self.unseen_batch,
                                 min_new_batch=self.min_new_batch, reference_batch=self.reference_batch)
            X = self.combat_.fit_transform(X, batch, covariates)
            names = tuple(X.columns)
            records.append(StepRecord("ComBat harmonisation", len(names), len(names), names, ()))
        self.scaler_ = Standardizer().fit(X)
        Z = self.scaler_.transform(X)
        self.filters_ = [NearZeroVarianceFilter(self.nzv_freq_ratio, self.nzv_unique_percent)]
        if self.redundancy_threshold is not None:
            self.filters_.append(RedundancyFilter(self.redundancy_threshold))
        if self.screen_fdr is not None:
            self.filters_.append(CoxScreen(fdr=self.screen_fdr))
        for f in self.filters_:
            # the screen counts each original patient once (bootstrap copies are not new patients)
            Z = (f.fit(Z, y, groups=groups) if isinstance(f, CoxScreen) else f.fit(Z, y)).transform(Z)
            records.append(f.record_)
        self.path_: PenalizedPathResult | None = None
        self.stability_ = None
        fold_scores = None
        beta = np.zeros(Z.shape[1])
        if self.selection not in ("cv", "stability"):
            raise ModelError(f"selection={self.selection!r} is unknown; choose 'cv' or 'stability'.")
        if self.selection == "stability" and Z.shape[1] > 0:
            beta = self._stability_fit(Z, y, groups)
            nz = beta != 0
            kept_names = tuple(Z.columns[nz])
            prob = dict(zip(self.stability_.feature_names, self.stability_.probability, strict=True))
            dropped = tuple((nm, f"picked in {prob[nm]:.0%} of the halves (below {self.stability_threshold:.0%})")
                            for nm in Z.columns[~nz])
            records.append(StepRecord("stability selection", Z.shape[1], len(kept_names), kept_names, dropped))
        elif Z.shape[1] > 0:
            self.path_, fits = fit_penalized_path_folds(
                Z.to_numpy(), y, groups=groups, feature_names=list(Z.columns),
                l1_ratio=self.l1_ratio, n_alphas=self.n_alphas,
                alpha_min_ratio=self.alpha_min_ratio, path_stop_ratio=self.path_stop_ratio,
                n_folds=self.n_folds, rule=self.rule, score=self.cv_score,
                random_state=self.random_state, folds=folds)
            beta = self.path_.coef
            if self.screen_fdr is None:
                # the standardised score of fold k's signature is Z @ coefs[k], on the scale of
                # the all-rows signature (same scaling, filters and harmonisation)
                fold_scores = FoldScores(fits.fold, Z.to_numpy() @ fits.coefs.T)
        if self.stability_ is None:
            nz = beta != 0
            kept_names = tuple(Z.columns[nz])
            dropped = tuple((nm, "zero coefficient at the cross-validated penalty")
                            for nm in Z.columns[~nz])
            records.append(StepRecord("penalised Cox", Z.shape[1], len(kept_names), kept_names, dropped))
        self.steps_ = tuple(records)
        self.selected_features_ = kept_names
        pos = [list(self.feature_names_in_).index(nm) for nm in kept_names]
        sd, mu = self.scaler_.scale_[pos], self.scaler_.mean_[pos]
        self.coef_ = pd.Series(beta[nz], index=list(kept_names), name="coef (per SD)")
        self.coef_original_ = pd.Series(beta[nz] / sd, index=list(kept_names), name="coef")
        self.intercept_original_ = float(-(beta[nz] * mu / sd).sum())
        self.selected_index_ = np.asarray(pos, dtype=int)
        return fold_scores

    def _stability_fit(self, Z: pd.DataFrame, y, groups) -> np.ndarray:
        """Stability selection (models/stability.py), then an unpenalised Cox fit on the stable features."""
        from workbench.models.stability import stability_select
        from workbench.stats.coxph import fit_coxph

        self.stability_ = stability_select(
            Z.to_numpy(), y, feature_names=list(Z.columns), groups=groups, pairs=self.stability_pairs,
            threshold=self.stability_threshold, max_false=self.stability_max_false, l1_ratio=self.l1_ratio,
            random_state=self.random_state)
        beta = np.zeros(Z.shape[1])
        kept = [list(Z.columns).index(nm) for nm in self.stability_.selected]
        if kept:
            fit = fit_coxph(Z.iloc[:, kept], y["time"], y["event"], ties="breslow", min_events_per_parameter=0.0)
            beta[kept] = np.asarray(fit.coef, dtype=float)
        return beta

    def _harmonised(self, X_features, batch, covariates) -> np.ndarray:
        if not hasattr(self, "steps_"):
            raise NotFittedError("ImagingSignature is not fitted yet; call fit on the training rows first.")
        X = _frame(X_features, "ImagingSignature.score")
        if list(X.columns.astype(str)) != list(self.feature_names_in_):
            missing = sorted(set(self.feature_names_in_) - set(X.columns.astype(str)))[:5]
            raise ModelError(
                "ImagingSignature.score: the feature columns differ from those seen in fit "
                f"(missing e.g. {missing}); pass the same columns in the same order.")
        X = X.set_axis(list(self.feature_names_in_), axis=1)
        if self.combat_ is not None:
            if batch is None:
                raise ModelError("ImagingSignature.score: the signature was harmonised by batch; "
                                 "pass batch= (and covariates= if used in fit) for these rows.")
            X = self.combat_.transform(X, batch, covariates)
        return X.to_numpy(dtype=float)

    def score(self, X_features, batch=None, covariates=None) -> np.ndarray:
        """Signature score (linear predictor, higher = worse) for each row."""
        A = self._harmonised(X_features, batch, covariates)
        return A[:, self.selected_index_] @ self.coef_original_.to_numpy() + self.intercept_original_

    transform = score

    def predict_risk(self, X_features, batch=None, covariates=None) -> RiskScores:
        return RiskScores(self.score(X_features, batch, covariates), "imaging signature")


class ClinicalPlusImagingCox(BaseEstimator):
    """Penalised Cox on clinical terms plus all imaging features, clinical terms unpenalised.

    All columns are standardised on the training rows; clinical columns get
    penalty factor 0 so they stay in the model at every penalty, imaging columns
    compete under the elastic net. The penalty is chosen by the same
    patient-grouped cross-validation as :class:`ImagingSignature`.

    Parameters
    ----------
    clinical_columns : sequence of str
        Numeric clinical model terms (already encoded) present in ``X``.
    l1_ratio, n_alphas, alpha_min_ratio, path_stop_ratio, n_folds, rule, cv_score, random_state
        See :func:`~workbench.models.penalized.fit_penalized_path`.

    Attributes
    ----------
    path_ : PenalizedPathResult
    coef_ : pandas.Series
        All coefficients at the chosen penalty, per training SD.
    selected_features_ : tuple of str
        Imaging features with a non-zero coefficient.
    """

    def __init__(self, clinical_columns=(), *, l1_ratio=0.9, n_alphas=100, alpha_min_ratio=0.01,
                 path_stop_ratio=0.05, n_folds=5, rule="min", cv_score="basic", random_state=None):
        self.clinical_columns = clinical_columns
        self.l1_ratio = l1_ratio
        self.n_alphas = n_alphas
        self.alpha_min_ratio = alpha_min_ratio
        self.path_stop_ratio = path_stop_ratio
        self.n_folds = n_folds
        self.rule = rule
        self.cv_score = cv_score
        self.random_state = random_state

    def fit(self, X, y, *, groups=None) -> ClinicalPlusImagingCox:
        X = _frame(X, "ClinicalPlusImagingCox.fit")
        cols = [str(c) for c in X.columns]
        clinical = [str(c) for c in self.clinical_columns]
        missing = [c for c in clinical if c not in cols]
        if missing:
            raise SpecError(f"clinical columns {missing} are not in the table; available are e.g. {cols[:8]}.")
        self.scaler_ = Standardizer().fit(X)
        Z = self.scaler_.transform(X)
        pf = np.array([0.0 if c in clinical else 1.0 for c in cols])
        if pf.sum() == 0:
            raise SpecError("ClinicalPlusImagingCox needs at least one imaging (penalised) column.")
        self.path_ = fit_penalized_path(
            Z.to_numpy(), y, groups=groups, feature_names=cols, l1_ratio=self.l1_ratio,
            penalty_factor=pf, n_alphas=self.n_alphas, alpha_min_ratio=self.alpha_min_ratio,
            path_stop_ratio=self.path_stop_ratio, n_folds=self.n_folds, rule=self.rule,
            score=self.cv_score, random_state=self.random_state)
        self.feature_names_in_ = np.asarray(cols, dtype=object)
        self.coef_ = pd.Series(self.path_.coef, index=cols, name="coef (per SD)")
        self.selected_features_ = tuple(c for c in self.path_.selected if c not in clinical)
        return self

    def score(self, X) -> np.ndarray:
        """Linear predictor (higher = worse)."""
        if not hasattr(self, "path_"):
            raise NotFittedError("ClinicalPlusImagingCox is not fitted yet; call fit first.")
        X = _frame(X, "ClinicalPlusImagingCox.score")
        return self.scaler_.transform(X).to_numpy() @ self.coef_.to_numpy()

    def predict_risk(self, X) -> RiskScores:
        return RiskScores(self.score(X), "clinical + imaging penalised Cox")


# --------------------------------------------------------- volume dominance


@dataclass(frozen=True)
class VolumeCorrelation:
    """Correlation between a signature score and a tumour-volume feature.

    ``dominant`` is True when ``|pearson|`` or ``|spearman|`` exceeds ``threshold``.
    """

    feature: str
    pearson: float
    spearman: float
    n: int
    threshold: float
    dominant: bool


def volume_correlation(score, X_features: pd.DataFrame, feature: str,
                       threshold: float = 0.8) -> VolumeCorrelation:
    """Correlate the signature score with the named volume feature (pure function).

    Spearman's rank correlation is reported beside Pearson's because volume is
    usually right-skewed; either exceeding ``threshold`` (0.8, common practice)
    marks the signature as volume-dominated.
    """
    if feature not in X_features.columns:
        close = [c for c in map(str, X_features.columns) if "vol" in c.lower()][:5]
        raise SpecError(f"volume feature {feature!r} is not among the imaging features; "
                        f"columns that look like volume: {close or 'none'}.")
    s = np.asarray(score, dtype=float).ravel()
    v = X_features[feature].to_numpy(dtype=float)
    if s.size != v.size:
        raise ModelError(f"{s.size} scores but {v.size} rows of {feature!r}; they must match.")
    ok = np.isfinite(s) & np.isfinite(v)
    if ok.sum() < 3 or np.ptp(s[ok]) == 0 or np.ptp(v[ok]) == 0:
        r = rho = 0.0  # a constant score (empty signature) carries no volume information
    else:
        r = float(np.corrcoef(s[ok], v[ok])[0, 1])
        rho = float(stats.spearmanr(s[ok], v[ok]).statistic)
    return VolumeCorrelation(feature, r, rho, int(ok.sum()), threshold,
                             bool(max(abs(r), abs(rho)) > threshold))


def check_volume_dominance(result: VolumeCorrelation, *, stacklevel: int = 2) -> VolumeCorrelation:
    """Warn with :class:`VolumeDominanceWarning` when the signature is mostly volume."""
    if result.dominant:
        warnings.warn(
            f"the imaging signature correlates strongly with {result.feature!r} (Pearson "
            f"{result.pearson:.2f}, Spearman {result.spearman:.2f}); it may be tumour volume in "
            "disguise. Compare it against volume alone before claiming added value.",
            VolumeDominanceWarning, stacklevel=stacklevel + 1)
    return result
