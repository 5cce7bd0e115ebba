"""Validated estimates of the competing-risks route from its bootstrap replicates.

Every replicate ``b`` refits all models on a bootstrap sample and scores them on the
sample (B_b), on all original rows (O_b) and on the patients not drawn into the sample
(U_b, out-of-bootstrap). From the apparent value A and these, the estimators of the main
engine (:mod:`workbench.validation.estimators_bootstrap`, whose
:func:`~workbench.validation.estimators_bootstrap.bootstrap_estimate` does the arithmetic
here too):

``632plus`` (the route's default)
    Efron & Tibshirani's (1997) .632+ rule with no-information values 0.5 for the AUC
    and, for the Brier score, the mean over all pairs (i, j) of patient i's IPCW loss
    under patient j's predicted incidence, = BS(F = 1) mean_j F_j^2 +
    BS(F = 0) mean_j (1 - F_j)^2; IPA from that. The ICI has none and falls back to ``oob``.
``oob``
    mean_b U_b (Efron 1983's leave-one-out bootstrap, averaged per replicate): each refit
    sees only ~63% of the distinct patients, so it is pessimistic here.
``optimism``
    A - mean_b(B_b - O_b) (Harrell, Lee & Mark 1996): under-corrects after the
    signature's strong feature selection.

Differences (combined minus clinical) are the difference of the two models' estimates
(for ``oob`` and ``optimism`` the mean of the paired per-replicate differences, the same
number). Measured in bench/bench_competing_validation.py (200 cohorts of 300 patients, 12
replicates, truth of the apparent fits from 20,000 uncensored patients; bias with MC SE
0.001-0.003; target |bias| <= 0.01), clinical + signature AUC at 12 / 24 / 36 months:
``632plus`` -0.006 / -0.001 / -0.001, ``oob`` -0.020 / -0.016 / -0.018, ``optimism`` +0.001
/ +0.007 / +0.008; clinical AUC ``632plus`` +0.001 / +0.004 / +0.002; the AUC difference
``632plus`` -0.007 / -0.005 / -0.003; Brier scores ``632plus`` within 0.003 of the truth,
``oob`` +0.004 to +0.010. ``oob`` misses the target; ``632plus`` is the default.

Interval (:data:`INTERVAL_RULE`, :func:`oob_interval`): the corrected resampled t interval
of Nadeau & Bengio (2003), which the main engine uses for cross-validation
(:func:`workbench.validation.intervals.cv_interval`), with the B out-of-bootstrap values
as the B random train / test splits it was written for and n_test / n_train the mean
ratio of out-of-bootstrap to drawn distinct patients (about 0.58), around the estimate
(.632+ or out-of-bootstrap; the .632+ estimate varied no more than the out-of-bootstrap
one across simulated cohorts). Every interval passes
:func:`~workbench.validation.intervals.guard`. Coverage around the .632+ estimate in the
same bench (nominal 0.95, target 0.92-0.98, MC SE 0.010-0.017): AUC clinical 0.965 /
0.950 / 0.955, clinical + signature 0.970 / 0.965 / 0.960, difference 0.935 / 0.970 /
0.980; Brier clinical 0.955 / 0.975 / 0.965, clinical + signature 0.970 / 0.975 / 0.970,
difference 0.940 / 0.965 / 0.975. A second design (48 cohorts of 150 patients, 12
replicates, truth from 10,000; per-cell MC SE 0.02-0.05), every model family and metric
around .632+: cause-specific AUC 0.85-0.98 by model and horizon (clinical 0.854 at 24 and 36
months, difference 0.875 at 12 months: short of the target), Brier 0.90-0.96, IPA 0.90-0.98;
Fine-Gray AUC 0.85-0.98 (difference 0.854-0.875: short), Brier 0.90-0.98, IPA 0.90-0.98;
all-cause Cox AUC 0.92-0.98, Brier 0.92-0.98, IPA 0.94-0.98; ICI 0.85-0.98 (all-cause
clinical 0.854 at 24 months). A third design (96 cohorts of 300 patients, 147-182 cancer deaths, every family and
metric, 12 replicates, truth from 10,000; per-cell MC SE 0.01-0.03): AUC, Brier and IPA of
every family and their differences 0.927-1.000 by model and horizon, the Fine-Gray AUC
included (0.948-0.979, pooled 0.962); the ICI of one model 0.95-1.00 but of the difference
0.875-0.948 (pooled cause-specific 0.906, Fine-Gray 0.917). Fewer deaths from the cancer
(its hazard rate x 0.15; 74 cohorts of 300 with 45-82): one model's AUC, Brier and IPA
0.93-1.00, but the differences' AUC 0.85-0.92 (pooled cause-specific 0.878, MC SE 0.034),
Brier 0.87-0.92, IPA 0.89-0.96, ICI 0.80-0.85. Fewer still (x 0.06; 15 cohorts with 21-35):
difference AUC 0.84-0.87, IPA intervals 3-4 times wider than 2 x 1.96 x SD(error). So the
minimum is about events, not only patients. Hence :data:`INTERVAL_CELLS` (AUC, Brier and
IPA of every family; never the ICI, :data:`WITHHELD` gives the reason),
:data:`INTERVAL_MIN_PATIENTS` (the cause-specific and Fine-Gray AUC from 300 patients, the
rest from 150) and :data:`INTERVAL_MIN_EVENTS` (the AUC from 147 deaths from the cause of
interest, Brier and IPA from 74, all-cause from 94 deaths): no interval below the smallest
design measured in the target. At 150 patients .632+ is pessimistic (pooled bias, MC SE 0.004-0.014): AUC
-0.010 to -0.031, Brier +0.004 to +0.014, IPA -0.017 to -0.070, ICI +0.026 to +0.039 (the
.632+ ICI, with the no-information value above; out-of-bootstrap +0.034 to +0.054, Harrell
-0.009 to -0.017 for the combined model); Harrell's correction came closest there (AUC
within 0.008). IPA intervals
are wide (0.38-0.66 at 150). With more replicates the 1/B term and the t quantile make the
interval narrower, which is intended but not measured.

References
----------
.. [1] Harrell FE, Lee KL, Mark DB. Stat Med 1996;15:361-87.
.. [2] Efron B. J Am Stat Assoc 1983;78:316-31.
.. [3] Efron B, Tibshirani R. J Am Stat Assoc 1997;92:548-60.
.. [4] Nadeau C, Bengio Y. Inference for the generalization error. Machine Learning 2003;52:239-81.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass

import numpy as np

from workbench.competing.cif import aalen_johansen, incidence_at
from workbench.competing.metrics import competing_brier
from workbench.competing.outcome import IncidenceCurves, split_competing
from workbench.errors import SpecError, WorkbenchError
from workbench.validation.estimators_bootstrap import ESTIMATORS, bootstrap_estimate, point632plus
from workbench.validation.intervals import cv_interval, guard

__all__ = ["DEFAULT_ESTIMATOR", "ESTIMATORS", "ESTIMATOR_LABELS", "INTERVAL_CELLS", "INTERVAL_ESTIMATORS", "INTERVAL_MIN_EVENTS",
           "INTERVAL_MIN_PATIENTS", "INTERVAL_METRICS", "INTERVAL_RULE", "NO_INTERVAL", "WITHHELD",
           "ReplicateScores", "ValidatedTable", "estimate_table", "no_information_table", "oob_interval", "small_cohort_reason",
           "withheld_notes", "withheld_reason"]

DEFAULT_ESTIMATOR = "632plus"
ESTIMATOR_LABELS = {
    "632plus": ".632+ bootstrap (Efron & Tibshirani), the refits judged on the patients left out of each replicate",
    "oob": "out-of-bootstrap (each replicate's refits judged only on the patients not drawn into it)",
    "optimism": "bootstrap optimism correction (Harrell)",
}
INTERVAL_RULE = ("corrected resampled t interval (Nadeau & Bengio 2003) of the out-of-bootstrap values: variance "
                 "(1/B + n_out/n_in) times their variance, t on B - 1 df, around the estimate")
INTERVAL_ESTIMATORS = ("632plus", "oob")
"""Estimators :func:`oob_interval` applies to."""
INTERVAL_CELLS: dict[tuple[str, str], tuple[str, ...]] = {
    ("cause", "cause_specific"): ("auc", "brier", "ipa"),
    ("cause", "fine_gray"): ("auc", "brier", "ipa"),
    ("all_cause", "cause_specific"): ("auc", "brier", "ipa"),
}
"""{(target, method): metrics} given an interval in the route's results (with their
combined-minus-clinical differences): those whose coverage bench/bench_competing_validation.py
measured in the target (see the module notes); the bench measures :func:`oob_interval`
whatever this holds."""
INTERVAL_MIN_PATIENTS: dict[tuple[str, str, str], int] = {("cause", "cause_specific", "auc"): 300,
                                                          ("cause", "fine_gray", "auc"): 300}
"""Per (target, method, metric): intervals only for cohorts of at least this many patients, the
smallest design at which the bench measured their coverage in the target; 150 where not listed."""
SMALL_COHORT = ("no interval: in simulation its coverage was in the 0.92-0.98 target with {m} patients, and "
                "short of it or not measured with fewer; this cohort has {n}")
_AUC_EVENTS, _CAUSE_EVENTS, _ALL_EVENTS = 147, 74, 94
INTERVAL_MIN_EVENTS: dict[tuple[str, str, str], int] = {
    **{("cause", meth, "auc"): _AUC_EVENTS for meth in ("cause_specific", "fine_gray")},
    **{("cause", meth, m): _CAUSE_EVENTS for meth in ("cause_specific", "fine_gray") for m in ("brier", "ipa")},
    **{("all_cause", "cause_specific", m): _ALL_EVENTS for m in ("auc", "brier", "ipa")},
}
"""Per (target, method, metric): intervals only for cohorts with at least this many events of the
target (deaths from the cause of interest; any death for ``all_cause``): the fewest in the
bench's smallest design whose coverage was in the target (AUC: 147-182 cancer deaths in 300
patients; Brier and IPA: 74-99 in 150; all-cause: 94-117 deaths in 150). With 45-82 cancer
deaths in 300 patients the differences' AUC and Brier intervals covered 0.85-0.92, with
21-35 the IPA intervals were 3-4 times too wide. No event floor where not listed."""
EVENT_WORDS = {"cause": "events of the cause of interest", "all_cause": "events of any cause"}
"""Words for the events a floor counts: the study names its own outcome (death, recurrence, ...)."""
FEW_EVENTS = ("no interval: in simulation its coverage was in the 0.92-0.98 target with {m} or more {what}, and "
              "short of it, far too wide or not measured with fewer; this cohort has {e}")
INTERVAL_METRICS: tuple[str, ...] = ("auc", "brier", "ipa")
INTERVAL_ARMS = tuple(INTERVAL_CELLS)
NO_INTERVAL = "no interval: not proven by simulation for this metric or model"
_ICI = ("no interval: in simulation the interval of the validated ICI's combined-minus-clinical difference missed "
        "the truth too often (coverage down to 0.88 against 0.95 with 300 patients, to 0.80 with fewer events of "
        "the cause of interest), and with 150 patients the validated ICI overstated the miscalibration by 0.03 to 0.04")
WITHHELD: dict[tuple[str, str, str], str] = {
    ("cause", "cause_specific", "ici"): _ICI, ("cause", "fine_gray", "ici"): _ICI,
    ("all_cause", "cause_specific", "ici"): _ICI,
}
"""{(target, method, metric): the plain-language reason its interval is withheld}, where the
bench measured it and it failed; other cells outside :data:`INTERVAL_CELLS` get :data:`NO_INTERVAL`."""


def withheld_notes(note: dict) -> dict[str, list[tuple]]:
    """{reason: [(target, model, method, metric), ...]} of the cells whose interval was withheld.

    ``note``: the ``interval_note`` / ``note`` of a validated table; a reason counts once per
    cell even when it applies at several horizons.
    """
    out: dict[str, list[tuple]] = {}
    for (target, model, method), block in note.items():
        for m, whys in block.items():
            for why in dict.fromkeys(w for w in whys if w):
                out.setdefault(why, []).append((target, model, method, m))
    return out


def withheld_reason(target: str, method: str, metric: str) -> str:
    """Why the validated ``metric`` of (``target``, ``method``) gets no interval; "" if it gets one."""
    if metric in INTERVAL_CELLS.get((target, method), ()):
        return ""
    return WITHHELD.get((target, method, metric), NO_INTERVAL)


DIFFERENCE = "combined_minus_clinical"


@dataclass(frozen=True)
class ReplicateScores:
    """One replicate's scores: on the bootstrap rows, the original rows, the out-of-bootstrap rows."""

    boot: dict
    orig: dict
    oob: dict | None
    n_in: int
    n_out: int


@dataclass(frozen=True)
class ValidatedTable:
    """Per (target, model, method) and metric, arrays over horizons; ``note``: why an interval is missing."""

    estimator: str
    optimism: dict
    corrected: dict
    lower: dict
    upper: dict
    note: dict


def no_information_table(arms_curves: dict, outcomes: dict, horizons) -> dict:
    """No-information values for .632+: {(target, model, method): {metric: array}} (NaN where undefined)."""
    h = np.asarray(horizons, dtype=float)
    out = {}
    for key, curves in arms_curves.items():
        y = outcomes[key[0]]
        gam = {"auc": np.full(h.size, 0.5), "brier": np.full(h.size, np.nan), "ipa": np.full(h.size, np.nan),
               "ici": np.full(h.size, np.nan)}
        try:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                n = curves.risks.shape[0]
                zero = competing_brier(y, y, IncidenceCurves(h, np.zeros((n, h.size)), curves.cause), h)
                one = competing_brier(y, y, IncidenceCurves(h, np.ones((n, h.size)), curves.cause), h)
                f = np.column_stack([curves.risk_at(t) for t in h])
                b = one.brier * np.mean(f**2, axis=0) + zero.brier * np.mean((1.0 - f) ** 2, axis=0)
                gam["brier"] = b
                time, cause = split_competing(y)
                if np.any(cause == curves.cause):
                    marginal = incidence_at(aalen_johansen(time, cause), h, cause=curves.cause)[0]
                    gam["ici"] = np.mean(np.abs(f - np.asarray(marginal, float)[None, :]), axis=0)
                with np.errstate(divide="ignore", invalid="ignore"):
                    gam["ipa"] = np.where(zero.null_brier > 0, 1.0 - b / zero.null_brier, np.nan)
        except WorkbenchError:
            pass
        out[key] = gam
    return out


def oob_interval(name: str, u: np.ndarray, estimate: float, ratio: float, conf_level: float = 0.95,
                 difference: bool = False) -> tuple[float, float, str]:
    """The out-of-bootstrap estimate's interval from the replicates' values ``u`` (see :data:`INTERVAL_RULE`).

    ``ratio``: mean n_out / n_in of the replicates. Passed through
    :func:`~workbench.validation.intervals.guard`; NaN with a reason where unusable.
    """
    lo, hi, why = guard(name, estimate, *cv_interval(u, estimate, ratio, conf_level), difference=difference)
    if not why and not np.isfinite(lo):
        why = "interval not computable: fewer than 10 replicates with a value"
    return lo, hi, why


def _values(rows, key, m, j, arm):
    return np.array([np.nan if getattr(r, arm) is None else getattr(r, arm)[key][m][j] for r in rows], dtype=float)


def small_cohort_reason(target: str, method: str, metric: str, n_patients: int, events: dict | None) -> str:
    """Why a cohort this size gets no interval for the cell (:data:`INTERVAL_MIN_PATIENTS`,
    :data:`INTERVAL_MIN_EVENTS`); "" if it is large enough. ``events``: {target: events}, None = not checked."""
    least = INTERVAL_MIN_PATIENTS.get((target, method, metric), 150)
    if n_patients < least:
        return SMALL_COHORT.format(n=n_patients, m=least)
    fewest = INTERVAL_MIN_EVENTS.get((target, method, metric))
    if fewest is not None and events is not None and events.get(target, 0) < fewest:
        return FEW_EVENTS.format(m=fewest, what=EVENT_WORDS.get(target, "events"), e=events.get(target, 0))
    return ""


def estimate_table(apparent: dict, rows: list[ReplicateScores], estimator: str = DEFAULT_ESTIMATOR, *,
                   gamma: dict | None = None, conf_level: float = 0.95, events: dict | None = None) -> ValidatedTable:
    """Validated estimates (and, where :data:`INTERVAL_METRICS` allows, intervals) from the replicates.

    ``apparent``: {(target, model, method): {metric: array over horizons}}, differences
    included; ``gamma``: :func:`no_information_table` (``632plus`` only); ``events``:
    {target: events of the target in the cohort} for :data:`INTERVAL_MIN_EVENTS` (the route
    always gives it; None leaves the event floor unchecked).
    """
    if estimator not in ESTIMATORS:
        raise SpecError(f"unknown estimator {estimator!r}; use one of {', '.join(ESTIMATORS)}.")
    ratio = float(np.mean([r.n_out / r.n_in for r in rows])) if rows else np.nan
    n_patients = rows[0].n_in + rows[0].n_out if rows else 0
    optimism, corrected, lower, upper, note = {}, {}, {}, {}, {}
    for key, app in apparent.items():
        diff = key[1] == DIFFERENCE
        opt, cor, lo_d, hi_d, why_d = {}, {}, {}, {}, {}
        for m, a in app.items():
            k = a.size
            est, lo, hi = np.full(k, np.nan), np.full(k, np.nan), np.full(k, np.nan)
            why = [""] * k
            for j in range(k):
                if diff:
                    # the difference of the two models' estimates (the .632+ weights are not linear)
                    base, comb = (key[0], "clinical", key[2]), (key[0], "combined", key[2])
                    est[j] = corrected[comb][m][j] - corrected[base][m][j] if estimator == "632plus" else np.nan
                if not diff or estimator != "632plus":
                    g_arr = (gamma or {}).get(key, {}).get(m)
                    g = np.nan if g_arr is None else float(g_arr[j])
                    u = _values(rows, key, m, j, "oob")
                    if m == "ici" and estimator == "632plus":
                        # the main engine has no no-information ICI; the .632+ rule is the same for any loss
                        uu = u[np.isfinite(u)]
                        est[j] = np.nan if not uu.size else (point632plus(float(a[j]), float(np.mean(uu)), g, False)
                                                             if np.isfinite(g) else float(np.mean(uu)))
                    else:
                        est[j] = bootstrap_estimate(estimator, m, float(a[j]), _values(rows, key, m, j, "boot"),
                                                    _values(rows, key, m, j, "orig"), u, g, conf_level)[0]
                reason = withheld_reason(key[0], key[2], m) or small_cohort_reason(key[0], key[2], m, n_patients,
                                                                                    events)
                if estimator in INTERVAL_ESTIMATORS and not reason:
                    lo[j], hi[j], why[j] = oob_interval(m, _values(rows, key, m, j, "oob"), est[j], ratio,
                                                        conf_level, diff)
                else:
                    why[j] = reason if estimator in INTERVAL_ESTIMATORS else "no interval for this estimator"
            opt[m], cor[m], lo_d[m], hi_d[m], why_d[m] = a - est, est, lo, hi, why
        optimism[key], corrected[key], lower[key], upper[key], note[key] = opt, cor, lo_d, hi_d, why_d
    return ValidatedTable(estimator, optimism, corrected, lower, upper, note)
