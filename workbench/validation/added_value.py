"""Does imaging add prognostic information given the clinical model? A permutation test.

The null hypothesis is *conditional*: the outcome is independent of the imaging
features given the clinical predictors. Imaging features may well depend on the
clinical predictors (tumour volume grows with stage), so plain permutation of the
imaging rows tests a different, wrong null (imaging independent of everything):
it breaks the volume-stage link and lets a signature that only re-expresses stage
look like added value.

Scheme (residual permutation of the imaging block)
--------------------------------------------------
1. Each imaging feature is regressed by least squares on the nuisance design:
   an intercept, the clinical model's terms (as the clinical model codes them)
   and, when the study has scanner batches, batch indicators. This splits the
   imaging table into a part explained by the clinical predictors and batch,
   ``F_hat = H X``, and residuals ``R = X - H X``.
2. A permuted cohort has imaging ``X* = H X + P R``: the residual rows (whole
   rows, so the correlation between features is kept) are permuted among
   patients, within batch when there are batches (scanner-specific spread stays
   with its scanner). The clinical data, batch labels and outcomes stay in place.
   Under the null, and with residuals exchangeable given the nuisance design,
   ``X*`` has the same joint distribution with (clinical, outcome) as ``X``: the
   imaging-clinical correlation is kept, any imaging-outcome link beyond it is
   broken. This is the residual-permutation idea of Freedman & Lane (1983),
   applied to the block under test because a censored outcome has no residuals
   to permute (Kennedy 1995 discusses the variants; Anderson & Robinson 2001
   found permuting reduced-model residuals the most reliable of them).
3. The statistic is the cross-validated gain of the combined over the clinical
   model: the cross-validated partial log-likelihood (Verweij & van Houwelingen
   1993) of the combined model minus that of the clinical model, with the same
   patient-grouped folds. By default (``refits="nested"``) every signature step
   (ComBat, filters, screen, the penalty choice by inner cross-validation) is
   refitted in every training fold of every permutation. ``refits="inner_folds"``
   (about a third of the CPU) fits the signature once per permuted cohort with the
   statistic's folds as the folds of its penalty choice, fold ``k``'s signature
   being that choice's path without fold ``k`` at the chosen penalty. Both treat
   the data and every permutation alike, yet on simulated null cohorts the
   inner-folds statistic rejected far more often than nominal (see
   ``bench/bench_added_value.py``): the residual permutation is only approximately
   exchangeable, and that statistic (no exact zeros: fold signatures are rarely
   empty) is sensitive to what it misses. It is kept for study, not for use.
   Folds and model seeds are reused across permutations
   (common random numbers): only the imaging residuals change, so the clinical
   terms of each training fold are learned once and reused (they do not depend
   on imaging).
4. ``p = (1 + #{T_perm >= T_obs}) / (1 + K)`` (Phipson & Smyth 2010), a
   level-alpha test when the permutations are exchangeable with the observed
   data; its Monte Carlo standard error ``sqrt(p (1 - p) / K)`` is reported.
   An empty signature gives a statistic of exactly 0 and ties count against the
   model, so the test is conservative when signatures are often empty (on
   simulated null cohorts of 160 patients its level was 0.005 at nominal 0.05;
   with 200 patients and 60 features, 0.033 (MC SE 0.013, 182 cohorts), the
   inner-folds statistic 0.082 (0.020); see ``bench/bench_added_value.py``).

The likelihood-ratio test of the combined against the clinical model on the
development data scores the signature on the patients it was selected on and is
far too liberal; out-of-fold ("pre-validated") likelihood-ratio tests are also
anti-conservative (Hoefling & Tibshirani 2008). This test replaces both.

References
----------
.. [1] Freedman D, Lane D. A nonstochastic interpretation of reported significance
       levels. J Bus Econ Stat 1983;1:292-8.
.. [2] Kennedy PE. Randomization tests in econometrics. J Bus Econ Stat 1995;13:85-94.
.. [3] Anderson MJ, Robinson J. Permutation tests for linear models. Aust N Z J Stat
       2001;43:75-88.
.. [4] Verweij PJM, van Houwelingen HC. Cross-validation in survival analysis. Stat Med
       1993;12:2305-14.
.. [5] Phipson B, Smyth GK. Permutation p-values should never be zero. Stat Appl Genet
       Mol Biol 2010;9:Article 39.
.. [6] Hoefling H, Tibshirani R. A study of pre-validation. Ann Appl Stat 2008;2:643-64.
.. [7] Candes E, Fan Y, Janson L, Lv J. Panning for gold: model-X knockoffs for high
       dimensional controlled variable selection. J R Stat Soc B 2018;80:551-77
       (the conditional randomisation test, an alternative when a model of the imaging
       features given the clinical ones is trusted).

The permutation pieces (nuisance design, residuals, within-batch permutation, p-value)
are in ``permutation.py`` and the statistic in ``added_value_cvpl.py``; this module
runs the test.
"""

from __future__ import annotations

import time
import warnings
from dataclasses import dataclass, replace

import numpy as np
import pandas as pd

from workbench.cohort.core import Cohort
from workbench.errors import SpecError
from workbench.models.penalized import patient_folds
from workbench.validation.added_value_cvpl import (
    _cvpl_cached,
    _cvpl_inner_folds,
    _fold_designs,
    _lean,
    _protected_all,
    cv_partial_loglik,
)
from workbench.validation.backends import run_tasks
from workbench.validation.permutation import (
    nuisance_design,
    permutation_p_value,
    residualise,
    within_permutation,
)

SCHEME = "imaging residuals permuted (within batch) after least-squares regression on the clinical terms and batch"
STATISTIC = "cross-validated partial log-likelihood gain (model minus baseline)"


@dataclass(frozen=True)
class AddedValueTest:
    """Result of :func:`added_value_test`.

    Attributes
    ----------
    model, baseline : str
    statistic : str
        What ``observed`` and ``null`` measure.
    observed : float
        The statistic on the data (cross-validated log-likelihood units; > 0
        means the combined model predicted held-out patients better).
    null : ndarray of shape (permutations,)
        The statistic in every permuted cohort.
    permutations : int
    p_value : float
        ``(1 + #{null >= observed}) / (1 + permutations)``.
    mc_se : float
        Monte Carlo standard error of ``p_value``, ``sqrt(p (1 - p) / K)``.
    folds : int
        Patient-grouped folds of the cross-validated likelihood.
    baseline_cvpl, model_cvpl : float
        The two cross-validated partial log-likelihoods on the data.
    scheme : str
    nuisance : tuple of str
        Columns the imaging features were regressed on.
    within : str or None
        ``"batch"`` when residuals were permuted within batch.
    null_zero_fraction : float
        Share of permutations whose statistic is exactly 0 (the signature was empty
        in every fold: the combined model was the clinical model).
    seconds : float
    """

    model: str
    baseline: str
    statistic: str
    observed: float
    null: np.ndarray
    permutations: int
    p_value: float
    mc_se: float
    folds: int
    baseline_cvpl: float
    model_cvpl: float
    scheme: str
    nuisance: tuple
    within: str | None
    null_zero_fraction: float
    seconds: float


@dataclass(frozen=True)
class _Job:
    cohort: Cohort
    model: object
    fold: np.ndarray
    fitted: np.ndarray
    resid: np.ndarray
    strata: np.ndarray
    columns: tuple
    baseline_cvpl: float
    designs: list | None
    refits: str = "nested"
    protected: np.ndarray | None = None


def _statistic(job: _Job, features: np.ndarray) -> tuple[float, float]:
    cohort = replace(job.cohort, features=pd.DataFrame(features, columns=list(job.columns)))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # refits on permuted data repeat the observed run's warnings
        if job.designs is not None and job.refits == "inner_folds":
            cvpl = _cvpl_inner_folds(job.model, cohort, job.designs, job.fold, job.protected)
        elif job.designs is not None:
            cvpl = _cvpl_cached(job.model, cohort, job.designs)
        else:
            cvpl = cv_partial_loglik(job.model, cohort, job.fold)
    return cvpl - job.baseline_cvpl, cvpl


def _run_chunk(task) -> list[float]:
    job, seeds = task
    out = []
    for seed in seeds:
        perm = within_permutation(job.strata, np.random.default_rng(seed))
        out.append(_statistic(job, job.fitted + job.resid[perm])[0])
    return out


def added_value_test(
    model,
    baseline,
    cohort: Cohort,
    *,
    permutations: int = 199,
    folds: int = 5,
    random_state=None,
    names: tuple[str, str] = ("combined", "clinical"),
    backend: str = "processes",
    workers: int = 1,
    scheduler=None,
    progress=None,
    refits: str = "nested",
) -> AddedValueTest:
    """Permutation test of the added value of imaging given the clinical model.

    Parameters
    ----------
    model : unfitted model with ``fit(cohort)`` and ``linear_predictor(cohort)``
        The combined model-building process (e.g. :class:`~workbench.models.cox.CombinedCox`);
        it must use ``cohort.features`` and expose ``predictors``.
    baseline : unfitted clinical model (e.g. :class:`~workbench.models.cox.ClinicalCox`)
    cohort : Cohort
    permutations : int
        K; choose K with ``(K + 1) alpha`` an integer (19, 99, 199, 999) for an exact
        level-alpha test.
    folds : int
        Patient-grouped folds of the cross-validated likelihood (reused in every permutation).
    random_state : int or None
    names : (str, str)
        Model and baseline names for the result.
    backend, workers, scheduler, progress
        As for :func:`~workbench.validation.resample.validate`.
    refits : {"nested", "inner_folds"}
        How the signature of each fold of the statistic is made (combined Cox models).
        ``"nested"`` (default): the whole signature, with its own inner cross-validation,
        refitted in every fold. ``"inner_folds"``: one signature fit per (permuted)
        cohort whose penalty choice uses the test's folds; fold ``k``'s signature is
        that choice's fit without fold ``k`` at the shared penalty (about a third of the
        CPU). Its level failed on simulated null cohorts (bench/bench_added_value.py):
        do not use it for inference.

    Returns
    -------
    AddedValueTest

    Notes
    -----
    Missing imaging values are replaced by the column medians of the whole cohort
    before the split into fitted values and residuals, for the observed statistic
    and the permutations alike (the identity permutation reproduces the observed
    data exactly).
    """
    if permutations < 1:
        raise SpecError(f"added-value test: permutations must be at least 1; got {permutations}.")
    if refits not in ("inner_folds", "nested"):
        raise SpecError(f"added-value test: refits {refits!r} is unknown; choose 'inner_folds' or 'nested'.")
    predictors = getattr(model, "predictors", None)
    if predictors is None or not hasattr(model, "linear_predictor"):
        raise SpecError("added-value test: the model needs clinical predictors and a linear predictor "
                        "(a combined Cox model).")
    started = time.time()
    ss = np.random.SeedSequence(random_state)
    fold_ss, perm_ss = ss.spawn(2)
    fold = patient_folds(cohort.ids, cohort.event, folds, random_state=np.random.default_rng(fold_ss))
    X = cohort.features.to_numpy(dtype=float)
    med = np.nanmedian(np.where(np.isfinite(X), X, np.nan), axis=0)
    X = np.where(np.isfinite(X), X, np.where(np.isfinite(med), med, 0.0)[None, :])
    Z, nuisance = nuisance_design(cohort, predictors)
    fitted, resid = residualise(X, Z)
    strata = cohort.batch if cohort.batch is not None else np.zeros(cohort.n, dtype=int)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        base_cvpl = cv_partial_loglik(baseline, cohort, fold)
    lean = _lean(model)
    designs = _fold_designs(lean, cohort, fold)
    job = _Job(cohort, lean, fold, fitted, resid, np.asarray(strata), tuple(cohort.feature_names), base_cvpl,
               designs, refits, None if designs is None else _protected_all(lean, cohort))
    observed, model_cvpl = _statistic(job, X)
    seeds = [int(s.generate_state(1)[0]) for s in perm_ss.spawn(int(permutations))]
    size = max(1, min(10, int(np.ceil(len(seeds) / max(2 * int(workers), 1)))))
    chunks = [seeds[i:i + size] for i in range(0, len(seeds), size)]
    results = run_tasks(_run_chunk, [(job, c) for c in chunks], backend=backend, workers=workers,
                        scheduler=scheduler, progress=progress, weights=[len(c) for c in chunks])
    null = np.asarray([t for r in results for t in r], dtype=float)
    p, se = permutation_p_value(observed, null)
    return AddedValueTest(
        model=names[0], baseline=names[1], statistic=STATISTIC, observed=float(observed), null=null,
        permutations=int(permutations), p_value=p, mc_se=se, folds=int(folds),
        baseline_cvpl=float(base_cvpl), model_cvpl=float(model_cvpl), scheme=SCHEME, nuisance=nuisance,
        within="batch" if cohort.batch is not None else None,
        null_zero_fraction=float(np.mean(np.abs(null) < 1e-12)), seconds=round(time.time() - started, 1),
    )


def run_added_value(spec, models: dict, cohort: Cohort, *, progress=None) -> dict:
    """The study's added-value tests: every combined model against the baseline (workflow hook).

    Runs when ``[added_value] permutations`` is positive and the baseline is a
    clinical-only model; models whose building uses the imaging features and
    exposes a linear predictor and clinical predictors (the combined Cox model)
    are tested.
    """
    av = spec.added_value
    base = spec.models.baseline
    if av.permutations <= 0 or base not in models or hasattr(models[base], "signature"):
        return {}
    v = spec.validation
    out = {}
    for name, m in models.items():
        if name == base or not hasattr(m, "signature") or not hasattr(m, "linear_predictor"):
            continue
        out[name] = added_value_test(
            m, models[base], cohort, permutations=av.permutations, folds=av.folds, random_state=spec.seed,
            names=(name, base), backend=v.backend, workers=v.workers, scheduler=v.scheduler, progress=progress)
    return out


def format_added_value(t: AddedValueTest) -> str:
    """One plain sentence for terminals and logs."""
    return (f"added value of imaging ({t.model} vs {t.baseline}): cross-validated log-likelihood gain "
            f"{t.observed:.1f}; permutation p = {t.p_value:.3g} (Monte Carlo SE {t.mc_se:.3f}, "
            f"{t.permutations} permutations of imaging residuals given clinical terms"
            f"{' within batch' if t.within else ''})")
