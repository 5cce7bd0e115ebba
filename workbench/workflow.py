"""The one orchestrator: a study file in, everything measured out.

``run_study(spec)`` reads and prepares the cohort, summarises it, fits every
model on all rows (the apparent fits, used for coefficient tables, figures, the
bundle and patient estimates), validates the whole modelling process by
resampling, compares each model with the baseline, and applies the fitted
models to the external cohort when the study has one. The command line and the
app are thin faces over this function.
"""

from __future__ import annotations

import difflib
import time
import warnings
from collections.abc import Callable
from dataclasses import dataclass, field, replace
from datetime import UTC, datetime

from workbench.cohort.summary import CohortSummary, summarise_cohort
from workbench.errors import DataQualityWarning, SpecError, WorkbenchError
from workbench.models.base import clone_model
from workbench.models.collinearity import signature_collinearity, warn_level_order
from workbench.models.labels import (
    MODEL_LABELS,
    design_column_words,
    model_labels,
    warn_empty_signatures,
)
from workbench.models.registry import build_models, candidate_parameters
from workbench.models.signature import check_volume_dominance, volume_correlation
from workbench.models.volume import VOLUME_MODEL
from workbench.prepare import PreparedCohort, package_versions, prepare_cohort, spec_digest
from workbench.stats.schoenfeld import warn_if_nonproportional
from workbench.study import StudySpec, dumps_study
from workbench.units import time_phrase
from workbench.validation.added_value import run_added_value
from workbench.validation.compare import ComparisonResult, compare_models
from workbench.validation.difference_bands import study_difference_bands
from workbench.validation.groups import loco_groups
from workbench.validation.new_scanner import new_scanner_block
from workbench.validation.resample import ValidationResult, validate, validate_external

GROUP_REPLICATES = 50
"""Bootstrap resamples per held-out centre in leave-one-centre-out (per-centre intervals)."""


def external_settings(spec: StudySpec, replicates: int | None = None) -> dict:
    """Settings of :func:`validate_external` for a study: the same for ``run`` and ``apply``.

    ``run`` (an [external] block) and ``apply`` (a saved bundle) call
    ``validate_external`` with exactly these, so they give identical numbers.
    """
    v = spec.validation
    # intervals on the external patients even without internal validation (method "none")
    reps = v.replicates if replicates is None else int(replicates)
    return {"replicates": reps, "random_state": spec.seed, "censoring": v.censoring, "pooling": v.pooling,
            "tau": v.tau}


def new_site_sizes(fitted: dict, cohort, horizons, seed) -> dict:
    """Sample size to validate each Cox-type model at a new site, per horizon (from its own predictions)."""
    import numpy as np

    from workbench.validation.newsite import new_site_sample_size

    grid = np.unique(np.r_[cohort.time[cohort.event], np.asarray(horizons, dtype=float)])
    out = {}
    for name, m in fitted.items():
        if name not in ("clinical", "combined", "penalised_all"):
            continue
        try:
            curves = m.predict_survival(cohort, grid)
            lp = m.predict_risk(cohort).values
            out[name] = [new_site_sample_size(curves, lp, cohort.y, h, random_state=[int(seed), i])
                         for i, h in enumerate(horizons)]
        except WorkbenchError as exc:
            warnings.warn(f"new-site sample size for {name} could not be computed: {exc}", stacklevel=2)
    return out


class RunCancelled(WorkbenchError):
    """The user stopped a run before it finished."""


@dataclass(frozen=True)
class StudyResult:
    """Everything one study run produced.

    Attributes
    ----------
    spec : StudySpec
    study_text : str
        The study file as run (TOML), so the run can be repeated exactly.
    prepared : PreparedCohort
        The analysis cohort and what was set aside (incomplete cases, pool).
    summary : CohortSummary
    models : dict of str to fitted model
        Fitted on all analysis rows.
    validation : ValidationResult
        Internal validation of the whole modelling process.
    comparisons : dict of str to ComparisonResult
        Each model against the baseline (internal validation).
    external : ValidationResult or None
    external_comparisons : dict of str to ComparisonResult
    external_prepared : PreparedCohort or None
    ph_tests : dict of str to PHTestResult
        Proportional-hazards tests of the Cox models (apparent fits).
    volume : dict of str to VolumeCorrelation
        Correlation of each signature with the tumour-volume feature.
    provenance : dict
        Seed, input data hash, study-file hash, package versions, time stamps.
    warnings : tuple of (category, message)
        Statistical warnings raised during the run (each once).
    new_site : dict of str to list of NewSiteSampleSize
        Per Cox-type model and horizon, the patients needed to validate it at a
        new site (:mod:`workbench.validation.newsite`).
    added_value : dict of str to AddedValueTest
        Permutation test of each imaging model against the baseline given the
        clinical predictors (empty when ``[added_value] permutations = 0``).
    collinearity : dict of str to CollinearityTable
        Per model with a signature, the signature's correlation and variance
        inflation with each clinical design column, on the development cohort.
    volume_comparisons : dict of str to ComparisonResult
        The combined model against the clinical + tumour volume model
        (``"internal"``, and ``"external"`` with an external cohort); empty when
        the study names no volume feature or fits no combined model.
    difference_bands : dict
        Per compared model, AUC and net-benefit differences against the baseline with
        paired bands, internal and external (:mod:`workbench.validation.difference_bands`).
    harmonisation : dict or None
        Before/after checks of the ComBat step and the scanner-confounding check
        (:func:`workbench.preprocess.harmonisation_checks.study_checks`); None without ComBat.
    new_batches : dict or None
        How the external cohort's scanners unseen in training were harmonised, and their
        calibration harmonised vs left unadjusted
        (:func:`workbench.validation.new_scanner.new_scanner_block`); computed once per run.
    """

    spec: StudySpec
    study_text: str
    prepared: PreparedCohort
    summary: CohortSummary
    models: dict
    validation: ValidationResult
    comparisons: dict[str, ComparisonResult]
    external: ValidationResult | None
    external_comparisons: dict[str, ComparisonResult]
    external_prepared: PreparedCohort | None
    ph_tests: dict
    volume: dict
    provenance: dict
    warnings: tuple = field(default_factory=tuple)
    new_site: dict = field(default_factory=dict)
    added_value: dict = field(default_factory=dict)
    collinearity: dict = field(default_factory=dict)
    volume_comparisons: dict = field(default_factory=dict)
    difference_bands: dict = field(default_factory=dict)
    harmonisation: dict | None = None
    new_batches: dict | None = None

    @property
    def cohort(self):
        return self.prepared.cohort


def _harmonisation_checks(fitted: dict, cohort, spec, ext_prepared) -> dict | None:
    """ComBat checks of the combined model (else the first harmonising model); warns on confounding."""
    from workbench.preprocess.harmonisation_checks import study_checks

    for name in ("combined", *fitted):
        m = fitted.get(name)
        if m is None:
            continue
        out = study_checks(m, cohort, spec, external_cohort=ext_prepared.cohort if ext_prepared else None,
                           random_state=int(spec.seed) % (2**31))
        if out is not None:
            for c in out["confounding"]:
                if c["flagged"]:
                    warnings.warn("Harmonisation: " + c["message"], DataQualityWarning, stacklevel=2)
            return {"model": name, **out}
    return None


def check_reference_scanner(spec, cohort) -> None:
    """[imaging.harmonise] reference_scanner must be one of the development cohort's scanners."""
    ref = spec.imaging.harmonise.reference_scanner
    if ref is None or spec.imaging.harmonise.method != "combat" or cohort.batch is None:
        return
    known = sorted({str(b) for b in cohort.batch})
    if str(ref) not in known:
        close = difflib.get_close_matches(str(ref), known, n=1)
        raise SpecError(f"[imaging.harmonise] reference_scanner = {ref!r} is not a scanner of the development "
                        f"cohort (column {spec.data.batch!r}: {', '.join(known)})"
                        + (f"; did you mean {close[0]!r}?" if close else "."))


def check_uno_tau(tau, cohort, horizons) -> None:
    """Uno's C truncation time must lie inside follow-up (before the last observed time)."""
    if tau is None:
        return
    last = float(cohort.time.max())
    if not 0 < float(tau) < last:
        raise SpecError(
            f"[validation] uno_tau = {time_phrase(tau, cohort.time_unit)} lies outside the follow-up of the "
            f"{cohort.n} patients (follow-up up to {last:g} {cohort.time_unit}); choose a time inside it, "
            f"for example the last horizon ({max(horizons):g}), or leave uno_tau out.")


def _progress(progress, cancel, stage: str):
    def report(done: int, total: int) -> None:
        if cancel is not None and cancel():
            raise RunCancelled(f"the run was stopped during {stage} ({done} of {total} done).")
        if progress is not None:
            progress(done, total, stage)

    return report


def run_study(
    spec: StudySpec,
    *,
    progress: Callable[[int, int, str], None] | None = None,
    cancel: Callable[[], bool] | None = None,
    replicates: int | None = None,
    workers: int | None = None,
    permutations: int | None = None,
) -> StudyResult:
    """Run a study end to end.

    Parameters
    ----------
    spec : StudySpec
    progress : callable(done, total, stage), optional
        Called as replicates finish (the app draws a progress bar from it).
    cancel : callable() -> bool, optional
        Checked as replicates finish; returning True stops the run with
        :class:`RunCancelled`.
    replicates, workers : int, optional
        Override the study's validation settings (e.g. a quick look with fewer
        replicates); the override is recorded in the results. ``replicates`` also
        caps the two-stage interval's outer samples at the same number and its
        inner replicates at a tenth of it (at least 1).
    permutations : int, optional
        Override ``[added_value] permutations`` (0 skips the test); recorded too.
    """
    started = time.time()
    v = spec.validation
    changes = {}
    if replicates is not None:
        changes["replicates"] = int(replicates)
        changes["forest_replicates"] = min(v.forest_replicates, int(replicates))
        # a quick look with few replicates also shortens the two-stage interval, which would
        # otherwise cost outer x (inner + 1) refits per model at the study's full strength
        changes["outer_replicates"] = min(v.outer_replicates, int(replicates))
        changes["inner_replicates"] = min(v.inner_replicates, max(1, int(replicates) // 10))
    if workers is not None:
        changes["workers"] = int(workers)
    if changes:
        spec = replace(spec, validation=replace(v, **changes))
        v = spec.validation
    if permutations is not None:
        changes["permutations"] = int(permutations)
        spec = replace(spec, added_value=replace(spec.added_value, permutations=int(permutations)))
    text = dumps_study(spec)

    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        prepared = prepare_cohort(spec)
        cohort = prepared.cohort
        if cohort.cause is not None:
            warnings.warn(
                f"{int((cohort.cause == 2).sum())} competing events ([data] competing_codes) are treated as "
                "censored here: this is a cause-specific analysis, and its survival curves are not the risk of "
                "the event in a world with competing events. 'workbench competing' gives the cumulative incidence.",
                DataQualityWarning, stacklevel=2)
        check_reference_scanner(spec, cohort)
        summary = summarise_cohort(cohort, spec.horizons, anticipated_r2=spec.anticipated_r2,
                                   **candidate_parameters(spec, cohort))

        unfitted = build_models(spec)
        if VOLUME_MODEL in unfitted and spec.imaging.volume_feature not in cohort.feature_names:
            del unfitted[VOLUME_MODEL]
            warnings.warn(f"[imaging] volume_feature {spec.imaging.volume_feature!r} is not among the imaging "
                          "features of the analysis (check the name and [imaging] include / exclude): the "
                          "clinical + tumour volume model is not fitted.", DataQualityWarning, stacklevel=2)
        fitted = {name: clone_model(m).fit(cohort) for name, m in unfitted.items()}
        ph_tests = {}
        for name, m in fitted.items():
            if hasattr(m, "ph_test"):
                ph_tests[name] = m.ph_test(cohort)
                terms = m.transformer_.terms_
                warn_if_nonproportional(ph_tests[name], model=MODEL_LABELS.get(name, name),
                                        labels=lambda col, terms=terms: design_column_words(terms, col))
        warn_empty_signatures(fitted)
        volume = {}
        if spec.imaging.volume_feature and spec.imaging.volume_feature in cohort.feature_names:
            for name, m in fitted.items():
                # an empty signature has a constant score: its volume correlation is not applicable
                if hasattr(m, "signature_score") and tuple(getattr(m, "selected_features_", ())):
                    volume[name] = volume_correlation(m.signature_score(cohort), cohort.features, spec.imaging.volume_feature)
                    check_volume_dominance(volume[name])
        collinearity = {name: t for name, m in fitted.items() if (t := signature_collinearity(m, cohort)) is not None}
        warn_level_order(fitted, model_labels(fitted), baseline="clinical")

        check_uno_tau(v.uno_tau, cohort, spec.horizons)
        model_reps = {"forest": v.forest_replicates} if "forest" in unfitted else None
        method = v.method if v.method != "none" else "bootstrap"
        reps = v.replicates if v.method != "none" else 0
        validation = validate(
            unfitted,
            cohort,
            spec.horizons,
            method=method,
            replicates=reps,
            folds=v.folds,
            repeats=v.repeats,
            random_state=spec.seed,
            backend=v.backend,
            workers=v.workers,
            scheduler=v.scheduler,
            progress=_progress(progress, cancel, "internal validation"),
            model_replicates=model_reps,
            apparent_models=fitted,
            tau=v.tau,
            estimator=v.estimator,
            interval=v.interval,
            outer_replicates=v.outer_replicates,
            inner_replicates=v.inner_replicates,
        )

        added_value = run_added_value(spec, unfitted, cohort, progress=_progress(progress, cancel, "added-value test"))

        external = ext_prepared = None
        if spec.external is not None:
            ext_prepared = prepare_cohort(spec, external=True, unreproducible=prepared.unreproducible)
            external = validate_external(
                fitted,
                ext_prepared.cohort,
                spec.horizons,
                **external_settings(spec),
                progress=_progress(progress, cancel, "external validation"),
            )
        harmonisation = _harmonisation_checks(fitted, cohort, spec, ext_prepared)
        new_batches = new_scanner_block(spec, fitted, ext_prepared.cohort) if ext_prepared is not None else None
        if v.method == "by_centre":
            validation = replace(validation, groups={"centre": loco_groups(
                unfitted, cohort, spec.horizons, replicates=min(v.replicates, GROUP_REPLICATES),
                entropy=validation.seed_entropy, pooling=v.pooling)})

        new_site = new_site_sizes(fitted, cohort, spec.horizons, spec.seed)

        baseline = spec.models.baseline
        comparisons = {m: compare_models(validation, m, baseline) for m in unfitted if m != baseline}
        external_comparisons = (
            {m: compare_models(external, m, baseline) for m in unfitted if m != baseline} if external else {}
        )
        volume_comparisons = {}
        if VOLUME_MODEL in unfitted and "combined" in unfitted:
            # is the signature more than volume? the same replicates and estimator for both
            volume_comparisons["internal"] = compare_models(validation, "combined", VOLUME_MODEL)
            if external:
                volume_comparisons["external"] = compare_models(external, "combined", VOLUME_MODEL)

    if v.method == "none":
        # apparent performance only: recorded as such, not as a bootstrap with no replicates
        note = ("No internal validation (method 'none'): every value is the apparent performance of the "
                "fits on all patients, which is optimistic.")
        kept = tuple(n for n in validation.notes if not n.startswith("no bootstrap replicates were run"))
        validation = replace(validation, method="none", notes=(*kept, note))
        comparisons = {k: replace(c, method="none") for k, c in comparisons.items()}
        if "internal" in volume_comparisons:
            volume_comparisons["internal"] = replace(volume_comparisons["internal"], method="none")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # the run's warnings were recorded above; resampling repeats them
        bands = study_difference_bands(validation, comparisons, external, external_comparisons, fitted,
                                       ext_prepared.cohort if ext_prepared else None)
    seen, messages = set(), []
    for w in caught:
        key = (w.category.__name__, str(w.message))
        if key not in seen:
            seen.add(key)
            messages.append(key)
    provenance = {
        "seed": spec.seed,
        "data_hash": cohort.source.data_hash,
        "external_data_hash": ext_prepared.cohort.source.data_hash if ext_prepared else None,
        "study_hash": spec_digest(text),
        "versions": package_versions(),
        "started": datetime.fromtimestamp(started, tz=UTC).isoformat(timespec="seconds"),
        "seconds": round(time.time() - started, 1),
        "overrides": changes,
    }
    return StudyResult(
        spec=spec,
        study_text=text,
        prepared=prepared,
        summary=summary,
        models=fitted,
        validation=validation,
        comparisons=comparisons,
        external=external,
        external_comparisons=external_comparisons,
        external_prepared=ext_prepared,
        ph_tests=ph_tests,
        volume=volume,
        provenance=provenance,
        warnings=tuple(messages),
        new_site=new_site,
        added_value=added_value,
        collinearity=collinearity,
        volume_comparisons=volume_comparisons,
        difference_bands=bands,
        harmonisation=harmonisation,
        new_batches=new_batches,
    )

