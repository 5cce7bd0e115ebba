"""The rules a study's values must keep, checked whenever a :class:`StudySpec` is built.

The allowed values of the choices (models, validation methods, backends, estimators,
intervals) and :func:`check_spec`, which refuses a spec whose values do not fit
together, saying which section and key is wrong and what to write instead;
:func:`check_clinical_only` holds the extra rules of a study without imaging.
The type of each single value is checked when the file is read (``study_types.py``).
"""

from __future__ import annotations

from typing import TYPE_CHECKING

from workbench.cohort.causes import check_competing_codes
from workbench.cohort.core import TIME_UNITS
from workbench.errors import SpecError
from workbench.preprocess.imaging_options import (
    COMBAT_PRIORS,
    DEFAULT_MIN_NEW_BATCH,
    ICC_FORMS,
    UNSEEN_BATCH_POLICIES,
)

if TYPE_CHECKING:
    from workbench.study_spec import StudySpec


MODEL_NAMES = ("clinical", "combined", "penalised_all", "forest")
"""Models a study can fit: clinical-only Cox, clinical + signature Cox, penalised
Cox on clinical plus every imaging feature, random survival forest."""

VALIDATION_METHODS = ("bootstrap", "cv", "by_centre", "none")
BACKENDS = ("processes", "threads", "serial", "dask")
ESTIMATORS = ("auto", "optimism", "632plus", "oob")
INTERVALS = ("two-stage", "shifted-percentile")


def _choice(where: str, value, allowed) -> None:
    if value not in allowed:
        raise SpecError(f"{where} is {value!r}; choose one of {', '.join(repr(a) for a in allowed)}.")


def check_spec(spec: StudySpec) -> None:
    d = spec.data
    if not d.clinical:
        raise SpecError("[data] needs 'clinical', the table with follow-up time and event.")
    if d.features is None:
        check_clinical_only(spec)
    if d.competing_codes is not None:
        check_competing_codes(d.event_codes, d.censor_codes, d.competing_codes, SpecError, "[data] ")
    _choice("[data] time_unit", d.time_unit, tuple(TIME_UNITS))
    _choice("[data] on_unmatched", d.on_unmatched, ("error", "intersect"))
    if not spec.predictors:
        raise SpecError("the study lists no clinical predictors; add at least one [[predictor]] table.")
    cols = [p.column for p in spec.predictors]
    dup = sorted({c for c in cols if cols.count(c) > 1})
    if dup:
        raise SpecError(f"clinical predictors listed twice: {', '.join(dup)}.")
    if not spec.horizons:
        raise SpecError("[study] horizons is empty; give the times of interest, e.g. horizons = [12, 24, 36].")
    if any(h <= 0 for h in spec.horizons) or list(spec.horizons) != sorted(set(spec.horizons)):
        raise SpecError(f"[study] horizons must be positive and increasing; got {list(spec.horizons)}.")
    im = spec.imaging
    _choice("[imaging.harmonise] method", im.harmonise.method, ("combat", "none"))
    _choice("[imaging.harmonise] unseen_batch", im.harmonise.unseen_batch, UNSEEN_BATCH_POLICIES)
    _choice("[imaging.harmonise] empirical_bayes", im.harmonise.empirical_bayes, COMBAT_PRIORS)
    if int(im.harmonise.min_new_batch) < 3:
        raise SpecError(f"[imaging.harmonise] min_new_batch = {im.harmonise.min_new_batch}: a scanner's scale "
                        "needs at least 3 of its patients (the default is "
                        f"{DEFAULT_MIN_NEW_BATCH}).")
    missing = sorted(set(im.harmonise.protect) - set(cols))
    if missing:
        raise SpecError(
            f"[imaging.harmonise] protect names {', '.join(missing)}, which are not clinical predictors of the study."
        )
    if im.harmonise.method == "combat" and not d.batch:
        raise SpecError("[imaging.harmonise] method is 'combat' but [data] names no batch column; set batch = '...' or method = 'none'.")
    if not 0 < im.reduce.correlation <= 1:
        raise SpecError(f"[imaging.reduce] correlation must lie in (0, 1]; got {im.reduce.correlation}.")
    if not 0 < im.reduce.screen_fdr < 1:
        raise SpecError(f"[imaging.reduce] screen_fdr must lie in (0, 1); got {im.reduce.screen_fdr}.")
    _choice("[imaging.reproducibility] form", im.reproducibility.form, ICC_FORMS)
    if not 0 < im.reproducibility.min_icc < 1:
        raise SpecError(f"[imaging.reproducibility] min_icc must lie in (0, 1); got {im.reproducibility.min_icc}.")
    if d.repeats and d.features is None:
        raise SpecError("[data] repeats holds repeat measurements of imaging features, but the study has no "
                        "imaging table ([data] features).")
    pen = im.penalty
    _choice("[imaging.penalty] rule", pen.rule, ("1se", "min"))
    if not 0 < pen.l1_ratio <= 1:
        raise SpecError(f"[imaging.penalty] l1_ratio must lie in (0, 1] (1 = LASSO); got {pen.l1_ratio}.")
    if pen.folds < 3:
        raise SpecError(f"[imaging.penalty] folds must be at least 3; got {pen.folds}.")
    _choice("[imaging.penalty] selection", pen.selection, ("cv", "stability"))
    if not 0.5 < pen.stability_threshold <= 1:
        raise SpecError("[imaging.penalty] stability_threshold must lie in (0.5, 1] (a feature must be picked in "
                        f"more than half of the half-samples); got {pen.stability_threshold}.")
    if pen.stability_max_false <= 0 or pen.stability_pairs < 1:
        raise SpecError("[imaging.penalty] stability_max_false must be positive and stability_pairs at least 1; "
                        f"got {pen.stability_max_false} and {pen.stability_pairs}.")
    for m in spec.models.fit:
        _choice("[models] fit entry", m, MODEL_NAMES)
    if spec.models.baseline not in spec.models.fit:
        raise SpecError(f"[models] baseline {spec.models.baseline!r} is not among the fitted models {list(spec.models.fit)}.")
    if not isinstance(spec.models.risk_groups, int) or spec.models.risk_groups < 2:
        raise SpecError(f"[models] risk_groups must be a whole number of at least 2; got {spec.models.risk_groups!r}.")
    v = spec.validation
    _choice("[validation] method", v.method, VALIDATION_METHODS)
    _choice("[validation] backend", v.backend, BACKENDS)
    _choice("[validation] censoring", v.censoring, ("auto", "km", "km_by_centre", "cox"))
    _choice("[validation] pooling", v.pooling, ("dl", "reml"))
    if v.censoring == "km_by_centre" and not d.centre:
        raise SpecError("[validation] censoring 'km_by_centre' needs a centre column in [data] (centre = '...').")
    _choice("[validation] estimator", v.estimator, ESTIMATORS)
    _choice("[validation] interval", v.interval, INTERVALS)
    for name in ("outer_replicates", "inner_replicates"):
        if getattr(v, name) < 1:
            raise SpecError(f"[validation] {name} must be at least 1; got {getattr(v, name)}.")
    if v.method == "by_centre" and not d.centre:
        raise SpecError("[validation] method 'by_centre' needs a centre column in [data] (centre = '...').")
    if v.backend == "dask" and not v.scheduler:
        raise SpecError("[validation] backend 'dask' needs scheduler = 'tcp://host:8786' (or 'local' for a local cluster).")
    for name in ("replicates", "folds", "repeats", "workers"):
        if getattr(v, name) < 1:
            raise SpecError(f"[validation] {name} must be at least 1; got {getattr(v, name)}.")
    cm = spec.models.combined
    _choice("[models.combined] coefficient", cm.coefficient, ("prevalidated", "in_sample"))
    _choice("[models.combined] shrinkage", cm.shrinkage, ("none", "cross_validated_slope"))
    if cm.prevalidation_folds < 3:
        raise SpecError(f"[models.combined] prevalidation_folds must be at least 3; got {cm.prevalidation_folds}.")
    av = spec.added_value
    if av.permutations < 0:
        raise SpecError(f"[added_value] permutations must be 0 (test not run) or more; got {av.permutations}.")
    if av.folds < 2:
        raise SpecError(f"[added_value] folds must be at least 2; got {av.folds}.")
    if spec.figures.min_at_risk < 1:
        raise SpecError(f"[figures] min_at_risk must be at least 1 (a curve is drawn while that many patients "
                        f"remain at risk; 10 is common practice); got {spec.figures.min_at_risk}.")
    if v.uno_tau is not None and (isinstance(v.uno_tau, bool) or not isinstance(v.uno_tau, (int, float)) or v.uno_tau <= 0):
        raise SpecError(f"[validation] uno_tau must be a positive number of {d.time_unit} (Uno's C truncation time); "
                        f"got {v.uno_tau!r}. Leave it out to truncate at the last horizon.")
    if spec.anticipated_r2 is not None and not 0 < spec.anticipated_r2 < 1:
        raise SpecError(f"[study] anticipated_r2 must lie in (0, 1); got {spec.anticipated_r2}.")


def check_clinical_only(spec: StudySpec) -> None:
    """A study without a features table can fit the clinical model only."""
    imaging = [m for m in spec.models.fit if m != "clinical"]
    if imaging:
        raise SpecError(
            f"the study has no imaging table ([data] features is not given) but [models] fit lists "
            f"{', '.join(repr(m) for m in imaging)}, which need imaging features; use fit = ['clinical'] "
            "or add features = 'your_features.csv' to [data].")
    if spec.imaging.volume_feature:
        raise SpecError("[imaging] volume_feature is set but the study has no imaging table ([data] features); remove it.")
    if spec.data.batch and spec.imaging.harmonise.method == "combat":
        raise SpecError("[imaging.harmonise] method is 'combat' but the study has no imaging table to harmonise; "
                        "set method = 'none' or add [data] features.")
    if spec.external is not None and spec.external.features:
        raise SpecError("[external] names a features table but the study has none ([data] features); remove it.")
