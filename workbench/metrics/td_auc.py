"""Cumulative/dynamic time-dependent AUC with IPCW weights and standard errors.

At a horizon t, cases are patients with an event by t and controls are patients
still event-free after t. Cases are weighted by the inverse probability of
having remained uncensored up to their event time, estimated on TRAINING rows.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
from scipy.stats import norm

from workbench.cohort.outcome import split_outcome
from workbench.errors import MetricError
from workbench.metrics._ipcw import CensoringSurvival, fit_censoring
from workbench.metrics.concordance import _check_risk, _risk_ranks
from workbench.predictions import RiskScores
from workbench.stats.km import kaplan_meier, survival_at

__all__ = ["TimeDependentAUCResult", "time_dependent_auc"]


@dataclass(frozen=True)
class TimeDependentAUCResult:
    """Cumulative/dynamic AUC at each horizon.

    Attributes
    ----------
    times : ndarray of shape (n_times,)
        Horizons, sorted ascending.
    auc : ndarray of shape (n_times,)
    std_err : ndarray of shape (n_times,)
        Pointwise standard errors from the influence function, including the
        variability of the estimated censoring distribution.
    ci_lower, ci_upper : ndarray of shape (n_times,)
        Pointwise Wald intervals auc +- z std_err, clipped to [0, 1].
    mean_auc : float
        AUC(t) averaged over the horizons with weights given by the drop of the
        Kaplan-Meier curve of the evaluation rows (equal to ``auc[0]`` for one
        horizon).
    n_cases, n_controls : ndarray of shape (n_times,)
        Unweighted numbers of cases (event by t) and controls (event-free after t).
    conf_level : float
    """

    times: np.ndarray
    auc: np.ndarray
    std_err: np.ndarray
    ci_lower: np.ndarray
    ci_upper: np.ndarray
    mean_auc: float
    n_cases: np.ndarray
    n_controls: np.ndarray
    conf_level: float = 0.95


def _check_horizons(times, test_time: np.ndarray) -> np.ndarray:
    h = np.unique(np.asarray(times, dtype=float).ravel())
    if h.size == 0 or not np.all(np.isfinite(h)):
        raise MetricError("time-dependent AUC needs at least one finite horizon.")
    lo, hi = float(test_time.min()), float(test_time.max())
    bad = h[(h <= lo) | (h >= hi)]
    if bad.size:
        raise MetricError(
            f"horizon(s) {', '.join(f'{b:g}' for b in bad)} lie outside the follow-up of the "
            f"evaluation patients, which runs from {lo:g} to {hi:g}. Every horizon must lie "
            "strictly inside that range so that there are both cases and controls; choose "
            "horizons between them (for example well before the longest follow-up)."
        )
    return h


def _censoring_influence(
    cens: CensoringSurvival, m_idx: np.ndarray, train_event, case_time, c
) -> np.ndarray:
    """Influence of estimating G on sum_i c_i / G(T_i-) relative to known G.

    ``m_idx`` locates each training patient's time on ``cens.times``.
    Returns, for each training patient k, sum_i c_i psi_k(T_i-) with
    psi_k(s-) = int_[0,s) dM^C_k(u) / y(u), the Kaplan-Meier martingale
    representation of 1/G_hat - 1/G (risk set for censoring at u excludes
    events at u, matching the estimator).
    """
    d_lambda, y = cens.martingale_parts()
    u = cens.times
    order = np.argsort(case_time)
    ct = case_time[order]
    tail = np.r_[np.cumsum(c[order][::-1])[::-1], 0.0]
    cm = tail[np.searchsorted(ct, u, side="right")]  # sum of c_i over cases with T_i > u_m
    with np.errstate(divide="ignore", invalid="ignore"):
        jump = np.where(y > 0, cm / y, 0.0)
    q = np.cumsum(d_lambda * jump)
    q_incl = np.r_[0.0, q]
    censored = ~train_event
    # At risk of censoring at own time only if censored there (events come first).
    q_k = np.where(censored, q_incl[m_idx + 1], q_incl[m_idx])
    return np.where(censored, jump[m_idx], 0.0) - q_k


def _auc_rowweights(censoring, time, is_case, is_ctrl, ranks, t) -> float:
    """AUC(t) with case weights 1/G(T_i- | x_i) and control weights 1/G(t | x_j)."""
    a = np.where(is_case, 1.0 / censoring.own(is_case), 0.0)
    b = np.where(is_ctrl, 1.0 / censoring.at([t])[:, 0], 0.0)
    n_rank = int(ranks.max()) + 1
    ctrl_w = np.bincount(ranks, weights=b, minlength=n_rank)
    below = (np.cumsum(ctrl_w) - ctrl_w)[ranks]
    num = np.sum(a * (below + 0.5 * ctrl_w[ranks]))
    return float(min(1.0, max(0.0, num / (a.sum() * b.sum()))))


def time_dependent_auc(
    y_train,
    y_test,
    risk: RiskScores | Sequence[RiskScores],
    times,
    *,
    tied_tol: float = 1e-8,
    conf_level: float = 0.95,
    censoring=None,
) -> TimeDependentAUCResult:
    """Cumulative/dynamic AUC at one or more horizons.

    Parameters
    ----------
    y_train : structured ndarray
        Outcome of the training rows; the censoring distribution is estimated
        from them only.
    y_test : structured ndarray
        Outcome of the evaluation rows.
    risk : RiskScores or sequence of RiskScores
        One score per evaluation patient (higher = worse), used at every
        horizon, or one RiskScores per horizon (in the order of sorted times).
    times : float or array-like
        Horizons, strictly inside the follow-up range of ``y_test``.
    tied_tol : float, default 1e-8
        Scores closer than this (after sorting, chained) are tied and count 1/2.
    conf_level : float, default 0.95
    censoring : RowCensoring, optional
        Per-row censoring weights of the evaluation rows
        (:func:`workbench.metrics.censoring.row_censoring`) instead of the
        Kaplan-Meier curve of ``y_train``. Controls are then weighted by
        1/G(t | x_j) (the weight no longer cancels) and the standard error is
        NaN (use resampling).

    Returns
    -------
    TimeDependentAUCResult

    Notes
    -----
    With case weights a_i = d_i 1(T_i <= t) / G(T_i-) and control indicators
    b_j = 1(T_j > t),

        AUC(t) = sum_{i,j} a_i b_j K_ij / (sum_i a_i sum_j b_j),

    K_ij = 1(r_i > r_j) + 1/2 1(r_i = r_j) (Uno et al. 2007; Hung & Chiang 2010).
    The 1/G(t) weight of controls is common to all of them and cancels.

    Standard errors follow the iid (influence-function) representation of
    Blanche, Dartigues & Jacqmin-Gadda (2013). The test-sample part is the
    Hoeffding projection of the ratio above with G held fixed; the second part
    propagates the Kaplan-Meier estimate of G through its martingale
    representation, 1/G_hat(s) - 1/G(s) ~ (1/G(s)) n^-1 sum_k int_0^s dM^C_k/y.
    When ``y_train`` and ``y_test`` are the same array (apparent performance)
    both parts are added patient by patient; otherwise the two samples are
    treated as independent and their variances add. Computations are
    vectorised and O(n log n) per horizon.

    References
    ----------
    .. [1] Uno H, Cai T, Tian L, Wei LJ. Evaluating prediction rules for t-year
       survivors with censored regression models. J Am Stat Assoc
       2007;102:527-537.
    .. [2] Hung H, Chiang CT. Estimation methods for time-dependent AUC models
       with survival data. Can J Stat 2010;38:8-26.
    .. [3] Blanche P, Dartigues JF, Jacqmin-Gadda H. Estimating and comparing
       time-dependent areas under receiver operating characteristic curves for
       censored event times with competing risks. Stat Med 2013;32:5381-5397.
    .. [4] Lambert J, Chevret S. Summary measure of discrimination in survival
       models based on cumulative/dynamic time-dependent ROC curves. Stat
       Methods Med Res 2016;25:2088-2102 (the averaged AUC).
    """
    if not 0.0 < conf_level < 1.0:
        raise MetricError(f"conf_level must lie strictly between 0 and 1, got {conf_level}.")
    time, event = split_outcome(y_test)
    tr_time, tr_event = split_outcome(y_train)
    horizons = _check_horizons(times, time)
    if isinstance(risk, RiskScores):
        scores = [_check_risk(risk, time.size, "time-dependent AUC")] * horizons.size
    elif isinstance(risk, Sequence) and not isinstance(risk, str) and len(risk) == horizons.size:
        scores = [_check_risk(r, time.size, "time-dependent AUC") for r in risk]
    else:
        _check_risk(risk, time.size, "time-dependent AUC")  # raises for non-RiskScores input
        raise MetricError(
            f"time-dependent AUC got {len(risk)} sets of risk scores for {horizons.size} horizons; "
            "give one RiskScores, or one per horizon."
        )
    same_sample = y_train is y_test or (
        y_train.shape == y_test.shape and np.array_equal(y_train, y_test)
    )
    cens = fit_censoring(y_train)
    n, n_tr = time.size, tr_time.size
    tr_idx = np.searchsorted(cens.times, tr_time)  # exact: training times are the grid
    single = isinstance(risk, RiskScores)
    ranks = _risk_ranks(scores[0], tied_tol)

    auc = np.empty(horizons.size)
    se = np.empty(horizons.size)
    n_cases = np.empty(horizons.size, dtype=int)
    n_ctrl = np.empty(horizons.size, dtype=int)
    for h, t in enumerate(horizons):
        if not single:
            ranks = _risk_ranks(scores[h], tied_tol)
        is_case = event & (time <= t)
        is_ctrl = time > t
        n_cases[h], n_ctrl[h] = int(is_case.sum()), int(is_ctrl.sum())
        if n_cases[h] == 0:
            raise MetricError(
                f"no evaluation patient has an event by horizon {t:g}; choose a later horizon."
            )
        if censoring is not None:
            auc[h] = _auc_rowweights(censoring, time, is_case, is_ctrl, ranks, t)
            se[h] = np.nan
            continue
        g_t = float(cens.survival_at(t, left_limit=False))
        a = np.zeros(n)
        a[is_case] = cens.inverse_at(time[is_case], left_limit=True)
        b = np.where(is_ctrl, 1.0 / g_t, 0.0)

        # Scores are integer ranks, so per-rank tallies replace pairwise comparisons.
        n_rank = int(ranks.max()) + 1
        ctrl_cnt = np.bincount(ranks[is_ctrl], minlength=n_rank).astype(float)
        below = (np.cumsum(ctrl_cnt) - ctrl_cnt)[ranks]
        k_case = (below + 0.5 * ctrl_cnt[ranks]) / (g_t * n)  # (1/n) sum_j b_j K_ij
        case_w = np.bincount(ranks[is_case], weights=a[is_case], minlength=n_rank)
        above = (case_w[::-1].cumsum()[::-1] - case_w)[ranks]
        k_ctrl = (above + 0.5 * case_w[ranks]) / n

        f_hat, s_hat = a.sum() / n, b.sum() / n
        phi = np.sum(a * k_case) / n
        auc[h] = min(1.0, max(0.0, phi / (f_hat * s_hat)))  # rounding can exceed 1 by an ulp
        if0 = (a * k_case + b * k_ctrl - auc[h] * (a * s_hat + b * f_hat)) / (f_hat * s_hat)
        c = np.where(is_case, a * (k_case - auc[h] * s_hat) / (n * f_hat * s_hat), 0.0)
        ifg = _censoring_influence(cens, tr_idx, tr_event, time[is_case], c[is_case])
        if same_sample:
            var = np.sum((if0 + ifg) ** 2) / n**2
        else:
            var = np.sum(if0**2) / n**2 + np.sum(ifg**2) / n_tr**2
        se[h] = np.sqrt(var)

    # A weighted sum of pair indicators divided by its own total is a proportion; floating
    # point rounding can still land it a few ulp outside [0, 1].
    auc = np.clip(auc, 0.0, 1.0)
    z = norm.ppf(0.5 + conf_level / 2.0)
    if horizons.size == 1:
        mean_auc = float(auc[0])
    else:
        s_km = survival_at(kaplan_meier(time, event), horizons)
        drop = -np.diff(np.r_[1.0, s_km])
        mean_auc = float(np.sum(auc * drop) / (1.0 - s_km[-1]))
    return TimeDependentAUCResult(
        times=horizons,
        auc=auc,
        std_err=se,
        ci_lower=np.clip(auc - z * se, 0.0, 1.0),
        ci_upper=np.clip(auc + z * se, 0.0, 1.0),
        mean_auc=mean_auc,
        n_cases=n_cases,
        n_controls=n_ctrl,
        conf_level=float(conf_level),
    )
