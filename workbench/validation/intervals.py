"""Interval helpers shared by every estimator: percentiles, bias correction, range guards.

Every interval the workbench reports passes :func:`guard`: it is clipped to the
range the metric can take (C and AUC in [0, 1], ICI/E50/E90 and Brier scores
>= 0, differences of C in [-1, 1], ...), and it is withdrawn (NaN, with a note)
rather than reported when it would have zero width or exclude its own estimate.

Audit: the intervals of the validation engine in results.json, and what proves each
(nominal 0.95, target 0.92-0.98, coverage of the expected / conditional estimand;
numbers and MC SEs in the functions' docstrings and the bench scripts):

* bootstrap, ``interval = "two-stage"`` (the study default; optimism estimator for Cox
  models), :func:`two_stage_interval` for estimates, differences, NRI/IDI and both
  internal bands - Harrell's C and its difference: bench/bench_intervals.py (0.960 / 0.970,
  0.955 / 0.955, 200 cohorts); every other discrimination and Brier-score measure, the mean
  AUC, the differences, NRI/IDI with components, the AUC band (differences at the horizons)
  and the net-benefit band: bench/bench_cv_metrics.py ``--method bootstrap`` (see
  :func:`two_stage_interval`; only 75 cohorts). Withheld: the IDI among non-events
  (:data:`TWO_STAGE_WITHHELD_DIFFERENCE`); one model's calibration slope and O/E
  (:data:`TWO_STAGE_WITHHELD`). ICI, E50, E90 and the calibration differences: shown (100 cohorts,
  see :func:`two_stage_interval`; the ICI, E50 and E90 cover the expected calibration, less often
  the cohort's own model's). Not benchmarked under the bootstrap: null IBS; the out-of-bootstrap
  and .632+ estimators (forests) with the two-stage interval.
* bootstrap, ``interval = "shifted-percentile"`` (non-default, exploratory): measured short
  (about 0.87 for C, bench/bench_intervals.py); the methods text says so. Not withheld.
* cross-validation, :func:`cv_interval`: C and its difference bench/bench_cv_intervals.py;
  every other measure, the NRI/IDI components and both bands bench/bench_cv_metrics.py.
  Withheld with the reason as the estimate's note (:data:`CV_WITHHELD`,
  :data:`CV_WITHHELD_DIFFERENCE`, :data:`CV_WITHHELD_BANDS`): ICI, E50, E90, IBS, null IBS,
  calibration slope, O/E; differences of ICI, E50, E90, slope; the IDI; the net-benefit band.
* external validation, :func:`resample_interval` / :func:`resample_band`:
  bench/bench_external_intervals.py (C, Uno's C, mean AUC, AUC, Brier, IPA, O/E, slope, ICI
  at one horizon 0.930-0.985; C and Brier differences 0.970 and 0.930) and
  bench/bench_difference_bands.py (AUC(t) band 0.947, net-benefit band 0.959). Not
  benchmarked externally: E50, E90, IBS, null IBS, integrated IPA, the differences of
  measures other than C and Brier, NRI/IDI and components.
* leave-one-centre-out: the pooled estimates, differences and the net-benefit band carry no
  interval (the note says why); the per-centre intervals (by_group) use
  :func:`resample_interval` on fixed predictions (the external rule); the random-effects
  pooled C and its prediction interval: bench/bench_meta_coverage.py and
  bench/bench_meta_pi_variants.py (pooled O/E, slope, Brier not benchmarked).
"""

from __future__ import annotations

import numpy as np
from scipy.stats import norm
from scipy.stats import t as t_dist

_UNIT = ("harrell_c", "uno_c", "mean_auc", "auc", "brier", "ibs", "null_ibs", "ici", "e50", "e90")
_AT_MOST_ONE = ("ipa", "ipa_integrated")
_NON_NEGATIVE = ("oe_ratio",)


def metric_range(name: str, difference: bool = False) -> tuple[float, float]:
    """Values a metric (or, with ``difference``, a difference of it) can take."""
    base = name.split("@")[0]
    if base in ("nri", "nri_events", "nri_nonevents"):
        return -2.0, 2.0
    if base in ("idi", "idi_events", "idi_nonevents"):
        return -1.0, 1.0
    if difference:
        return (-1.0, 1.0) if base in _UNIT else (-np.inf, np.inf)
    if base in _UNIT:
        return 0.0, 1.0
    if base in _AT_MOST_ONE:
        return -np.inf, 1.0
    if base in _NON_NEGATIVE:
        return 0.0, np.inf
    return -np.inf, np.inf


def percentiles(v: np.ndarray, conf_level: float) -> tuple[float, float]:
    """Plain percentile interval of ``v`` (NaN with fewer than two values)."""
    v = v[np.isfinite(v)]
    if v.size < 2:
        return np.nan, np.nan
    a = (1.0 - conf_level) / 2.0
    lo, hi = np.quantile(v, [a, 1.0 - a])
    return float(lo), float(hi)


def bias_corrected_percentiles(v: np.ndarray, estimate: float, conf_level: float) -> tuple[float, float]:
    """Bias-corrected (BC) percentile interval of bootstrap estimates ``v`` around ``estimate``.

    ``z0 = Phi^-1(share of v below the estimate)`` (ties count half) and the limits are the
    ``Phi(2 z0 -+ z)`` quantiles of ``v`` (Efron 1981; Efron & Tibshirani 1993, ch. 14).
    The correction matters here because estimates computed inside bootstrap samples
    (whose patients are partly duplicated) are shifted against the estimate from the
    data. NaN with fewer than 10 finite values or when the estimate lies outside them.

    References
    ----------
    .. [1] Efron B. Nonparametric standard errors and confidence intervals. Can J
           Stat 1981;9:139-58.
    .. [2] Efron B, Tibshirani RJ. An Introduction to the Bootstrap. Chapman & Hall, 1993.
    """
    v = v[np.isfinite(v)]
    if v.size < 10 or not np.isfinite(estimate):
        return np.nan, np.nan
    p0 = (np.sum(v < estimate) + 0.5 * np.sum(v == estimate)) / v.size
    if not 0.0 < p0 < 1.0:
        return np.nan, np.nan
    z0, z = norm.ppf(p0), norm.ppf(0.5 + conf_level / 2.0)
    lo, hi = np.quantile(v, norm.cdf([2 * z0 - z, 2 * z0 + z]))
    return float(lo), float(hi)


def bias_corrected_normal(v: np.ndarray, estimate: float, conf_level: float) -> tuple[float, float]:
    """Bias-corrected normal interval from B bootstrap estimates ``v``, allowing for a small B.

    ``2 * estimate - mean(v) -+ t_{B-1} * sd(v) * sqrt(1 + 1/B)``: the estimate, shifted
    back by the bootstrap estimate of its bias (``mean(v) - estimate``: estimates computed
    inside bootstrap samples, whose patients are partly duplicated, are shifted against
    the estimate from the data), plus or minus a bootstrap standard error (Efron &
    Tibshirani 1993, ch. 6 and 10). The t quantile on B - 1 df and the factor
    ``sqrt(1 + 1/B)`` carry the Monte Carlo error of the standard error and of the bias
    from only B samples. A percentile interval needs about a thousand samples for its
    tails (Efron & Tibshirani 1993, ch. 19); with the 20 to 200 outer samples a two-stage
    bootstrap can afford, its expected coverage falls short of nominal even when the
    bootstrap distribution is right (about 0.89 at B = 30, 0.93 at B = 100 for a
    nominal 0.95 - the coverage of the interval between two order statistics of B
    exchangeable draws), which bench/bench_intervals.py showed. NaN with fewer than 10
    finite values.

    References
    ----------
    .. [1] Efron B, Tibshirani RJ. An Introduction to the Bootstrap. Chapman & Hall, 1993.
    """
    v = v[np.isfinite(v)]
    b = v.size
    if b < 10 or not np.isfinite(estimate):
        return np.nan, np.nan
    centre = 2.0 * estimate - float(np.mean(v))
    half = float(t_dist.ppf(0.5 + conf_level / 2.0, b - 1)) * float(np.std(v, ddof=1)) * np.sqrt(1.0 + 1.0 / b)
    return centre - half, centre + half


TWO_STAGE_RULE = "bias-corrected normal interval (bootstrap standard error of the outer estimates, t on B - 1 df)"
"""How :func:`two_stage_interval` forms the interval (for texts)."""


def two_stage_interval(v: np.ndarray, estimate: float, conf_level: float) -> tuple[float, float]:
    """The interval of a two-stage bootstrap from the outer-sample estimates ``v``.

    The bias-corrected normal interval (:func:`bias_corrected_normal`), for the bootstrap
    estimators and cross-validation alike. Measured in bench/bench_intervals.py (target
    0.92-0.98 for a nominal 0.95), the bias-corrected percentile interval cut the tails
    short with 20-30 outer samples (bootstrap C 0.85-0.93, C difference 0.87-0.91,
    cross-validated C 0.845-0.95). The normal interval: bootstrap C 0.935-0.98, C
    difference 0.95-0.965, cross-validated C 0.955-0.97; for a cross-validated C
    difference it is conservative (0.985-1.0): one k-fold split per outer sample of
    duplicated patients makes the outer estimates noisier than the estimate itself.

    Tried and not adopted: taking the Monte Carlo noise of the few inner replicates out
    of the variance of ``v`` (measured on groups of the data's own replicates shaped like
    one outer estimate). Over 200 cohorts of 120 patients (30 outer x 2 inner; cv 10
    repeats) it made the bootstrap intervals under-cover - C 0.910 / 0.935 (conditional /
    expected estimand), C difference 0.920 / 0.890, against 0.970 / 0.960 and 0.955 /
    0.955 without it - and barely moved the cross-validated difference (0.990 / 0.995
    against 0.995 / 1.000): the spread of the outer estimates is not sampling variance
    plus a separable noise term.

    Also tried, outside the engine, for cross-validation: an outer stage of half-samples
    without replacement (n/2 distinct patients, no duplicates; one 5-fold split each),
    over 60 cohorts of 120 patients with 20 half-samples: the half-sample SD of the C
    difference was 0.028 against 0.015 across cohorts (C: 0.046 against 0.031), the same
    over-dispersion as the bootstrap outer stage, so duplicated patients are not the cause;
    the spread of a refitted model's CV estimate at a smaller training size is. The
    engine therefore gives cross-validation its own interval, :func:`cv_interval`, with no
    outer stage; this rule stays for the bootstrap estimators (and for cross-validation
    only with ``validate(..., cv_interval="two-stage")``).

    Every other measure under the bootstrap (``bench_cv_metrics.py --method bootstrap --horizons
    1,2,3 --components --band --no-calibration``: optimism estimator, 20 replicates, 20 outer x 2
    inner, n = 120; only 75 cohorts, seeds 0-49 and 100-124, on a heavily loaded machine, so MC SE
    0.013-0.039; expected / conditional estimand): Harrell's C 1.000 / 1.000 (75 of 75; 0.960 /
    0.970 over 200 cohorts above), Uno's C 0.960 / 0.960, AUC at 1, 2, 3 0.960 / 0.947, 0.920 /
    0.920, 0.960 / 0.960, mean AUC 0.960 / 0.960, Brier@2 0.947 / 0.933, IPA@2 0.933 / 0.933, IBS
    0.960 / 0.973, integrated IPA 0.973 / 0.960; differences: C 0.987 / 0.987, Uno's C 0.987 /
    0.973, AUC at 1, 2, 3 (the internal AUC band) 1.000 / 1.000, 0.960 / 0.973, 0.973 / 0.973, mean
    AUC 1.000 / 0.987, Brier 0.960 / 0.973, IPA 0.973 / 0.973, IBS 0.960 / 0.960, integrated IPA
    0.973 / 0.960; NRI 0.947 / 0.947, NRI events 0.947 / 0.960, NRI non-events 0.987 / 0.973, IDI
    0.907 / 1.000, IDI events 0.920 / 0.973, IDI non-events 0.867 / 0.947 (MC SE 0.039; withheld,
    :data:`TWO_STAGE_WITHHELD_DIFFERENCE`); the internal net-benefit band (11 thresholds 0.10-0.60
    at horizon 2) mean pointwise 0.932 / 0.925, worst point 0.920 / 0.893 (MC SE 0.03). Before
    this run NRI and IDI took the shifted-percentile interval even in a two-stage run (25 cohorts:
    0.840-0.960, IDI non-events 0.840 / 0.840); they now take this rule over outer-sample pair
    estimates (:func:`.two_stage.outer_pair_estimates`).

    Calibration under the bootstrap (``bench_cv_metrics.py --method bootstrap``, calibration on,
    one horizon, 100 cohorts of n = 120, same settings; MC SE 0.014-0.038; expected / conditional):
    ICI 0.960 / 0.870, E50 0.950 / 0.830, E90 0.940 / 0.870 (shown: the interval describes the
    expected performance, as the methods text says; the cohort's own model's calibration is missed
    more often), calibration slope 1.000 / 0.890 and O/E 1.000 / 0.830 (withheld,
    :data:`TWO_STAGE_WITHHELD`: too wide for one estimand and too narrow for the other);
    differences: ICI 0.970 / 0.910, E50 0.980 / 0.910, E90 0.960 / 0.910, calibration slope
    0.980 / 0.940 (shown). Not measured under the
    bootstrap: null IBS; the out-of-bootstrap and .632+ estimators.
    """
    return bias_corrected_normal(v, estimate, conf_level)


CV_RULE = ("corrected resampled t interval (Nadeau & Bengio 2003): variance (1/J + n_test/n_train) times the "
           "variance of the J = folds x repeats held-out fold values, t on J - 1 df")
"""How :func:`cv_interval` forms the interval of repeated k-fold cross-validation (for texts)."""

CV_MIN_FOLD_VALUES = 10
"""Fewest held-out fold values (folds x repeats) :func:`cv_interval` forms an interval from."""


def cv_interval(v: np.ndarray, estimate: float, test_train_ratio: float, conf_level: float) -> tuple[float, float]:
    """Interval of a repeated k-fold cross-validated estimate from its J held-out fold values ``v``.

    ``estimate -+ t_{J-1} * sqrt((1/J + n_test/n_train) * s^2)``, ``s^2`` the variance of
    the J = k x r fold values (of a metric, or of the paired per-fold difference of two
    models): the corrected resampled t statistic of Nadeau & Bengio (2003) in the
    repeated k-fold form of Bouckaert & Frank (2004), ``n_test/n_train = 1/(k - 1)``.
    The fold values share training patients, so ``s^2 / J`` (the naive variance) is far
    too small; the ``n_test/n_train`` term stands for their correlation. No outer
    resampling is needed, so the interval costs nothing beyond the estimate.

    Measured in bench/bench_cv_intervals.py (nominal 0.95, target 0.92-0.98; small Cox
    models x1 + x2 vs x1 + x2 + x3, 5-fold x 10 repeats; conditional / expected estimand):
    200 cohorts of n = 120, C 0.935 / 0.945, C difference 0.980 / 0.965 (MC SE 0.010-0.017;
    mean reported SE 0.019 against an SD of the difference of 0.015-0.017); 200 cohorts of
    n = 300, C 0.950 / 0.945, C difference 0.985 / 0.985 (MC SE 0.009-0.016; SE 0.0103
    against SD 0.009-0.010) - the difference one MC SE above the upper end; n = 120 with
    5-fold x 3 repeats (J = 15), C 0.955 / 0.950, C difference 0.990 / 0.975 (MC SE
    0.007-0.015). So the difference interval is still somewhat conservative, far less so
    than before. On 60 of the n = 120 cohorts the two-stage interval it replaced
    (20 outer samples) covered 1.000 for both, with widths 0.188 and 0.124 against 0.145
    and 0.079, at 2.9 times the CPU time. The same fold values without the n_test/n_train
    term cover 0.40-0.54. C difference pinned down with 400 cohorts (same design, expected /
    conditional estimand): n = 120, 0.970 / 0.988 (MC SE 0.009 / 0.006; SE 0.0187 against an
    SD of 0.0146); n = 300, 0.975 / 0.983 (MC SE 0.008 / 0.007; SE 0.0104 against 0.0090):
    inside the target for the expected performance the interval describes, about one MC SE
    above it for the conditional one (mildly conservative); C 0.940 / 0.940 and 0.960 / 0.963.

    Every other metric, bench/bench_cv_metrics.py (200 cohorts of n = 120, horizon 2, 5-fold x
    10 repeats; coverage for the expected / conditional estimand, MC SE 0.007-0.02). The rule
    targets the expected performance of the modelling process (Bates, Hastie & Tibshirani,
    JASA 2024: cross-validation estimates the expected, not the conditional, error), which
    the report states. Shown: Uno's C 0.940 / 0.935, AUC 0.915 / 0.915 (one MC SE below the
    lower end), Brier 0.950 / 0.950, IPA 0.925 / 0.920, integrated IPA 0.945 / 0.945;
    differences: Uno's C 0.970 / 0.985, AUC 0.975 / 0.990, Brier 0.925 / 0.970, IPA 0.920 /
    0.965, integrated Brier 0.925 / 0.945, integrated IPA 0.920 / 0.945, NRI 0.960 / 0.960.
    Withheld (:data:`CV_WITHHELD`, :data:`CV_WITHHELD_DIFFERENCE`, with the reason as the
    estimate's note): ICI, E50, E90 (fold values biased upward by +0.067, +0.059, +0.127 against
    true values of about 0.02-0.05; coverage 0.03-0.59); integrated Brier score (bias +0.0065,
    coverage 0.900 / 0.895: each fold integrates from its own first follow-up time, about 0.13
    here against 0.02 for the cohort; null IBS by the same mechanism, not measured separately);
    calibration slope (1.000 / 0.995, reported SE 3.7 / 1.4 times the SD, fold-level bias
    +0.09) and observed/expected ratio (1.000 / 0.955, SE 3.9 / 1.0 times the SD): too wide;
    differences of ICI, E50, E90, calibration slope (1.000 / 0.985-1.000); IDI (0.850 / 0.940).

    Horizons 1, 2, 3 (``bench_cv_metrics.py --horizons 1,2,3 --components --band --no-calibration``,
    225 cohorts of n = 120, 5-fold x 10, expected / conditional, MC SE 0.004-0.019; two processes,
    ``--first 0`` (150 cohorts) and ``--first 200`` (75), reported with ``--combine``): shown - mean
    AUC 0.947 / 0.947, its difference 0.964 / 0.996; AUC differences at 1, 2, 3 (the internal AUC
    difference band of difference_bands.py) 0.982 / 0.991, 0.978 / 0.991, 0.987 / 0.996 (mildly
    conservative, SE 1.1-1.3 times the SD; kept, as for the C difference); NRI 0.969 / 0.982, NRI
    events 0.987 / 0.978, NRI non-events 0.987 / 0.978 (SE 0.174 against an SD of 0.133 / 0.144:
    conservative); IDI events 0.924 / 0.991, IDI non-events 0.907 / 0.973 (at the lower end, within
    about one MC SE; the components keep their interval while the IDI, 0.840 / 0.973 in this run,
    stays withheld); AUC@2 0.938 / 0.938 (the 0.915 of the 200-cohort run above was one MC SE low;
    calibration off here, the AUC is the same); Uno's C, Brier, IPA and their differences as above.
    Withheld (:data:`CV_WITHHELD_BANDS`): the net-benefit difference band (pointwise, 11 thresholds
    0.10-0.60 at horizon 2): the corrected band covered 0.997 on average, worst point 0.991, its SE
    1.2-1.6 times the SD of estimate - truth (e.g. 0.0320 against 0.0232 at threshold 0.40). IBS with
    horizons to 3: rule coverage 0.978 / 0.969 but still biased (+0.0075, MC SE 0.0010), so it stays
    withheld. NaN with fewer than
    :data:`CV_MIN_FOLD_VALUES` finite fold values.

    References
    ----------
    .. [1] Nadeau C, Bengio Y. Inference for the generalization error. Machine
           Learning 2003;52:239-81.
    .. [2] Bouckaert RR, Frank E. Evaluating the replicability of significance tests
           for comparing learning algorithms. PAKDD 2004, LNAI 3056:3-12.
    """
    v = np.asarray(v, dtype=float)
    v = v[np.isfinite(v)]
    j = v.size
    if j < CV_MIN_FOLD_VALUES or not np.isfinite(estimate) or not np.isfinite(test_train_ratio):
        return np.nan, np.nan
    var = (1.0 / j + float(test_train_ratio)) * float(np.var(v, ddof=1))
    half = float(t_dist.ppf(0.5 + conf_level / 2.0, j - 1)) * np.sqrt(var)
    return estimate - half, estimate + half


_CV_CALIBRATION_ERROR = (
    "no interval under cross-validation: the calibration error measured on a held-out fold of about n/k "
    "patients is biased upward (a smoothed calibration curve fitted to few patients strays from the diagonal "
    "by noise alone), so the cross-validated ICI, E50 and E90 overstate the calibration error and an interval "
    "around them would not cover it")
_CV_TOO_WIDE = (
    "no interval under cross-validation: this measure fitted or counted on a held-out fold of about n/k "
    "patients is so unstable that the spread of the fold values far overstates the uncertainty of their "
    "mean; the corrected interval would be much too wide (simulation: coverage 1.00 of the expected value "
    "for a nominal 0.95)")
_CV_IBS = (
    "no interval under cross-validation: each held-out fold integrates the Brier score from its own first "
    "follow-up time, later than the whole cohort's, so the cross-validated integrated Brier score is biased "
    "upward and an interval around it would fall short (the IPA, integrated or at a horizon, keeps its interval)")
_CV_IDI = (
    "no interval under cross-validation: in simulation the corrected interval of the cross-validated IDI "
    "fell short of the expected IDI of the modelling process (its two components, events and non-events, "
    "keep their intervals)")

CV_WITHHELD = {"ici": _CV_CALIBRATION_ERROR, "e50": _CV_CALIBRATION_ERROR, "e90": _CV_CALIBRATION_ERROR,
               "ibs": _CV_IBS, "null_ibs": _CV_IBS, "cal_slope": _CV_TOO_WIDE, "oe_ratio": _CV_TOO_WIDE}
"""Metric families whose cross-validated interval is withheld, with the reason (:func:`cv_withheld`)."""

CV_WITHHELD_DIFFERENCE = {"ici": _CV_TOO_WIDE, "e50": _CV_TOO_WIDE, "e90": _CV_TOO_WIDE,
                          "cal_slope": _CV_TOO_WIDE, "idi": _CV_IDI}
"""Metric families whose cross-validated model-minus-baseline difference has its interval withheld."""


_CV_NB_BAND = (
    "no band under cross-validation: the net benefit counted on a held-out fold of about n/k patients is so "
    "unstable that the spread of the per-fold differences far overstates the uncertainty of their mean; the "
    "corrected band would be too wide (simulation: pointwise coverage 0.99-1.00 of the expected difference "
    "at every threshold for a nominal 0.95)")

CV_WITHHELD_BANDS = {"net_benefit": _CV_NB_BAND}
"""Difference curves (:mod:`.difference_bands`) whose cross-validated band is withheld, with the reason.

Measured in bench/bench_cv_metrics.py (``--band``; 225 cohorts of n = 120, 5-fold x 10): the corrected
band's pointwise coverage 0.997 on average over 11 thresholds (0.991-1.00 each, MC SE 0.004-0.006), its SE
1.2-1.6 times the SD of estimate - truth. The AUC band under cv is the AUC differences at the horizons,
which keep their interval (:func:`cv_interval`)."""


def cv_withheld(name: str, difference: bool = False) -> str:
    """Why the corrected resampled t interval of a cross-validated metric is not shown ("" if it is).

    Measured in bench/bench_cv_metrics.py; see :func:`cv_interval` for the coverage of every metric.
    """
    base = name.split("@")[0]
    return (CV_WITHHELD_DIFFERENCE if difference else CV_WITHHELD).get(base, "")


_TWO_STAGE_IDI_NONEVENTS = (
    "no interval under the two-stage bootstrap: in simulation its interval for the IDI among non-events "
    "fell short of the expected value of the modelling process (coverage about 0.87 for a nominal 0.95)")

_TWO_STAGE_SLOPE_OE = (
    "no interval under the two-stage bootstrap: in simulation this interval was too wide for the expected "
    "calibration of the modelling process (coverage 1.00) and too narrow for the calibration of the model "
    "fitted on the cohort (0.83-0.89), for a nominal 0.95 (bench/bench_cv_metrics.py --method bootstrap); "
    "the difference between two models keeps its interval")

TWO_STAGE_WITHHELD = {"cal_slope": _TWO_STAGE_SLOPE_OE, "oe_ratio": _TWO_STAGE_SLOPE_OE}
"""One model's measures whose two-stage bootstrap interval is withheld, with the reason (see
:func:`two_stage_interval`)."""

TWO_STAGE_WITHHELD_DIFFERENCE = {"idi_nonevents": _TWO_STAGE_IDI_NONEVENTS}
"""Model-against-baseline measures whose two-stage bootstrap interval is withheld, with the reason.

Measured in ``bench/bench_cv_metrics.py --method bootstrap`` (see :func:`two_stage_interval`)."""


def two_stage_withheld(name: str, difference: bool = False) -> str:
    """Why the two-stage bootstrap interval of a measure is not shown ("" if it is)."""
    return (TWO_STAGE_WITHHELD_DIFFERENCE if difference else TWO_STAGE_WITHHELD).get(name.split("@")[0], "")


RESAMPLE_RULE = ("normal interval around the estimate (t on B - 1 df times the standard deviation of the "
                 "B resampled values, widened by sqrt(1 + 1/B))")
"""How :func:`resample_interval` forms the interval (for texts)."""


def resample_interval(v: np.ndarray, estimate: float, conf_level: float) -> tuple[float, float]:
    """Interval of a statistic of fixed predictions from its values ``v`` in B resamples of the patients.

    ``estimate -+ t_{B-1} * sd(v) * sqrt(1 + 1/B)``: for external validation, per-centre
    blocks and the external difference bands (predictions fixed, so the statistic is a
    plain plug-in estimate without refitting bias; no bias correction). Measured in
    bench/bench_external_intervals.py (200 external cohorts of 200 patients, B = 50;
    target 0.92-0.98) the percentile interval of the same resamples fell short (AUC,
    IPA, calibration slope, ICI and the Brier difference 0.795-0.92), this one
    covered 0.93-0.985; the pointwise bands of bench/bench_difference_bands.py likewise
    (200 cohorts, B = 100: percentile AUC(t) 0.924, net benefit 0.894; this rule 0.947
    and 0.959). NaN with fewer than 10 finite values.
    """
    v = np.asarray(v, dtype=float)
    v = v[np.isfinite(v)]
    b = v.size
    if b < 10 or not np.isfinite(estimate):
        return np.nan, np.nan
    half = float(t_dist.ppf(0.5 + conf_level / 2.0, b - 1)) * float(np.std(v, ddof=1)) * np.sqrt(1.0 + 1.0 / b)
    return estimate - half, estimate + half


def resample_band(d: np.ndarray, estimate: np.ndarray, conf_level: float) -> tuple[np.ndarray, np.ndarray]:
    """Pointwise :func:`resample_interval` over the columns of ``d`` (rows: resamples)."""
    d = np.asarray(d, dtype=float).reshape(np.shape(d)[0], -1)
    est = np.asarray(estimate, dtype=float).reshape(-1)
    lo, hi = np.full(d.shape[1], np.nan), np.full(d.shape[1], np.nan)
    for j in range(d.shape[1]):
        lo[j], hi[j] = resample_interval(d[:, j], est[j], conf_level)
    return lo, hi


def guard(name: str, estimate: float, lo: float, hi: float, difference: bool = False) -> tuple[float, float, str]:
    """Clip an interval to the metric's range; withdraw it (NaN + reason) if it is unusable."""
    if not (np.isfinite(lo) and np.isfinite(hi)):
        return np.nan, np.nan, ""
    a, b = metric_range(name, difference)
    lo, hi = float(np.clip(lo, a, b)), float(np.clip(hi, a, b))
    tiny = 1e-12 * max(1.0, abs(estimate) if np.isfinite(estimate) else 1.0)
    if hi - lo <= tiny:
        return np.nan, np.nan, "interval not computable: the resampled values do not vary"
    if np.isfinite(estimate) and not lo - tiny <= estimate <= hi + tiny:
        return np.nan, np.nan, "interval not reported: it would exclude its own estimate"
    return lo, hi, ""
