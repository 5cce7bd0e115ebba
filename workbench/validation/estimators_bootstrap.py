"""Bootstrap estimators of validated performance: optimism, out-of-bootstrap and .632+.

Each bootstrap replicate b refits the whole modelling process on a sample of n
rows drawn with replacement and evaluates the refit on three sets of rows:
the sample itself (B_b), all original rows (O_b), and the rows of the patients
NOT drawn into the sample (U_b, out-of-bootstrap; grouped by patient id, so
no copy of an evaluated patient was trained on). With A the apparent value
(fit and evaluate on all rows):

``optimism``
    A - mean_b(B_b - O_b) (Harrell, Lee & Mark 1996). Valid for smooth models
    whose bootstrap refits fit the sample about as well as the full fit fits the
    data; it fails for models that interpolate their training rows (random
    forests): O_b is scored on rows ~63% of which the refit has seen.
``oob``
    mean_b U_b: every refit is judged only on patients it never saw (Efron 1983's
    leave-one-out bootstrap, here averaged per replicate because C and AUC are not
    sums over patients). Each refit sees only ~63% of the distinct patients, so
    for models whose performance still improves with more data the estimate is
    pessimistic.
``632plus``
    Efron & Tibshirani's (1997) .632+ rule, which weighs the apparent and the
    out-of-bootstrap value according to the relative overfitting rate. Written
    for a loss L (here L = -metric for measures where higher is better), with
    apparent loss err, out-of-bootstrap loss Err1 and no-information loss gamma:
    Err1' = min(Err1, gamma); R' = (Err1' - err) / (gamma - err) when
    Err1' > err and gamma > err, else 0; w = 0.632 / (1 - 0.368 R');
    Err.632+ = (1 - w) err + w Err1'. gamma is the loss when predictions and
    outcomes are paired at random: 0.5 for C and AUC; for the Brier score at t,
    mean over all pairs (i, j) of patient i's IPCW loss under patient j's
    prediction, = Ba(t) mean_j S_j(t)^2 + Bb(t) mean_j (1 - S_j(t))^2 where Ba and
    Bb are the IPCW Brier scores of the constant predictions S = 1 and S = 0.
    Measures without a no-information value (calibration, O/E, NRI/IDI) fall
    back to the out-of-bootstrap estimate and say so in ``estimator``.
    For a forest (apparent C near 1) the rule still lends the apparent value
    weight: bench/bench_forest_validation.py found it about 0.03 above the true C,
    the out-of-bootstrap estimate within 0.01, which is why "auto" uses ``oob``.

References
----------
.. [1] Harrell FE, Lee KL, Mark DB. Stat Med 1996;15:361-87.
.. [2] Efron B. Estimating the error rate of a prediction rule: improvement on
       cross-validation. J Am Stat Assoc 1983;78:316-31.
.. [3] Efron B, Tibshirani R. Improvements on cross-validation: the .632+
       bootstrap method. J Am Stat Assoc 1997;92:548-60.
.. [4] Gerds TA, Schumacher M. Efron-type measures of prediction error for
       survival analysis. Biometrics 2007;63:1283-7.
"""

from __future__ import annotations

import numpy as np

from workbench.metrics.brier import brier_score
from workbench.predictions import SurvivalCurves
from workbench.validation.intervals import percentiles

ESTIMATORS = ("optimism", "oob", "632plus")
_HIGHER = ("harrell_c", "uno_c", "mean_auc", "auc", "ipa", "ipa_integrated")
_LOWER = ("brier", "ibs")


def point632plus(apparent: float, oob: float, no_information: float, higher_is_better: bool) -> float:
    """The .632+ estimate from the apparent, out-of-bootstrap and no-information values.

    Efron & Tibshirani (1997), eqs. 28-32, applied to the loss ``-value`` when
    higher values are better. NaN if any input is NaN.
    """
    s = -1.0 if higher_is_better else 1.0
    err, err1, gamma = s * apparent, s * oob, s * no_information
    if not np.all(np.isfinite([err, err1, gamma])):
        return np.nan
    err1p = min(err1, gamma)
    r = (err1p - err) / (gamma - err) if (err1p > err and gamma > err) else 0.0
    r = float(np.clip(r, 0.0, 1.0))
    w = 0.632 / (1.0 - 0.368 * r)
    return s * ((1.0 - w) * err + w * err1p)


def direction(name: str) -> bool | None:
    """True if higher is better, False if lower is better, None if neither (no .632+)."""
    base = name.split("@")[0]
    return True if base in _HIGHER else False if base in _LOWER else None


def no_information(names, curves: SurvivalCurves, y, horizons, grid, null_brier, null_ibs) -> np.ndarray:
    """No-information values of the apparent fit's predictions, aligned with ``names``.

    0.5 for C and AUC; for Brier scores the permutation average described in the
    module notes (the censoring weights of the cohort itself, as for the apparent
    value); IPA from those. NaN where no such value is defined.
    """
    h = np.asarray(horizons, dtype=float)
    time = y["time"]
    g = np.asarray(grid, dtype=float)
    g = g[(g >= time.min()) & (g <= h[-1])]
    both = np.unique(np.r_[h, g])
    gam = np.full(both.size, np.nan)
    try:
        n = curves.n_samples
        ones = SurvivalCurves(both, np.ones((n, both.size)), "one")
        zeros = SurvivalCurves(both, np.zeros((n, both.size)), "zero")
        ba = brier_score(y, y, ones, both).brier
        bb = brier_score(y, y, zeros, both).brier
        s = np.column_stack([curves.at(t) for t in both])
        gam = ba * np.mean(s**2, axis=0) + bb * np.mean((1.0 - s) ** 2, axis=0)
    except Exception:  # noqa: BLE001 - no gamma: the .632+ rule falls back to out-of-bootstrap
        pass
    out = np.full(len(names), np.nan)
    gi = np.searchsorted(both, g)
    ibs = float(np.trapezoid(gam[gi], g) / (g[-1] - g[0])) if g.size >= 2 else np.nan
    for j, nm in enumerate(names):
        base, _, at = nm.partition("@")
        if base in ("harrell_c", "uno_c", "mean_auc", "auc"):
            out[j] = 0.5
        elif base == "ibs":
            out[j] = ibs
        elif base == "ipa_integrated":
            out[j] = 1.0 - ibs / null_ibs if null_ibs > 0 else np.nan
        elif base in ("brier", "ipa"):
            k = int(np.searchsorted(h, float(at)))
            b = gam[int(np.searchsorted(both, h[k]))]
            out[j] = b if base == "brier" else (1.0 - b / null_brier[k] if null_brier[k] > 0 else np.nan)
    return out


def bootstrap_estimate(estimator: str, name: str, a: float, b, o, u, gamma: float, conf_level: float):
    """(estimate, optimism, sd, shifted-percentile interval, n_used, estimator used) for one metric.

    ``b``, ``o``, ``u``: per-replicate values on the bootstrap sample, the original
    rows and the out-of-bootstrap rows (``b`` and ``o`` may be None for
    estimators that do not use them). The interval is the cheap location-shifted
    percentile interval of B (optimism only; see :mod:`.resample`), NaN otherwise.
    """
    lo = hi = opt = np.nan
    if estimator == "optimism":
        keep = np.isfinite(b) & np.isfinite(o)
        b, o = b[keep], o[keep]
        if not keep.any():
            return np.nan, np.nan, np.nan, (np.nan, np.nan), 0, estimator
        opt = float(np.mean(b - o))
        est = a - opt
        sd = float(np.std(b, ddof=1)) if b.size > 1 else np.nan
        if b.size > 1:
            lo, hi = (x - float(np.mean(b)) + est for x in percentiles(b, conf_level))
        return est, opt, sd, (lo, hi), int(keep.sum()), estimator
    u = u[np.isfinite(u)] if u is not None else np.array([])
    if not u.size:
        return np.nan, np.nan, np.nan, (np.nan, np.nan), 0, estimator
    oob = float(np.mean(u))
    sd = float(np.std(u, ddof=1)) if u.size > 1 else np.nan
    hib = direction(name)
    if estimator == "632plus" and hib is not None and np.isfinite(gamma):
        est = point632plus(a, oob, gamma, hib)
        return est, a - est, sd, (lo, hi), int(u.size), "632plus"
    return oob, a - oob, sd, (lo, hi), int(u.size), "oob"
