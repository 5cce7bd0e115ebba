"""Does a model add to a baseline? Paired differences from the same replicates.

Every difference is computed replicate by replicate from the two models' values
in the SAME resample (both fitted on the same bootstrap sample, or the same
fold), so the shared variability cancels: for bootstrap validation the
optimism-corrected difference is ``(A_m - A_b) - mean((B_m - B_b) - (O_m - O_b))``
and its interval the location-shifted percentile interval of ``B_m - B_b`` (see
:mod:`workbench.validation.resample`). Only replicates in which both models were
fitted count. A difference is model minus baseline; for the integrated Brier
score lower is better, so a negative difference favours the model.

Beside the differences: the likelihood-ratio statistic of nested Cox models
(a test only for prespecified terms; descriptive for a data-built signature, whose
evidence is :mod:`workbench.validation.added_value`), the
category-free NRI and the IDI by component (with the caution that they are not
measures of improvement on their own, Kerr et al. 2014), and decision curves of
both models with treat-all and treat-none.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.stats import chi2

from workbench.errors import SpecError
from workbench.metrics.reclassification import IDI_CAUTION, NRI_CAUTION
from workbench.validation.estimators import difference_estimates
from workbench.validation.results import MetricEstimate, ReplicateMetrics, ValidationResult

__all__ = [
    "ComparisonResult",
    "DecisionComparison",
    "Difference",
    "LikelihoodRatioTest",
    "ReclassificationEstimate",
    "compare_models",
]

LOWER_IS_BETTER = ("ibs", "brier", "ici", "e50", "e90", "null_ibs")

LR_CAUTION = (
    "Apparent (descriptive) statistic only, not a test: the imaging signature was built "
    "on the same patients (feature selection and penalty choice), so a likelihood-ratio "
    "p-value would be far too optimistic and none is given. The evidence on added value "
    "is the added-value permutation test and the validated differences in discrimination, "
    "calibration and net benefit."
)
LR_PRESPECIFIED_CAUTION = (
    "Both models have prespecified terms, so the likelihood-ratio test is valid on the "
    "development data; it is not too optimistic the way a test of a data-built signature is."
)
LR_EXTERNAL_NOTE = (
    "not computed on the external cohort: the development log-likelihoods do not describe "
    "these patients, and a test would reuse the development fit."
)
SIGNATURE_TERM = "imaging_signature"  # the combined model's data-built term (models.cox)


@dataclass(frozen=True)
class Difference:
    """Model minus baseline for one metric.

    Attributes
    ----------
    metric : str
    apparent : float
        Difference of the apparent values.
    optimism : float
        Bootstrap mean of the paired optimism differences (NaN for other methods).
    estimate : float
        Validated difference (optimism-corrected, cross-validated, pooled over
        centres, or on external data, as for the metrics themselves).
    sd, ci_lower, ci_upper : float
        As in :class:`~workbench.validation.resample.MetricEstimate`, for the paired differences.
    n_used : int
        Paired replicates used.
    better : {"higher", "lower"}
        Which direction favours the model.
    estimator, interval, note : str
        As in :class:`~workbench.validation.results.MetricEstimate`.
    """

    metric: str
    apparent: float
    optimism: float
    estimate: float
    sd: float
    ci_lower: float
    ci_upper: float
    n_used: int
    better: str
    estimator: str = ""
    interval: str = ""
    note: str = ""


@dataclass(frozen=True)
class LikelihoodRatioTest:
    """Likelihood-ratio statistic of a baseline Cox model nested in the model.

    ``nested`` is True only when the baseline's terms are a subset of the model's
    (e.g. the combined model adds the signature to the clinical terms); otherwise
    the statistic is NaN and ``note`` says why. ``p_value`` is given only when the
    extra terms are prespecified; for a data-built imaging signature the statistic
    is apparent and descriptive (``p_value`` NaN), and on an external cohort
    nothing is computed.
    """

    statistic: float
    df: int
    p_value: float
    nested: bool
    note: str


@dataclass(frozen=True)
class ReclassificationEstimate:
    """Category-free NRI and IDI at one horizon, by component, with the cautions."""

    horizon: float
    nri: MetricEstimate
    nri_events: MetricEstimate
    nri_nonevents: MetricEstimate
    idi: MetricEstimate
    idi_events: MetricEstimate
    idi_nonevents: MetricEstimate
    nri_caution: str = NRI_CAUTION
    idi_caution: str = IDI_CAUTION


@dataclass(frozen=True)
class DecisionComparison:
    """Decision curves of model and baseline at one horizon.

    ``*_apparent`` are on all rows with the apparent fits; ``*_validated`` are
    corrected like the other metrics (bootstrap: apparent minus mean optimism at
    each threshold; cv: mean over folds; by_centre: event-weighted mean over
    centres; external: the apparent curves).
    """

    horizon: float
    thresholds: np.ndarray
    model_apparent: np.ndarray
    baseline_apparent: np.ndarray
    model_validated: np.ndarray
    baseline_validated: np.ndarray
    treat_all: np.ndarray
    treat_none: np.ndarray


@dataclass(frozen=True)
class ComparisonResult:
    """Everything about ``model`` against ``baseline`` from one validation run."""

    model: str
    baseline: str
    method: str
    horizons: np.ndarray
    differences: dict
    lr_test: LikelihoodRatioTest
    reclassification: tuple
    decision: tuple
    n_paired: int
    conf_level: float
    notes: tuple[str, ...] = ()


# ------------------------------------------------------------------ helpers


def _keys(rm: ReplicateMetrics) -> list[tuple[int, int]]:
    fold = rm.fold if rm.fold is not None else np.zeros_like(rm.replicate)
    return list(zip(rm.replicate.tolist(), fold.tolist(), strict=True))


def _paired(a: ReplicateMetrics, b: ReplicateMetrics) -> ReplicateMetrics:
    """Replicate-by-replicate differences a - b where both models succeeded."""
    ia = {k: i for i, k in enumerate(_keys(a)) if a.ok[i]}
    ib = {k: i for i, k in enumerate(_keys(b)) if b.ok[i]}
    common = [k for k in ia if k in ib]
    ra, rb = [ia[k] for k in common], [ib[k] for k in common]

    def diff(x, y):
        return None if x is None else x[ra] - y[rb]

    return ReplicateMetrics(
        names=a.names, train=diff(a.train, b.train), test=diff(a.test, b.test),
        nb_train=None, nb_test=None, replicate=a.replicate[ra],
        fold=None if a.fold is None else a.fold[ra], ok=np.ones(len(common), dtype=bool),
        events=a.events[ra],
    )


def _negated(e: MetricEstimate) -> MetricEstimate:
    return MetricEstimate(e.name, -e.apparent, -e.optimism, -e.estimate, e.sd, -e.ci_upper,
                          -e.ci_lower, e.n_used, e.estimator, e.interval, e.note)


def _lr_test(result: ValidationResult, model: str, baseline: str) -> LikelihoodRatioTest:
    if result.method == "external":
        return LikelihoodRatioTest(np.nan, 0, np.nan, False, LR_EXTERNAL_NOTE)
    fm, fb = result.fits[model], result.fits[baseline]
    if fm.loglik is None or fb.loglik is None or fm.n_params is None or fb.n_params is None:
        return LikelihoodRatioTest(np.nan, 0, np.nan, False,
                                   "not available: both models must be Cox models exposing loglik_ and n_params_.")
    if fm.terms is None or fb.terms is None or not set(fb.terms) <= set(fm.terms):
        return LikelihoodRatioTest(np.nan, 0, np.nan, False,
                                   f"not nested: the terms of {baseline!r} are not all among those of "
                                   f"{model!r}, so a likelihood-ratio test does not apply.")
    stat = 2.0 * (fm.loglik - fb.loglik)
    df = fm.n_params - fb.n_params
    if df < 0:
        return LikelihoodRatioTest(np.nan, df, np.nan, False,
                                   f"not nested: {model!r} has fewer parameters than {baseline!r}.")
    data_built = SIGNATURE_TERM in set(fm.terms) - set(fb.terms) or bool(fm.selected)
    if df == 0:
        return LikelihoodRatioTest(float(stat), 0, np.nan, True,
                                   "the two models have the same terms; there is nothing to test.")
    if data_built:
        # The extra term was selected and fitted on these patients: the statistic is
        # descriptive only; the added-value permutation test is the evidence.
        return LikelihoodRatioTest(float(stat), int(df), np.nan, True, LR_CAUTION)
    return LikelihoodRatioTest(float(stat), int(df), float(chi2.sf(stat, df)), True, LR_PRESPECIFIED_CAUTION)


def _nb_validated(result: ValidationResult, name: str) -> np.ndarray:
    app = result.apparent[name].net_benefit
    rm = result.replicates[name]
    ok = rm.ok
    if (result.method == "bootstrap" and ok.any() and rm.nb_oob is not None
            and getattr(result, "estimator", {}).get(name, "optimism") != "optimism"):
        return np.nanmean(rm.nb_oob[ok], axis=0)  # out-of-bootstrap net benefit (oob / .632+ runs)
    if result.method == "bootstrap" and ok.any():
        return app - np.nanmean(rm.nb_train[ok] - rm.nb_test[ok], axis=0)
    if result.method == "cv" and ok.any():
        return np.nanmean(rm.nb_test[ok], axis=0)
    if result.method == "by_centre" and ok.any():
        w = rm.events[ok].astype(float)[:, None, None]
        v = rm.nb_test[ok]
        good = np.isfinite(v)
        return np.nansum(np.where(good, v, 0.0) * w, axis=0) / np.sum(good * w, axis=0)
    return app


# ------------------------------------------------------------------ public


def compare_models(result: ValidationResult, model: str, baseline: str) -> ComparisonResult:
    """Compare a model with a baseline from one validation run.

    Parameters
    ----------
    result : ValidationResult
        From :func:`~workbench.validation.resample.validate` or
        :func:`~workbench.validation.resample.validate_external`, with both models.
    model, baseline : str
        Names of the two models (e.g. ``"combined"`` and ``"clinical"``).

    Returns
    -------
    ComparisonResult
        ``differences`` holds every metric of :func:`~workbench.validation.evaluate.metric_names`
        (among them Harrell's and Uno's C, AUC at each horizon, the integrated
        Brier score); ``reclassification`` and ``decision`` one entry per horizon.

    References
    ----------
    .. [1] Harrell FE, Lee KL, Mark DB. Stat Med 1996;15:361-87.
    .. [2] Pencina MJ, D'Agostino RB Sr, Steyerberg EW. Stat Med 2011;30:11-21.
    .. [3] Kerr KF, Wang Z, Janes H, McClelland RL, Psaty BM, Pepe MS. Net
           reclassification indices for evaluating risk prediction instruments: a
           critical review. Epidemiology 2014;25:114-21.
    .. [4] Vickers AJ, Cronin AM, Elkin EB, Gonen M. BMC Med Inform Decis Mak 2008;8:53.
    """
    for nm in (model, baseline):
        if nm not in result.models:
            raise SpecError(f"model {nm!r} is not in this validation result; it holds {list(result.models)}.")
    paired = _paired(result.replicates[model], result.replicates[baseline])
    a_diff = result.apparent[model].vector() - result.apparent[baseline].vector()
    est = difference_estimates(result, model, baseline, paired, a_diff)
    differences = {
        nm: Difference(nm, e.apparent, e.optimism, e.estimate, e.sd, e.ci_lower, e.ci_upper, e.n_used,
                       "lower" if nm.split("@")[0] in LOWER_IS_BETTER else "higher",
                       e.estimator, e.interval, e.note)
        for nm, e in est.items()
    }

    h = result.horizons
    if model == baseline:
        zero = {nm: MetricEstimate(nm, 0.0, 0.0, 0.0, 0.0, np.nan, np.nan, paired.ok.size,
                                   note="interval not computable: a model compared with itself")
                for nm in result.pair_metric_names}
        pair = zero
    elif (model, baseline) in result.pair_estimates:
        pair = result.pair_estimates[(model, baseline)]
    else:
        pair = {nm: _negated(e) for nm, e in result.pair_estimates[(baseline, model)].items()}
    recl = tuple(
        ReclassificationEstimate(
            horizon=float(t),
            **{c: pair[f"{c}@{t:g}"] for c in
               ("nri", "nri_events", "nri_nonevents", "idi", "idi_events", "idi_nonevents")},
        )
        for t in h
    )

    am, ab = result.apparent[model], result.apparent[baseline]
    vm, vb = _nb_validated(result, model), _nb_validated(result, baseline)
    decision = tuple(
        DecisionComparison(
            horizon=float(t), thresholds=am.thresholds, model_apparent=am.net_benefit[j],
            baseline_apparent=ab.net_benefit[j], model_validated=vm[j], baseline_validated=vb[j],
            treat_all=am.treat_all[j], treat_none=np.zeros_like(am.thresholds),
        )
        for j, t in enumerate(h)
    )
    notes = []
    if paired.ok.size < min(result.replicates[model].ok.size, result.replicates[baseline].ok.size):
        notes.append(f"differences use the {paired.ok.size} replicates in which both models were fitted.")
    return ComparisonResult(
        model=model, baseline=baseline, method=result.method, horizons=h, differences=differences,
        lr_test=_lr_test(result, model, baseline), reclassification=recl, decision=decision,
        n_paired=int(paired.ok.size), conf_level=result.conf_level, notes=tuple(notes),
    )
