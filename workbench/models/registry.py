"""Build the models a study asks for: an explicit table, nothing registers itself."""

from __future__ import annotations

from workbench.models.cox import ClinicalCox, CombinedCox
from workbench.models.labels import MODEL_LABELS  # noqa: F401  (re-exported)
from workbench.models.signature import ImagingSignature
from workbench.models.volume import VOLUME_MODEL, VolumeCox
from workbench.models.wide import ForestModel, PenalisedAllCox
from workbench.preprocess.clinical import ClinicalTransformer
from workbench.study import StudySpec

COMPARISON_MODELS = (VOLUME_MODEL,)
"""Models the workbench adds on its own to answer a question about the study's models
(clinical + tumour volume when ``[imaging] volume_feature`` is named). They are validated
like every other model but are not offered for use: no bundle, no nomogram."""


def offered_models(models: dict) -> dict:
    """The study's own models, without the comparison models (what bundles and nomograms carry)."""
    return {k: m for k, m in models.items() if k not in COMPARISON_MODELS}


def build_signature(spec: StudySpec, random_state: int) -> ImagingSignature:
    im = spec.imaging
    return ImagingSignature(
        harmonize=im.harmonise.method == "combat",
        combat_prior=im.harmonise.empirical_bayes,
        unseen_batch=im.harmonise.unseen_batch,
        min_new_batch=im.harmonise.min_new_batch,
        reference_batch=im.harmonise.reference_scanner,
        redundancy_threshold=im.reduce.correlation if im.reduce.correlation < 1 else None,
        screen_fdr=im.reduce.screen_fdr if im.reduce.screen else None,
        l1_ratio=im.penalty.l1_ratio,
        n_alphas=im.penalty.n_alphas,
        path_stop_ratio=im.penalty.path_stop_ratio,
        n_folds=im.penalty.folds,
        rule=im.penalty.rule,
        random_state=random_state,
        selection=im.penalty.selection,
        stability_pairs=im.penalty.stability_pairs,
        stability_threshold=im.penalty.stability_threshold,
        stability_max_false=im.penalty.stability_max_false,
    )


def build_models(spec: StudySpec) -> dict:
    """Unfitted models for ``spec.models.fit``, in that order, keyed by name.

    When the study names a volume feature and has an imaging table, the clinical +
    tumour volume Cox model (:class:`~workbench.models.volume.VolumeCox`) follows them.
    """
    preds = tuple(spec.predictors)
    h = spec.imaging.harmonise
    seed = int(spec.seed)
    table = {
        "clinical": lambda: ClinicalCox(preds),
        "combined": lambda: CombinedCox(
            preds, signature=build_signature(spec, seed), protect=tuple(h.protect),
            coefficient=spec.models.combined.coefficient,
            prevalidation_folds=spec.models.combined.prevalidation_folds,
            shrinkage=spec.models.combined.shrinkage,
            cross_fit=spec.models.combined.cross_fit,
        ),
        "penalised_all": lambda: PenalisedAllCox(
            preds,
            harmonise=h.method == "combat",
            protect=tuple(h.protect),
            combat_prior=h.empirical_bayes,
            unseen_batch=h.unseen_batch,
            min_new_batch=h.min_new_batch,
            reference_batch=h.reference_scanner,
            l1_ratio=spec.imaging.penalty.l1_ratio,
            n_alphas=spec.imaging.penalty.n_alphas,
            path_stop_ratio=spec.imaging.penalty.path_stop_ratio,
            n_folds=spec.imaging.penalty.folds,
            rule=spec.imaging.penalty.rule,
            random_state=seed,
        ),
        "forest": lambda: ForestModel(
            preds,
            harmonise=h.method == "combat",
            protect=tuple(h.protect),
            combat_prior=h.empirical_bayes,
            unseen_batch=h.unseen_batch,
            min_new_batch=h.min_new_batch,
            reference_batch=h.reference_scanner,
            n_estimators=spec.models.forest.trees,
            min_samples_leaf=spec.models.forest.min_leaf,
            max_features=spec.models.forest.max_features,
            time_grid=spec.models.forest.time_grid,
            extra_times=tuple(spec.horizons),
            random_state=seed,
        ),
    }
    models = {name: table[name]() for name in spec.models.fit}
    if spec.imaging.volume_feature and spec.data.features is not None:
        models[VOLUME_MODEL] = VolumeCox(preds, volume_feature=spec.imaging.volume_feature)
    return models


def candidate_parameters(spec: StudySpec, cohort) -> dict:
    """Candidate parameters the study considers, for the sample-size criteria.

    ``n_candidate_parameters``: the degrees of freedom of the study's clinical
    predictors (the clinical model's design columns: dummies, spline and
    detection-limit columns each count), not every clinical column of the table.
    ``n_imaging_candidates``: the imaging features the imaging models select from
    (0 when the study fits no imaging model).
    """
    df = len(ClinicalTransformer(tuple(spec.predictors)).fit(cohort).columns_)
    imaging = any(m != "clinical" for m in spec.models.fit)
    return {"n_candidate_parameters": max(df, 1),
            "n_imaging_candidates": len(cohort.feature_names) if imaging else 0}
