"""The competing-risks analysis of a study: apparent and bootstrap optimism-corrected.

:func:`run_competing` reads the study's cohort (which must name
``[data] competing_codes``), fits the clinical model and, with an imaging table,
the clinical + imaging signature model, each by cause-specific Cox and by
Fine-Gray for the cause of interest, plus the same models for all-cause death
(any first event) for contrast. Every model is judged at the study horizons by
the competing-risks AUC (definition 2), the IPCW Brier score and IPA of the
cumulative incidence, and the ICI, and so is the combined-minus-clinical
difference. Validation uses the main engine's bootstrap replicate plan seeded from
the study seed: in each replicate every step, the signature included, is refitted
on the bootstrap rows and judged on them, on the original rows and on the patients
not drawn into the sample. The validated estimate is by default Efron & Tibshirani's
.632+ (the one whose bias met the target in bench/bench_competing_validation.py);
out-of-bootstrap and Harrell's optimism correction stay selectable
(:mod:`workbench.competing.estimates`; ``workbench competing --estimator``). A 95%
interval is given where the same bench measured its coverage in the target
(:data:`workbench.competing.estimates.INTERVAL_CELLS`, from a number of patients and of
events of the target on): AUC, Brier score and IPA of the cause-specific Cox, Fine-Gray and
all-cause Cox models and their combined-minus-clinical differences; the ICI none, with its
reason in the results.
"""

from __future__ import annotations

import time as _time
import warnings
from dataclasses import dataclass, field
from datetime import UTC, datetime

import numpy as np

from workbench.cohort.core import Cohort
from workbench.competing.cif import CumulativeIncidenceResult, aalen_johansen
from workbench.competing.estimates import (
    DEFAULT_ESTIMATOR,
    ESTIMATOR_LABELS,
    ReplicateScores,
    ValidatedTable,
    estimate_table,
    no_information_table,
)
from workbench.competing.external import METRICS, external_block, score_curves, with_differences
from workbench.competing.fitting import TARGETS, FittedArm, fit_arm, target_outcome
from workbench.errors import SpecError, WorkbenchError
from workbench.prepare import PreparedCohort, package_versions, prepare_cohort, spec_digest
from workbench.study import StudySpec, dumps_study
from workbench.validation.backends import run_tasks
from workbench.validation.plans import _bootstrap_plan, _copy_seed, _oob_rows, _root

__all__ = ["METRICS", "CompetingStudyResult", "CompetingValidation", "evaluate_arm",
           "run_competing", "validate_competing"]



def _methods(target: str) -> tuple[str, ...]:
    # all-cause death has one cause: the cause-specific Cox model is the ordinary Cox model
    return ("cause_specific", "fine_gray") if target == "cause" else ("cause_specific",)


def _models(cohort: Cohort) -> tuple[str, ...]:
    return ("clinical", "combined") if cohort.feature_names else ("clinical",)


def evaluate_arm(arm: FittedArm, cohort: Cohort, target: str, method: str, horizons, metrics=METRICS) -> dict:
    """Metrics of one fitted arm on ``cohort``: {metric: array over horizons} (NaN where undefined).

    Censoring weights come from ``cohort`` itself (its own censoring distribution).
    """
    h = np.asarray(horizons, dtype=float)
    return score_curves(target_outcome(cohort, target), arm.predict(cohort, h, method), h, metrics)


def _fit_all(train: Cohort, spec: StudySpec, seed: int, targets=TARGETS) -> dict:
    arms = {}
    for target in targets:
        for model in _models(train):
            arms[(target, model)] = fit_arm(train, spec, target, imaging=model == "combined", random_state=seed,
                                            fine_gray=target == "cause")
    return arms


def _evaluate_all(arms: dict, cohort: Cohort, horizons, metrics=METRICS) -> dict:
    return {(target, model, method): evaluate_arm(arm, cohort, target, method, horizons, metrics)
            for (target, model), arm in arms.items() for method in _methods(target)}


@dataclass(frozen=True)
class CompetingStudyResult:
    """Everything the competing-risks route measured.

    ``apparent`` and ``corrected`` map (target, model, method) -> {metric: array over
    horizons}; model ``"combined_minus_clinical"`` holds the differences. ``corrected``
    holds the validated estimates of ``estimator`` (:attr:`estimator_label`), ``lower`` /
    ``upper`` their 95% intervals (NaN where none is reported, ``interval_note`` says why). ``arms``
    are the models fitted on all rows (for figures), ``incidence`` the
    Aalen-Johansen curves of every cause. With an ``[external]`` block, ``external``
    holds the fixed predictions' metrics on the external cohort with their intervals
    (:func:`workbench.competing.external.external_block`).
    """

    spec: StudySpec
    study_text: str
    prepared: PreparedCohort
    horizons: np.ndarray
    apparent: dict
    optimism: dict
    corrected: dict
    replicates: int
    failed: int
    incidence: CumulativeIncidenceResult
    arms: dict
    provenance: dict
    warnings: tuple = field(default=())
    external: dict | None = None
    external_prepared: PreparedCohort | None = None
    external_replicates: int = 0
    estimator: str = DEFAULT_ESTIMATOR
    lower: dict = field(default_factory=dict)
    upper: dict = field(default_factory=dict)
    interval_note: dict = field(default_factory=dict)

    @property
    def estimator_label(self) -> str:
        """How the validated (``corrected``) metrics were estimated, in words."""
        return ESTIMATOR_LABELS.get(self.estimator, self.estimator)

    @property
    def cohort(self) -> Cohort:
        return self.prepared.cohort


@dataclass(frozen=True)
class CompetingValidation:
    """Apparent, optimism and validated (``corrected``) metrics, the full-data arms, failed replicates.

    ``estimator`` names the estimator behind ``corrected`` (``optimism`` = apparent minus
    it); ``lower`` / ``upper`` / ``note`` hold its 95% interval where one is reported
    (:mod:`workbench.competing.estimates`); ``rows`` the replicates' scores and ``gamma``
    the no-information values, so that every estimator can be formed from the same run
    (:meth:`table`).
    """

    apparent: dict
    optimism: dict
    corrected: dict
    arms: dict
    failed: int
    caught: tuple = ()
    estimator: str = DEFAULT_ESTIMATOR
    lower: dict = field(default_factory=dict)
    upper: dict = field(default_factory=dict)
    note: dict = field(default_factory=dict)
    rows: tuple = ()
    gamma: dict = field(default_factory=dict)
    events: dict = field(default_factory=dict)

    def table(self, estimator: str, conf_level: float = 0.95) -> ValidatedTable:
        """The validated estimates of ``estimator`` from this run's replicates."""
        return estimate_table(self.apparent, list(self.rows), estimator, gamma=self.gamma, conf_level=conf_level,
                              events=self.events)


def _replicate(task):
    """One bootstrap replicate's :class:`ReplicateScores`, or None if a fit failed."""
    cohort, spec, idx, seed, targets, h, metrics = task
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # the full-data fit reported the warnings once
        try:
            boot = cohort.take(idx)
            fitted = _fit_all(boot, spec, seed, targets)
            out_rows = _oob_rows(cohort.ids, idx)
            oob = None
            if out_rows.size:
                oob = with_differences(_evaluate_all(fitted, cohort.take(out_rows), h, metrics))
            return ReplicateScores(with_differences(_evaluate_all(fitted, boot, h, metrics)),
                                   with_differences(_evaluate_all(fitted, cohort, h, metrics)), oob,
                                   int(np.unique(cohort.ids[idx]).size), int(np.unique(cohort.ids[out_rows]).size))
        except WorkbenchError:
            return None


def validate_competing(cohort: Cohort, spec: StudySpec, *, replicates: int, targets=TARGETS, metrics=METRICS,
                       progress=None, workers: int | None = None,
                       estimator: str = DEFAULT_ESTIMATOR) -> CompetingValidation:
    """Fit on all rows, then the bootstrap validation (replicate plan of the main engine).

    ``estimator``: "632plus" (default), "oob" (out-of-bootstrap) or "optimism"
    (Harrell) - see :mod:`workbench.competing.estimates`; the others can be
    formed from the same run with :meth:`CompetingValidation.table`.

    Replicate ``b`` draws its rows and its model seed from the study seed as
    :func:`workbench.validation.resample.validate` does; a replicate whose fit fails
    (a :class:`WorkbenchError`) is counted and left out. Replicates run on the study's
    ``[validation]`` backend and workers (``workers`` overrides the number); the
    result does not depend on either.
    """
    h = np.asarray(spec.horizons, dtype=float)
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        arms = _fit_all(cohort, spec, int(spec.seed), targets)
        apparent = with_differences(_evaluate_all(arms, cohort, h, metrics))
    root = _copy_seed(_root(int(spec.seed)))
    _app_ss, rep_root = root.spawn(2)
    B = int(replicates)
    plan = _bootstrap_plan(cohort.n, B, rep_root) if B else []
    v = spec.validation
    tasks = [(cohort, spec, idx, seed, tuple(targets), h, tuple(metrics)) for idx, seed in plan]
    results = run_tasks(_replicate, tasks, backend=v.backend, workers=int(v.workers if workers is None else workers),
                        scheduler=v.scheduler, progress=progress)
    rows = [r for r in results if r is not None]
    failed = len(results) - len(rows)
    curves = {(target, model, method): arm.predict(cohort, h, method)
              for (target, model), arm in arms.items() for method in _methods(target)
              if not (method == "fine_gray" and arm.fine_gray is None)}
    outcomes = {t: target_outcome(cohort, t) for t in targets}
    gamma = no_information_table(curves, outcomes, h)
    events = {t: int(np.sum(y["cause"] == 1)) for t, y in outcomes.items()}  # the target's own events
    tab = estimate_table(apparent, rows, estimator, gamma=gamma, events=events)
    return CompetingValidation(apparent, tab.optimism, tab.corrected, arms, failed, tuple(caught), tab.estimator,
                               tab.lower, tab.upper, tab.note, tuple(rows), gamma, events)


def run_competing(spec: StudySpec, *, replicates: int | None = None, progress=None,
                  workers: int | None = None, estimator: str = DEFAULT_ESTIMATOR) -> CompetingStudyResult:
    """Run the competing-risks analysis of a study.

    Parameters
    ----------
    spec : StudySpec
        Needs ``[data] competing_codes``.
    replicates : int, optional
        Bootstrap replicates (default: the study's ``[validation] replicates``).
    progress : callable(done, total), optional
    workers : int, optional
        Parallel workers (default: the study's ``[validation] workers``).
    estimator : {"632plus", "oob", "optimism"}, default "632plus"
        The validated estimate (:mod:`workbench.competing.estimates`): .632+,
        out-of-bootstrap or Harrell's optimism correction.

    Returns
    -------
    CompetingStudyResult

    References
    ----------
    Harrell FE, Lee KL, Mark DB. Multivariable prognostic models. Stat Med 1996;15:361-87 (optimism).
    Efron B, Tibshirani R. J Am Stat Assoc 1997;92:548-60 (out-of-bootstrap, .632+).
    Blanche P, Dartigues JF, Jacqmin-Gadda H. Stat Med 2013;32:5381-97 (competing AUC).
    Fine JP, Gray RJ. J Am Stat Assoc 1999;94:496-509.
    """
    started = _time.time()
    if spec.data.competing_codes is None:
        raise SpecError("the competing-risks route needs [data] competing_codes: the codes of the event column "
                        "that mark a competing event, e.g. competing_codes = [\"other\"] next to event_codes.")
    B = int(spec.validation.replicates if replicates is None else replicates)
    if B < 0:
        raise SpecError(f"replicates must be at least 0, got {B}.")
    text = dumps_study(spec)
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        prepared = prepare_cohort(spec)
    cohort = prepared.cohort
    h = np.asarray(spec.horizons, dtype=float)
    v = validate_competing(cohort, spec, replicates=B, progress=progress, workers=workers, estimator=estimator)
    external = ext_prepared = None
    if spec.external is not None:
        with warnings.catch_warnings(record=True) as caught_ext:
            warnings.simplefilter("always")
            ext_prepared = prepare_cohort(spec, external=True, unreproducible=prepared.unreproducible)
            external = validate_competing_external(v.arms, ext_prepared.cohort, spec, replicates=B)
        caught = [*caught, *caught_ext]
    messages = tuple(dict.fromkeys((w.category.__name__, str(w.message)) for w in [*caught, *v.caught]))
    if ext_prepared is not None:
        provenance_ext = {"external_data_hash": ext_prepared.cohort.source.data_hash}
    else:
        provenance_ext = {}
    provenance = {
        "seed": spec.seed,
        "data_hash": cohort.source.data_hash,
        "study_hash": spec_digest(text),
        "versions": package_versions(),
        "started": datetime.fromtimestamp(started, tz=UTC).isoformat(timespec="seconds"),
        "seconds": round(_time.time() - started, 1),
        "replicates": B,
        "estimator": v.estimator,
        "workers": int(spec.validation.workers if workers is None else workers),
        "backend": spec.validation.backend,
        **provenance_ext,
    }
    return CompetingStudyResult(
        spec=spec, study_text=text, prepared=prepared, horizons=h, apparent=v.apparent, optimism=v.optimism,
        corrected=v.corrected, replicates=B, failed=v.failed, incidence=aalen_johansen(cohort.time, cohort.cause),
        arms=v.arms, provenance=provenance, warnings=messages, external=external, external_prepared=ext_prepared,
        external_replicates=B if external is not None else 0, estimator=v.estimator, lower=v.lower, upper=v.upper,
        interval_note=v.note,
    )


def validate_competing_external(arms: dict, external: Cohort, spec: StudySpec, *, replicates: int) -> dict:
    """Metrics of the whole-cohort fits on an external cohort, with resampling intervals.

    Every arm predicts the external patients once (their new scanners harmonised by the
    signature's own policy); :func:`workbench.competing.external.external_block` resamples
    the patients ``replicates`` times from a seed of its own drawn from the study seed.
    """
    if external.cause is None:
        raise SpecError("the external cohort has no cause codes; it needs the same event column and codes.")
    h = np.asarray(spec.horizons, dtype=float)
    curves = {(target, model, method): arm.predict(external, h, method)
              for (target, model), arm in arms.items() for method in _methods(target)
              if not (method == "fine_gray" and arm.fine_gray is None)}
    outcomes = {target: target_outcome(external, target) for target, _ in arms}
    seed = np.random.SeedSequence([int(spec.seed), 0x6578])  # "ex": a stream apart from the replicates
    return external_block(curves, outcomes, h, replicates=int(replicates), seed=seed,
                          conf_level=0.95)
