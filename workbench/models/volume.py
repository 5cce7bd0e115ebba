"""The clinical + tumour-volume Cox model: is the imaging signature more than volume?

When a study names its tumour-volume feature (``[imaging] volume_feature``), the
workbench fits, beside the study's own models, a Cox model of the clinical terms
plus that one feature. It goes through the same resamples and estimator as every
other model, so "combined model against clinical + volume" is answered with
validated numbers rather than with the signature's correlation with volume alone.

Volume enters as one linear term on the log2 scale (hazard ratio per doubling),
because volumes are right-skewed and act multiplicatively; when a training value
is zero or negative (a feature already transformed or centred) it enters
untransformed. Missing volumes get the training median, like the combined
model's missing imaging values. Nothing else is learned beyond the clinical
terms, so the model costs one Cox fit per resample.

This is a comparison model: it is not saved in model bundles and has no
nomogram (see :data:`workbench.models.registry.COMPARISON_MODELS`).
"""

from __future__ import annotations

from dataclasses import replace

import numpy as np

from workbench.cohort.core import Cohort
from workbench.errors import ModelError
from workbench.models.cox import ClinicalCox, _complete_rows
from workbench.models.labels import VOLUME_MODEL
from workbench.preprocess.clinical import ClinicalTransformer, PredictorSpec


def volume_predictor(feature: str, values) -> PredictorSpec:
    """How the volume feature enters: log2 when every (non-missing) training value is positive."""
    v = np.asarray(values, dtype=float)
    v = v[np.isfinite(v)]
    positive = v.size > 0 and bool(np.all(v > 0))
    return PredictorSpec(column=feature, kind="linear", transform="log2" if positive else None,
                         missing="impute", label=f"Tumour volume ({feature})")


class VolumeCox(ClinicalCox):
    """Cox model of the clinical terms plus the tumour-volume feature (unpenalised, Efron ties).

    Parameters
    ----------
    predictors : tuple of PredictorSpec
        The study's clinical predictors.
    volume_feature : str
        Column of the imaging table holding tumour volume.
    ties : {"efron", "breslow"}
    name : str

    Attributes
    ----------
    transformer_, fit_, loglik_, n_params_
        As in :class:`~workbench.models.cox.ClinicalCox`; the volume is the last term.
    volume_transform_ : str or None
        ``"log2"`` or None, as chosen on the training rows.
    """

    def __init__(self, predictors: tuple[PredictorSpec, ...] = (), volume_feature: str = "",
                 ties: str = "efron", name: str = VOLUME_MODEL):
        self.predictors = predictors
        self.volume_feature = volume_feature
        self.ties = ties
        self.name = name

    def _with_volume(self, cohort: Cohort) -> Cohort:
        vf = self.volume_feature
        if vf not in cohort.features.columns:
            raise ModelError(
                f"model {self.name!r}: the volume feature {vf!r} is not among the imaging features of these "
                f"patients ({cohort.features.shape[1]} columns); check [imaging] volume_feature and that the "
                "imaging table has this column.")
        clinical = cohort.clinical.copy()
        clinical[vf] = cohort.features[vf].to_numpy(dtype=float)
        return replace(cohort, clinical=clinical)

    def _design(self, cohort: Cohort) -> np.ndarray:
        design = self.transformer_.transform(self._with_volume(cohort))
        _complete_rows(design, cohort, self.name)
        return design.X

    def fit(self, cohort: Cohort) -> VolumeCox:
        vf = self.volume_feature
        if not vf:
            raise ModelError("VolumeCox needs the name of the volume feature (volume_feature=...).")
        if vf in {p.column for p in self.predictors}:
            raise ModelError(f"model {self.name!r}: {vf!r} is already a clinical predictor; the clinical model "
                             "already contains volume.")
        cohort_v = self._with_volume(cohort)
        spec = volume_predictor(vf, cohort_v.clinical[vf])
        self.volume_transform_ = spec.transform
        self.transformer_ = ClinicalTransformer((*tuple(self.predictors), spec)).fit(cohort_v)
        self._fit_cox(self._design(cohort), cohort, self.transformer_.columns_)
        return self
