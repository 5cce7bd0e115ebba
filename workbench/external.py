"""Apply a saved model bundle to a new cohort: predictions, validation, recalibration.

The new cohort is read and checked exactly like the training cohort (same
column mapping, same imaging pool, same complete-case rules, from the bundle's
study). The fitted models are applied unchanged. Censoring weights and the
Kaplan-Meier null model of the Brier score come from the new cohort itself
(the bundle carries no patient-level training data); this is the usual choice
when a model is validated at another hospital.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from workbench.cohort.io import read_cohort
from workbench.errors import WorkbenchError
from workbench.metrics.calibration import calibration_at
from workbench.plausibility import check_bundle_cohort
from workbench.prepare import PreparedCohort, drop_incomplete, select_pool, without_unreproducible
from workbench.report.bundle import Bundle
from workbench.stats.riskgroups import assign_groups, group_labels
from workbench.validation.compare import compare_models
from workbench.validation.recalibrate import recalibrate
from workbench.validation.resample import ValidationResult, validate_external
from workbench.workflow import external_settings

COX_KINDS = ("clinical", "combined", "penalised_all")


@dataclass(frozen=True)
class ExternalResult:
    """A bundle applied to a new cohort."""

    prepared: PreparedCohort
    predictions: pd.DataFrame
    validation: ValidationResult
    comparisons: dict
    recalibration: pd.DataFrame
    warnings: tuple
    new_batches: dict | None = None  # how scanners unseen in training were harmonised


def read_new_cohort(bundle: Bundle, features, clinical, *, features_sheet: str | None = None,
                    clinical_sheet: str | None = None) -> PreparedCohort:
    """Read a new cohort with the bundle's column mapping, imaging pool and missing-value rules.

    ``features_sheet`` / ``clinical_sheet`` name the sheet of an Excel workbook to read.
    """
    spec = bundle.spec
    d = spec.data
    if features is None and bundle.manifest["inputs"]["imaging_features"]:
        raise WorkbenchError("the bundle's models need imaging features; give the new cohort's features table "
                             "(--features FILE).")
    cohort = read_cohort(features, clinical, d.column_map(), on_unmatched=d.on_unmatched,
                         drop_unusable_features=False, features_sheet=features_sheet,
                         clinical_sheet=clinical_sheet)
    n_read = cohort.n
    expected = list(bundle.manifest["inputs"]["imaging_features"])
    missing = [c for c in expected if c not in cohort.feature_names]
    if missing:
        raise WorkbenchError(
            f"{features}: {len(missing)} imaging feature(s) the models need are not in the table "
            f"(first: {', '.join(missing[:5])}). The new table must have the training feature columns."
        )
    cohort, excluded = select_pool(cohort, spec.imaging.include, spec.imaging.exclude)
    cohort, incomplete, by_col = drop_incomplete(cohort, spec.predictors)
    prepared = PreparedCohort(cohort, n_read, incomplete, by_col, tuple(cohort.feature_names), excluded)
    if not spec.data.repeats:
        return prepared
    # features the training run removed for poor reproducibility ([data] repeats) are no model's input
    return without_unreproducible(prepared, [f for f in cohort.feature_names if f not in set(expected)])


def _risk_group(values: np.ndarray, cuts) -> np.ndarray:
    """Group names by the bundle's training cut-points, with the one rule of :mod:`workbench.stats.riskgroups`."""
    if not cuts:
        return np.full(values.size, "", dtype=object)
    return np.asarray(group_labels(len(cuts) + 1), dtype=object)[assign_groups(values, cuts)]


def apply_bundle(bundle: Bundle, features, clinical, *, replicates: int | None = None,
                 recalibration=("intercept", "slope"),
                 random_state=None, features_sheet: str | None = None,
                 clinical_sheet: str | None = None) -> ExternalResult:
    """Apply every model of ``bundle`` to a new cohort and validate it there.

    Parameters
    ----------
    bundle : Bundle
        From :func:`workbench.report.bundle.load_bundle`.
    features, clinical : path-like
        The new cohort's tables (same columns as the training tables).
    replicates : int, optional
        Bootstrap resamples of the new patients for the intervals (predictions
        fixed); the study's number by default, so that ``apply`` repeats the
        numbers of ``run`` with the same external tables.
    recalibration : tuple of {"intercept", "slope"}
        Recalibrations of the Cox-type models to report (apparent on the new cohort).
    features_sheet, clinical_sheet : str, optional
        Excel: the sheet of each workbook to read (needed when a workbook has several).
    """
    spec = bundle.spec
    horizons = tuple(spec.horizons)
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        prepared = read_new_cohort(bundle, features, clinical, features_sheet=features_sheet,
                                   clinical_sheet=clinical_sheet)
        cohort = prepared.cohort
        check_bundle_cohort(bundle, cohort, clinical)  # unit / scale plausibility against the training data
        cut = bundle.training.risk_cutpoints
        cols = {"patient_id": cohort.ids}
        for name, m in bundle.models.items():
            risk = m.predict_risk(cohort).values
            surv = m.predict_survival(cohort, horizons)
            cols[f"{name}_risk_score"] = risk
            cols[f"{name}_risk_group"] = _risk_group(risk, cut.get(name))
            for j, h in enumerate(horizons):
                cols[f"{name}_survival_{h:g}"] = surv.probs[:, j]
        predictions = pd.DataFrame(cols)
        settings = external_settings(spec, replicates)
        if random_state is not None:
            settings["random_state"] = random_state
        validation = validate_external(bundle.models, cohort, horizons, **settings)
        baseline = spec.models.baseline
        comparisons = {m: compare_models(validation, m, baseline) for m in bundle.models if m != baseline}
        rows = []
        for name, m in bundle.models.items():
            if name not in COX_KINDS:
                continue
            risk = m.predict_risk(cohort)
            for method in recalibration:
                rec = recalibrate(risk, cohort.y, horizons, method)
                for h in horizons:
                    cal = calibration_at(cohort.y, rec.curves, h)
                    rows.append({
                        "model": name, "recalibration": method, "horizon": h, "slope_applied": rec.slope,
                        "ici": cal.smoothed.ici, "e50": cal.smoothed.e50, "e90": cal.smoothed.e90,
                        "oe_ratio": cal.observed_expected.ratio, "note": rec.note,
                    })
    seen, msgs = set(), []
    for w in caught:
        key = (w.category.__name__, str(w.message))
        if key not in seen:
            seen.add(key)
            msgs.append(key)
    from workbench.validation.new_scanner import new_scanner_block

    return ExternalResult(prepared, predictions, validation, comparisons, pd.DataFrame(rows), tuple(msgs),
                          new_scanner_block(spec, bundle.models, cohort))


def save_recalibrated_bundle(bundle: Bundle, result: ExternalResult, method: str, path, *,
                             overwrite: bool = False) -> Path:
    """Save the Cox-type models of ``bundle`` recalibrated on the new cohort as a new bundle.

    ``method`` is ``"intercept"`` (baseline hazard updated, slope 1) or ``"slope"``
    (baseline hazard and calibration slope). The new bundle's training summary
    (risk-group cut-points, ranges) describes the new site's patients, on which
    the recalibration was fitted.
    """
    from workbench.models.recalibrated import RecalibratedModel
    from workbench.report.bundle import save_bundle
    from workbench.report.bundle_training import summarise_training

    cohort = result.prepared.cohort
    models = {name: RecalibratedModel(m, method, name=name).fit(cohort)
              for name, m in bundle.models.items() if name in COX_KINDS}
    if not models:
        raise WorkbenchError("the bundle has no Cox-type model (clinical, combined, penalised_all) to recalibrate.")
    training = summarise_training(cohort, models, bundle.spec.horizons, groups=bundle.spec.models.risk_groups)
    extra = {"recalibrated": {"method": method, "n": cohort.n, "n_events": cohort.n_events,
                              "data_hash": cohort.source.data_hash if cohort.source is not None else None,
                              "slopes": {k: m.slope_ for k, m in models.items()}}}
    return save_bundle(models, bundle.spec, training, path, extra=extra, overwrite=overwrite)


def write_external(result: ExternalResult, out_dir) -> Path:
    """Write predictions, performance, comparison and recalibration tables."""
    from workbench.report.jsonable import jsonable
    from workbench.report.results import comparison_table

    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    result.predictions.to_csv(out / "predictions.csv", index=False)
    result.validation.summary_frame().to_csv(out / "performance.csv", index=False)
    comparison_table(result.comparisons).to_csv(out / "comparison.csv", index=False)
    result.recalibration.to_csv(out / "recalibration.csv", index=False)
    import json

    from workbench.cohort.summary import CAUTION
    from workbench.report.heterogeneity import censoring_dict, group_table, groups_dict

    if result.validation.groups:
        group_table(result.validation.groups).to_csv(out / "by_group.csv", index=False)

    data = {
        "caution": CAUTION,
        "n": result.prepared.cohort.n,
        "n_events": result.prepared.cohort.n_events,
        "n_incomplete_dropped": len(result.prepared.incomplete_ids),
        "performance": {m: jsonable(e) for m, e in result.validation.estimates.items()},
        "recalibration": jsonable(result.recalibration),
        "censoring": censoring_dict(result.validation.censoring),
        "by_group": groups_dict(result.validation.groups),
        "new_batches": result.new_batches,
        "warnings": [{"category": c, "message": m} for c, m in result.warnings],
    }
    path = out / "external_results.json"
    path.write_text(json.dumps(data, indent=2, allow_nan=False))
    return path
