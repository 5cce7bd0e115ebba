"""A patient's absolute risk of each cause, with influence-function confidence limits.

Two routes for one new covariate pattern ``x`` at a set of horizons:

* Fine-Gray: :math:`F_1(t \\mid x) = 1 - \\exp\\{-e^{\\eta(x)} \\hat\\Lambda_0(t)\\}`, with
  :math:`\\hat\\Lambda_0` the Breslow-type cumulative baseline subdistribution hazard
  of the weighted fit (:func:`fine_gray_risk`);
* cause-specific Cox: the cumulative incidence of every cause from the
  cause-specific hazards of all causes, and the event-free survival
  (:func:`cause_specific_risks`). The incidences of all causes and the
  event-free survival add to exactly 1.

Confidence limits come from the per-patient influence functions of the
predicted cumulative hazard (the martingale term of the Breslow baseline plus
the coefficients' term through their score residuals), carried through to the
cumulative incidence by the chain rule, and their sum of squares as variance
(a robust, sandwich-type variance). The limits are symmetric on the
log(-log(1 - F)) scale, so they stay in [0, 1]. As in the Fine-Gray standard
errors of :func:`workbench.competing.regression.fit_fine_gray`, the censoring
weights of the Fine-Gray fit are treated as known. The variance needs the
training rows, which the fitted objects do not keep: they are passed in again.
``bench/bench_competing_patient.py`` measures the coverage.

References
----------
Cheng SC, Fine JP, Wei LJ. Prediction of cumulative incidence function under the
proportional hazards model. Biometrics 1998;54:219-28.
Fine JP, Gray RJ. A proportional hazards model for the subdistribution of a
competing risk. J Am Stat Assoc 1999;94:496-509 (section 4, predicted incidence).
Lin DY, Wei LJ. The robust inference for the Cox proportional hazards model.
J Am Stat Assoc 1989;84:1074-8.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from workbench.competing.outcome import split_competing
from workbench.competing.regression import (
    CauseSpecificFit,
    FineGrayFit,
    _score_residuals,
    expand_fine_gray,
    predict_incidence_cause_specific,
)
from workbench.errors import ModelError, SpecError
from workbench.stats.coxph import CoxPHFit, _cumhaz_at, _design_for
from workbench.stats.km import loglog_limits

__all__ = ["AbsoluteRisk", "cause_specific_risks", "cumhaz_influence", "fine_gray_risk"]


@dataclass(frozen=True)
class AbsoluteRisk:
    """Absolute risks of one patient at the horizons, with pointwise limits.

    Attributes
    ----------
    method : str
        ``"fine_gray"`` or ``"cause_specific"``.
    horizons : ndarray of shape (n_times,)
    causes : tuple of int
        The causes of the rows of ``risk``: the modelled cause for Fine-Gray,
        every cause for the cause-specific route.
    risk, lower, upper, se : ndarray of shape (n_causes, n_times)
        Cumulative incidence, its limits and its standard error (probability scale).
    event_free, event_free_lower, event_free_upper, event_free_se : ndarray of shape (n_times,)
        Probability of no event of any cause, its limits and standard error
        (cause-specific route; NaN for Fine-Gray, which models one cause only).
    conf_level : float
    """

    method: str
    horizons: np.ndarray
    causes: tuple[int, ...]
    risk: np.ndarray
    lower: np.ndarray
    upper: np.ndarray
    se: np.ndarray
    event_free: np.ndarray
    event_free_lower: np.ndarray
    event_free_upper: np.ndarray
    event_free_se: np.ndarray
    conf_level: float = 0.95

    def of(self, cause: int) -> np.ndarray:
        """Cumulative incidence of ``cause`` at the horizons."""
        if int(cause) not in self.causes:
            raise ModelError(f"no absolute risk of cause {cause}; estimated causes: {self.causes}.")
        return self.risk[self.causes.index(int(cause))]


def _check(horizons, conf_level) -> np.ndarray:
    h = np.atleast_1d(np.asarray(horizons, dtype=float)).ravel()
    if h.size == 0 or not np.all(np.isfinite(h)) or np.any(h < 0):
        raise SpecError(f"horizons must be non-negative times, for example [12, 24, 36]; got {list(h)}.")
    if not 0 < conf_level < 1:
        raise SpecError(f"conf_level must lie between 0 and 1 (for example 0.95), not {conf_level}.")
    return h


def cumhaz_influence(cox: CoxPHFit, X_rows, start, stop, event, weight, patient, n_patients: int, x_new):
    r"""Per-patient influence functions of the predicted cumulative hazard of one new patient.

    For counting-process rows (at risk on (start, stop], case weights), with
    :math:`d\hat\Lambda_k = d_k / S_0(t_k)` the Breslow increments (centred
    covariates) and :math:`\bar x_k` the risk-set means:

    .. math:: \psi_i(t) = e^{\eta(x)}\Big[\sum_{t_k \le t} \frac{dM_i(t_k)}{S_0(t_k)}
              + \Big(\sum_{t_k \le t} (x - \bar x_k)\, d\hat\Lambda_k\Big)^\top I^{-1} U_i\Big],

    with :math:`dM_i(t_k) = \sum_{r \in i} w_r \{dN_r(t_k) - Y_r(t_k) e^{\eta_r} d\hat\Lambda_k\}`
    and :math:`U_i` patient i's score residuals summed over its rows. Then
    :math:`\sum_i \psi_i(t)^2` estimates the variance of :math:`\hat H(t \mid x)`.

    Returns
    -------
    times : ndarray of shape (n_event_times,)
        The distinct event times of the rows.
    psi : ndarray of shape (n_patients, n_event_times)
    """
    X = np.asarray(X_rows, dtype=float).reshape(len(stop), -1)
    start, stop = np.asarray(start, float), np.asarray(stop, float)
    event, weight = np.asarray(event, bool), np.asarray(weight, float)
    xc_rows = X - cox.x_mean
    r = weight * np.exp(xc_rows @ cox.coef)
    tk = np.unique(stop[event])
    if tk.size == 0:
        return tk, np.zeros((n_patients, 0))
    by_stop, by_start = np.argsort(stop), np.argsort(start)

    def at_or_after(keys, order, vals):
        tail = np.vstack([np.cumsum(vals[order][::-1], axis=0)[::-1], np.zeros((1, vals.shape[1]))])
        return tail[np.searchsorted(keys[order], tk, side="left")]

    rv = np.column_stack([r, r[:, None] * xc_rows])
    risk = at_or_after(stop, by_stop, rv) - at_or_after(start, by_start, rv)
    s0, xbar = risk[:, 0], risk[:, 1:] / risk[:, :1]
    j_ev = np.searchsorted(tk, stop[event])
    d = np.bincount(j_ev, weights=weight[event], minlength=tk.size)
    dlam = d / s0
    # martingale part: jumps w / S0 at own events, minus the compensator on the rows' risk intervals
    jumps = np.zeros((n_patients, tk.size))
    np.add.at(jumps, (np.asarray(patient)[event], j_ev), weight[event] / s0[j_ev])
    c_pad = np.r_[0.0, np.cumsum(dlam / s0)]
    lo = np.searchsorted(tk, start, side="right")
    hi = np.searchsorted(tk, stop, side="right")
    cols = np.clip(np.arange(1, tk.size + 1)[None, :], lo[:, None], hi[:, None])
    comp_rows = r[:, None] * (c_pad[cols] - c_pad[lo][:, None])
    comp = np.zeros((n_patients, tk.size))
    np.add.at(comp, np.asarray(patient), comp_rows)
    A = np.cumsum(jumps, axis=1) - comp
    U = _score_residuals(cox, X, start, stop, event, weight)
    per_patient = np.zeros((n_patients, X.shape[1]))
    np.add.at(per_patient, np.asarray(patient), U)
    v = per_patient @ cox.cov
    xc_new = np.asarray(x_new, float).ravel() - cox.x_mean
    D = np.cumsum((xc_new[None, :] - xbar) * dlam[:, None], axis=0)  # (K, p)
    return tk, np.exp(xc_new @ cox.coef) * (A + v @ D.T)


def _step(times, values, at):
    """Right-continuous step lookup of ``values[..., k]`` (given at ``times``) at ``at``; 0 before."""
    j = np.searchsorted(times, np.asarray(at, float), side="right") - 1
    return np.where(j >= 0, values[..., np.maximum(j, 0)], 0.0)


def _one_row(fit: CoxPHFit, x_new) -> np.ndarray:
    x = _design_for(fit, x_new)
    if x.shape[0] != 1:
        raise ModelError(f"an absolute risk is estimated for one patient at a time; got {x.shape[0]} rows.")
    lp = float((x[0] - fit.x_mean) @ fit.coef)
    if not lp < 700:  # exp() overflows past ~709: the hazard is infinite for a float
        raise ModelError(f"the patient's linear predictor is {lp:.4g}, so far from the training patients that "
                         "the hazard cannot be computed; check the values (units, typing errors).")
    return x[0]


def _incidence_limits(F, sd, conf_level):
    """Limits of a cumulative incidence symmetric on log(-log(1 - F)), from its SD on the probability scale."""
    S = 1.0 - F
    with np.errstate(divide="ignore", invalid="ignore"):
        se = sd / (S * -np.log(S))
    lo_s, hi_s = loglog_limits(S, se, conf_level)
    return 1.0 - hi_s, 1.0 - lo_s


def fine_gray_risk(fit: FineGrayFit, X_train, y_train, x_new, horizons, *, conf_level: float = 0.95) -> AbsoluteRisk:
    r"""Absolute risk of the Fine-Gray model's cause for one patient, with limits.

    :math:`\hat F(t \mid x) = 1 - \exp\{-\hat H(t \mid x)\}`,
    :math:`\hat H(t \mid x) = e^{\eta(x)} \hat\Lambda_0(t)` (the fit's own baseline).
    The variance of :math:`\hat H` is :math:`\sum_i \psi_i(t)^2`
    (:func:`cumhaz_influence` on the expanded, weighted rows, each patient's rows
    summed); limits :math:`1 - (1 - \hat F)^{\exp(\mp z\, se)}` with
    :math:`se = \sqrt{\sum_i \psi_i^2} / \hat H`.

    Parameters
    ----------
    fit : FineGrayFit
    X_train, y_train
        The design and competing-risks outcome the model was fitted on.
    x_new : one row of the same design
    horizons : array-like
    conf_level : float

    References
    ----------
    Fine JP, Gray RJ. J Am Stat Assoc 1999;94:496-509.
    """
    h = _check(horizons, conf_level)
    x = _one_row(fit.cox, x_new)
    Xt = _design_for(fit.cox, X_train)
    split_competing(y_train)
    rows = expand_fine_gray(y_train, fit.cause)
    start = rows.start.copy()
    start[: Xt.shape[0]] = -np.inf  # own rows at risk from the start (as in fit_fine_gray)
    tk, psi = cumhaz_influence(fit.cox, Xt[rows.patient], start, rows.stop, rows.event, rows.weight,
                               rows.patient, Xt.shape[0], x)
    H = np.exp((x - fit.cox.x_mean) @ fit.cox.coef) * _cumhaz_at(fit.cox, h, fit.cox.baseline_cumhaz)
    sd = np.sqrt(np.sum(_step(tk, psi, h) ** 2, axis=0))
    F = -np.expm1(-H)
    with np.errstate(divide="ignore", invalid="ignore"):
        se_log = np.where(H > 0, sd / H, np.nan)
    lo_s, hi_s = loglog_limits(1.0 - F, se_log, conf_level)
    nan = np.full(h.size, np.nan)
    return AbsoluteRisk("fine_gray", h, (int(fit.cause),), F[None, :], (1.0 - hi_s)[None, :], (1.0 - lo_s)[None, :],
                        (np.exp(-H) * sd)[None, :], nan, nan.copy(), nan.copy(), nan.copy(), float(conf_level))


def cause_specific_risks(fit: CauseSpecificFit, X_train, y_train, x_new, horizons, *,
                         conf_level: float = 0.95) -> AbsoluteRisk:
    r"""Absolute risk of every cause and event-free survival for one patient, from cause-specific Cox models.

    Point estimates are those of
    :func:`workbench.competing.regression.predict_incidence_cause_specific`
    (the incidences and the event-free survival add to 1). The influence of
    patient i on :math:`F_c(t) = \sum_{s \le t} S(s-)\,(1 - e^{-dH(s)})\, dH_c(s) / dH(s)`
    is its derivative along :math:`\psi_{l,i}`, the influences on each cause's
    cumulative hazard (:func:`cumhaz_influence`); to first order it is
    :math:`\sum_{s \le t} S(s-)\,\{d\psi_{c,i}(s) - dH_c(s) \sum_l \psi_{l,i}(s-)\}`
    (Cheng, Fine & Wei 1998). On :math:`S(t)` it is :math:`-S(t) \sum_l \psi_{l,i}(t)`.
    Limits are symmetric on log(-log(1 - F)) for the incidences and on log(-log S)
    for the event-free survival. Every cause needs its model (the default of
    :func:`~workbench.competing.regression.fit_cause_specific`).

    References
    ----------
    Cheng SC, Fine JP, Wei LJ. Biometrics 1998;54:219-28.
    Benichou J, Gail MH. Biometrics 1990;46:813-26.
    """
    h = _check(horizons, conf_level)
    time, cause = split_competing(y_train)
    missing = sorted(set(np.unique(cause[cause > 0]).tolist()) - set(fit.causes))
    if missing:
        raise ModelError(f"cause(s) {missing} have events but no cause-specific model; fit every cause.")
    n = time.size
    grid = np.unique(np.concatenate([f.baseline_times for f in fit.fits]))
    H, psi = [], []
    for k, f in zip(fit.causes, fit.fits, strict=True):
        x = _one_row(f, x_new)
        Xt = _design_for(f, X_train)
        tk, p = cumhaz_influence(f, Xt, np.full(n, -np.inf), time, cause == k, np.ones(n), np.arange(n), n, x)
        H.append(np.exp((x - f.x_mean) @ f.coef) * _cumhaz_at(f, grid, f.baseline_cumhaz))
        psi.append(_step(tk, p, grid))
    H, psi = np.array(H), np.array(psi)  # (L, G), (L, n, G)
    psi_tot = psi.sum(axis=0)
    s_prev = np.exp(-np.r_[0.0, H.sum(axis=0)[:-1]])
    psi_tot_prev = np.hstack([np.zeros((n, 1)), psi_tot[:, :-1]])
    a = np.diff(np.r_[0.0, H.sum(axis=0)])  # > 0 at every grid time: each is some cause's event time
    da = np.diff(np.hstack([np.zeros((n, 1)), psi_tot]), axis=1)
    leave = -np.expm1(-a)
    risk, sd = [], []
    for c in range(len(fit.causes)):
        b = np.diff(np.r_[0.0, H[c]])
        db = np.diff(np.hstack([np.zeros((n, 1)), psi[c]]), axis=1)
        with np.errstate(divide="ignore", invalid="ignore"):
            step = np.where(a > 0, s_prev * leave * b / a, 0.0)
            by_a = np.where(a > 0, s_prev * (np.exp(-a) * b / a - leave * b / a**2), 0.0)
            by_b = np.where(a > 0, s_prev * leave / a, 0.0)
        infl = np.cumsum(-step * psi_tot_prev + by_a * da + by_b * db, axis=1)
        sd.append(np.sqrt(np.sum(_step(grid, infl, h) ** 2, axis=0)))
        risk.append(predict_incidence_cause_specific(fit, x_new, h, cause=fit.causes[c]).risks[0])
    risk, sd = np.array(risk), np.array(sd)
    lower, upper = _incidence_limits(risk, sd, conf_level)
    s_free = np.clip(1.0 - risk.sum(axis=0), 0.0, 1.0)
    sd_free = np.sqrt(np.sum((_step(grid, psi_tot, h) * np.exp(-_step(grid, H.sum(axis=0), h))) ** 2, axis=0))
    with np.errstate(divide="ignore", invalid="ignore"):
        se_free = sd_free / (s_free * -np.log(s_free))
    lo_f, hi_f = loglog_limits(s_free, se_free, conf_level)
    return AbsoluteRisk("cause_specific", h, tuple(int(k) for k in fit.causes), risk, lower, upper, sd,
                        s_free, lo_f, hi_f, sd_free, float(conf_level))
