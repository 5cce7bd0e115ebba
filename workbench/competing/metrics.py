"""Validation metrics for a predicted cumulative incidence of one cause at a horizon.

Each function mirrors an ordinary survival metric of :mod:`workbench.metrics`
and returns the same result type where one exists; with no competing events
each equals its ordinary counterpart applied to 1 - S(t) (tested to 1e-10).
Censoring weights come from the Kaplan-Meier curve of the censoring times of
the training rows (:func:`workbench.metrics._ipcw.fit_censoring`, events of
any cause leaving the risk set before censorings at the same time).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.stats import norm

from workbench.competing.cif import aalen_johansen, incidence_at
from workbench.competing.outcome import IncidenceCurves, any_event_outcome, split_competing
from workbench.competing.regression import fit_fine_gray
from workbench.errors import MetricError, ModelError
from workbench.metrics._ipcw import fit_censoring
from workbench.metrics.brier import BrierResult, _check_horizons, _check_single_horizon
from workbench.metrics.calibration_cox import _cloglog, _rcs_basis, _rcs_knots
from workbench.metrics.calibration_results import GroupedCalibrationResult
from workbench.metrics.concordance import _risk_ranks
from workbench.metrics.decision import DecisionCurveResult
from workbench.metrics.td_auc import _censoring_influence
from workbench.predictions import RiskScores
from workbench.stats.coxph import predict_survival

__all__ = [
    "CompetingAUCResult",
    "CompetingSmoothedCalibration",
    "competing_auc",
    "competing_brier",
    "competing_grouped_calibration",
    "competing_net_benefit",
    "competing_smoothed_calibration",
]


def _require_incidence(curves, n: int, where: str) -> IncidenceCurves:
    if not isinstance(curves, IncidenceCurves):
        raise MetricError(
            f"{where} needs predicted cumulative incidences (workbench.competing.outcome.IncidenceCurves), "
            f"but was given {type(curves).__name__}. Survival curves give the risk of any event, "
            "not of one cause in the presence of others."
        )
    if curves.n_samples != n:
        raise MetricError(
            f"{where}: {curves.n_samples} predictions but {n} outcomes; predictions and outcomes "
            "must describe the same patients in the same order."
        )
    return curves


def _incidence_at(time, cause, k: int, t0: float) -> float:
    """Aalen-Johansen F_k(t0); 0 when the rows hold no event of cause k."""
    if not np.any(cause == k):
        return 0.0
    return float(incidence_at(aalen_johansen(time, cause), t0, cause=k)[0])


# ------------------------------------------------------------------ AUC


@dataclass(frozen=True)
class CompetingAUCResult:
    """Cumulative/dynamic AUC of one cause at a horizon (definition 2 of Blanche et al.).

    Attributes
    ----------
    t0 : float
    auc : float
    n_cases : int
        Events of the cause of interest by ``t0``.
    n_controls_event_free : int
        Patients followed beyond ``t0`` without an event.
    n_controls_competing : int
        Patients with a competing event by ``t0`` (controls under definition 2).
    cause : int
    std_err : float
        Influence-function standard error (see :func:`competing_auc`).
    ci_lower, ci_upper : float
        Normal-approximation limits, clipped to [0, 1].
    conf_level : float
    """

    t0: float
    auc: float
    n_cases: int
    n_controls_event_free: int
    n_controls_competing: int
    cause: int = 1
    std_err: float = float("nan")
    ci_lower: float = float("nan")
    ci_upper: float = float("nan")
    conf_level: float = 0.95


def competing_auc(
    y_train, y_test, prediction, t0: float, *, cause: int | None = None, tied_tol: float = 1e-8,
    conf_level: float = 0.95,
) -> CompetingAUCResult:
    r"""Time-dependent AUC for a cause of interest with competing risks.

    Cases: events of the cause by ``t0``, weight :math:`1/\hat G(T_i-)`.
    Controls: patients followed beyond ``t0`` (weight :math:`1/\hat G(t_0)`)
    and patients with a competing event by ``t0`` (weight :math:`1/\hat G(T_j-)`).
    :math:`AUC = \sum_{ij} a_i b_j K_{ij} / (\sum a \sum b)` with
    :math:`K_{ij} = 1(r_i > r_j) + \tfrac12 1(r_i = r_j)`.

    Parameters
    ----------
    y_train, y_test : competing-risks outcomes
        Censoring weights come from ``y_train``.
    prediction : IncidenceCurves or RiskScores
        Predicted incidence of the cause (read at ``t0``) or a risk score.
    t0 : float
    cause : int, optional
        The cause of interest; taken from ``prediction`` when it is an
        IncidenceCurves (and must agree), 1 by default for RiskScores.
    tied_tol : float
        Scores closer than this count as tied.

    conf_level : float

    Returns
    -------
    CompetingAUCResult

    Notes
    -----
    Standard error: the iid representation of Blanche et al. (2013), as in
    :func:`workbench.metrics.td_auc.time_dependent_auc`: the Hoeffding
    projection of the ratio with the weights fixed, plus the Kaplan-Meier
    martingale representation of every inverse censoring weight (cases and
    competing controls at their own times, event-free controls at ``t0``).
    Added patient by patient when ``y_train`` is ``y_test``; otherwise the two
    variances add. With no competing events it is the standard error of
    ``time_dependent_auc``.

    References
    ----------
    Blanche P, Dartigues JF, Jacqmin-Gadda H. Estimating and comparing
    time-dependent areas under receiver operating characteristic curves for
    censored event times with competing risks. Stat Med 2013;32:5381-97.
    """
    time, status = split_competing(y_test)
    if isinstance(prediction, RiskScores):
        k = 1 if cause is None else int(cause)
        if prediction.values.size != time.size:
            raise MetricError(f"competing_auc: {prediction.values.size} risk scores but {time.size} outcomes.")
        score = np.asarray(prediction.values, dtype=float)
    else:
        curves = _require_incidence(prediction, time.size, "competing_auc")
        k = curves.cause
        if cause is not None and int(cause) != k:
            raise MetricError(
                f"competing_auc: the predictions are for cause {k} but cause {cause} was asked for."
            )
        score = curves.risk_at(t0)
    t0 = _check_single_horizon(time, status == k, t0, "competing_auc")
    cens = fit_censoring(any_event_outcome(y_train))
    is_case = (status == k) & (time <= t0)
    is_comp = (status > 0) & (status != k) & (time <= t0)
    is_free = time > t0
    a = np.zeros(time.size)
    a[is_case] = cens.inverse_at(time[is_case], left_limit=True)
    b = np.zeros(time.size)
    b[is_free] = 1.0 / float(cens.survival_at(t0, left_limit=False))
    if is_comp.any():
        b[is_comp] = cens.inverse_at(time[is_comp], left_limit=True)
    ranks = _risk_ranks(score, tied_tol)
    n_rank = int(ranks.max()) + 1
    n = time.size
    ctrl_w = np.bincount(ranks, weights=b, minlength=n_rank)
    below = (np.cumsum(ctrl_w) - ctrl_w)[ranks]
    k_case = (below + 0.5 * ctrl_w[ranks]) / n  # (1/n) sum_j b_j K_ij
    case_w = np.bincount(ranks, weights=a, minlength=n_rank)
    above = (case_w[::-1].cumsum()[::-1] - case_w)[ranks]
    k_ctrl = (above + 0.5 * case_w[ranks]) / n  # (1/n) sum_i a_i K_ij
    f_hat, s_hat = a.sum() / n, b.sum() / n
    auc = float(np.clip(np.sum(a * k_case) / n / (f_hat * s_hat), 0.0, 1.0))

    if0 = (a * k_case + b * k_ctrl - auc * (a * s_hat + b * f_hat)) / (f_hat * s_hat)
    # Each inverse weight 1/G(s) moves with G_hat; c is the weight times dAUC/dweight.
    c_case = a * (k_case - auc * s_hat) / (n * f_hat * s_hat)
    c_ctrl = b * (k_ctrl - auc * f_hat) / (n * f_hat * s_hat)
    at = np.r_[time[is_case], time[is_comp], np.full(int(is_free.sum()), np.nextafter(t0, np.inf))]
    coef = np.r_[c_case[is_case], c_ctrl[is_comp], c_ctrl[is_free]]
    tr_time, tr_cause = split_competing(y_train)
    ifg = _censoring_influence(cens, np.searchsorted(cens.times, tr_time), tr_cause > 0, at, coef)
    same = y_train is y_test or (y_train.shape == y_test.shape and np.array_equal(y_train, y_test))
    if same:
        var = np.sum((if0 + ifg) ** 2) / n**2
    else:
        var = np.sum(if0**2) / n**2 + np.sum(ifg**2) / tr_time.size**2
    se = float(np.sqrt(var))
    if not 0.0 < conf_level < 1.0:
        raise MetricError(f"conf_level must lie strictly between 0 and 1, got {conf_level}.")
    z = float(norm.ppf(0.5 + conf_level / 2.0))
    return CompetingAUCResult(
        t0=t0, auc=auc, n_cases=int(is_case.sum()), n_controls_event_free=int(is_free.sum()),
        n_controls_competing=int(is_comp.sum()), cause=k, std_err=se,
        ci_lower=max(0.0, auc - z * se), ci_upper=min(1.0, auc + z * se), conf_level=float(conf_level),
    )


# ---------------------------------------------------------------- Brier


def competing_brier(y_train, y_test, curves: IncidenceCurves, times) -> BrierResult:
    r"""IPCW Brier score and IPA of a predicted cumulative incidence.

    .. math::

        BS(t) = \frac1n \sum_i \hat W_i(t)\, \big(1(T_i \le t, \epsilon_i = k) - \hat F_k(t \mid x_i)\big)^2,

    with :math:`\hat W_i(t) = 1(T_i \le t, \epsilon_i \ne 0)/\hat G(T_i-) + 1(T_i > t)/\hat G(t)`.
    The null model is the Aalen-Johansen incidence of the training rows, the
    same for everyone; IPA = 1 - BS / BS_null.

    References
    ----------
    Gerds TA, Schumacher M. Consistent estimation of the expected Brier score
    in general survival models with right-censored event times. Biom J
    2006;48:1029-40.
    Schoop R, Beyersmann J, Schumacher M, Binder H. Quantifying the predictive
    accuracy of time-to-event models in the presence of competing risks.
    Biom J 2011;53:88-112.
    Kattan MW, Gerds TA. Diagn Progn Res 2018;2:7 (IPA).
    """
    where = "competing_brier"
    time, cause = split_competing(y_test)
    curves = _require_incidence(curves, time.size, where)
    k = curves.cause
    times = _check_horizons(time, times, where)
    risk = np.column_stack([curves.risk_at(t) for t in times])
    cens = fit_censoring(any_event_outcome(y_train))
    needed = (cause > 0) & (time <= times[-1])
    g_y = np.ones_like(time)
    if needed.any():
        g_y[needed] = cens.survival_at(time[needed], left_limit=True)
    g_t = np.asarray(cens.survival_at(times, left_limit=False), dtype=float)[None, :]
    early = (time[:, None] <= times[None, :]) & needed[:, None]
    w = np.where(early, 1.0 / g_y[:, None], 0.0) + (time[:, None] > times[None, :]) / g_t
    status = early & (cause == k)[:, None]
    brier = np.mean(w * (status - risk) ** 2, axis=0)
    tr_time, tr_cause = split_competing(y_train)
    null_risk = np.array([_incidence_at(tr_time, tr_cause, k, t) for t in times])
    null = np.mean(w * (status - null_risk[None, :]) ** 2, axis=0)
    with np.errstate(divide="ignore", invalid="ignore"):
        ipa = np.where(null > 0, 1.0 - brier / null, np.nan)
    return BrierResult(times=times, brier=brier, null_brier=null, ipa=ipa, model=curves.model)


# ---------------------------------------------------------- calibration


def competing_grouped_calibration(
    y, curves: IncidenceCurves, t0: float, *, n_groups: int = 5, conf_level: float = 0.95
) -> GroupedCalibrationResult:
    """Observed (Aalen-Johansen) against mean predicted incidence in groups of predicted risk.

    Groups are cut at quantiles of predicted risk as in
    :func:`workbench.metrics.calibration.grouped_calibration`; the observed risk
    of each group is its Aalen-Johansen incidence of the cause at ``t0`` with
    the log(-log F) interval of :func:`workbench.competing.cif.aalen_johansen`.
    ``events`` counts events of the cause by ``t0``.
    """
    time, cause = split_competing(y)
    curves = _require_incidence(curves, time.size, "competing_grouped_calibration")
    k = curves.cause
    t0 = _check_single_horizon(time, cause == k, t0, "competing_grouped_calibration")
    risk = curves.risk_at(t0)
    if int(n_groups) != n_groups or n_groups < 1:
        raise MetricError(f"n_groups must be a whole number of at least 1, got {n_groups!r}.")
    inner = np.unique(np.quantile(risk, np.linspace(0, 1, int(n_groups) + 1)[1:-1]))
    group = np.searchsorted(inner, risk, side="right")
    n_all = np.bincount(group, minlength=inner.size + 1)
    used = np.flatnonzero(n_all > 0)
    obs, lo, hi = (np.zeros(used.size) for _ in range(3))
    for j, g in enumerate(used):
        m = group == g
        if np.any(cause[m] == k):
            est = incidence_at(aalen_johansen(time[m], cause[m], conf_level=conf_level), t0, cause=k)
            obs[j], lo[j], hi[j] = (float(v) for v in est)
    events = np.bincount(group, weights=(cause == k) & (time <= t0), minlength=inner.size + 1)
    return GroupedCalibrationResult(
        t0=t0, edges=np.r_[risk.min(), inner, risk.max()], n=n_all[used],
        events=events[used].astype(int),
        mean_predicted=np.bincount(group, weights=risk, minlength=inner.size + 1)[used] / n_all[used],
        observed=obs, observed_lower=lo, observed_upper=hi, conf_level=conf_level,
    )


@dataclass(frozen=True)
class CompetingSmoothedCalibration:
    """Smoothed calibration of a predicted incidence at ``t0``.

    Attributes
    ----------
    t0 : float
    ici, e50, e90, emax : float
        Mean, median, 90th percentile and maximum of |observed - predicted|.
    knots : ndarray
        Spline knots on the complementary log-log scale of predicted risk.
    grid_predicted, grid_observed : ndarray
        The calibration curve (no band: the Fine-Gray fit has no standard errors yet).
    cause : int
    """

    t0: float
    ici: float
    e50: float
    e90: float
    emax: float
    knots: np.ndarray
    grid_predicted: np.ndarray
    grid_observed: np.ndarray
    cause: int = 1


def competing_smoothed_calibration(
    y, curves: IncidenceCurves, t0: float, *, knots: int = 3, grid_size: int = 100
) -> CompetingSmoothedCalibration:
    """Smoothed calibration curve and ICI of a predicted cumulative incidence.

    A Fine-Gray model (:func:`workbench.competing.regression.fit_fine_gray`,
    Efron ties, Breslow baseline) of the outcome on a restricted cubic spline of
    ``log(-log(1 - F))`` gives each patient an observed incidence
    ``1 - exp(-H0(t0) exp(f(x)))``; the ICI is the mean absolute difference
    from the predicted one. With no competing events it is the Cox-based
    curve of :func:`workbench.metrics.calibration.smoothed_calibration`.

    References
    ----------
    Austin PC, Putter H, Giardiello D, van Klaveren D. Graphical calibration
    curves and the integrated calibration index (ICI) for competing risk
    models. Diagn Progn Res 2022;6:2.
    """
    time, cause = split_competing(y)
    curves = _require_incidence(curves, time.size, "competing_smoothed_calibration")
    k = curves.cause
    t0 = _check_single_horizon(time, cause == k, t0, "competing_smoothed_calibration")
    risk = curves.risk_at(t0)
    if np.ptp(risk) <= 0:
        raise MetricError(
            "competing_smoothed_calibration: every patient has the same predicted risk, so there is "
            "no spread of predictions to relate to outcomes."
        )
    x = _cloglog(risk)
    knot_pos = _rcs_knots(x, knots)
    if knot_pos.size < 3:
        knot_pos = knot_pos[:0]
    try:
        fit = fit_fine_gray(_rcs_basis(x, knot_pos), y, cause=k, baseline_ties="breslow",
                            min_events_per_parameter=0.0)
    except ModelError as exc:
        raise MetricError(
            f"the Fine-Gray model relating outcomes to predicted risks could not be fitted ({exc})."
        ) from exc
    observed = 1.0 - predict_survival(fit.cox, _rcs_basis(x, knot_pos), [t0])[:, 0]
    diff = np.abs(observed - risk)
    grid = np.linspace(risk.min(), risk.max(), int(grid_size))
    g_obs = 1.0 - predict_survival(fit.cox, _rcs_basis(_cloglog(grid), knot_pos), [t0])[:, 0]
    return CompetingSmoothedCalibration(
        t0=t0, ici=float(diff.mean()), e50=float(np.median(diff)), e90=float(np.quantile(diff, 0.9)),
        emax=float(diff.max()), knots=knot_pos, grid_predicted=grid, grid_observed=g_obs, cause=k,
    )


# ------------------------------------------------------------- decision


def competing_net_benefit(y, curves: IncidenceCurves, t0: float, thresholds=None) -> DecisionCurveResult:
    r"""Decision curve for the predicted incidence of a cause at ``t0``.

    With H the patients whose predicted incidence is at least ``pt`` and
    :math:`\hat F_H(t_0)` the Aalen-Johansen incidence of the cause inside H,

    .. math:: NB(p_t) = \frac{|H|}{n}\Big[\hat F_H(t_0) - (1 - \hat F_H(t_0))\frac{p_t}{1 - p_t}\Big];

    treat-all uses everyone for H; ``event_risk`` is the incidence in the
    whole sample.

    References
    ----------
    Vickers AJ, Cronin AM, Elkin EB, Gonen M. BMC Med Inform Decis Mak
    2008;8:53 (decision curves with censoring and competing risks).
    """
    time, cause = split_competing(y)
    curves = _require_incidence(curves, time.size, "competing_net_benefit")
    k = curves.cause
    t0 = _check_single_horizon(time, cause == k, t0, "competing_net_benefit")
    pt = np.arange(1, 100) / 100.0 if thresholds is None else np.atleast_1d(np.asarray(thresholds, float))
    if pt.ndim != 1 or np.any(~np.isfinite(pt)) or np.any(pt < 0) or np.any(pt >= 1):
        raise MetricError("competing_net_benefit: threshold probabilities must lie in [0, 1).")
    risk = curves.risk_at(t0)
    n = time.size
    odds = pt / (1.0 - pt)
    nb = np.zeros(pt.size)
    n_treated = np.zeros(pt.size, dtype=int)
    memo: dict[int, float] = {}
    for j, p in enumerate(pt):
        m = risk >= p
        n_treated[j] = int(m.sum())
        if n_treated[j] == 0:
            continue
        if n_treated[j] not in memo:  # the treated set depends only on its size
            memo[n_treated[j]] = _incidence_at(time[m], cause[m], k, t0)
        f = memo[n_treated[j]]
        nb[j] = n_treated[j] / n * (f - (1.0 - f) * odds[j])
    f_all = _incidence_at(time, cause, k, t0)
    return DecisionCurveResult(
        t0=t0, thresholds=pt, net_benefit=nb, treat_all=f_all - (1.0 - f_all) * odds,
        treat_none=np.zeros_like(pt), proportion_treated=n_treated / n, event_risk=f_all,
        model=curves.model,
    )
