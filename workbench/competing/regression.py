"""Regression for competing risks: cause-specific Cox and Fine-Gray, with absolute risks.

Both routes use the project's Cox fitter (:func:`workbench.stats.coxph.fit_coxph`):

* cause-specific hazards: one Cox model per cause, the other causes censored;
  the cumulative incidence of a cause combines the hazards of all causes;
* Fine-Gray subdistribution hazard of one cause: a weighted Cox model on the
  data expanded as in Geskus (2011), where a patient with a competing event
  stays in the risk set with a weight that estimates the chance of still being
  uncensored.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from workbench.cohort.outcome import make_outcome
from workbench.competing.outcome import IncidenceCurves, split_competing
from workbench.errors import ModelError
from workbench.metrics._ipcw import fit_censoring
from workbench.stats.coxph import CoxPHFit, fit_coxph, linear_predictor, predict_survival

_Z95 = 1.959963984540054

__all__ = [
    "CauseSpecificFit",
    "ExpandedRows",
    "FineGrayFit",
    "expand_fine_gray",
    "fit_cause_specific",
    "fit_fine_gray",
    "predict_incidence_cause_specific",
    "predict_incidence_fine_gray",
]


def _rows_of(X, idx):
    if hasattr(X, "iloc"):
        return X.iloc[idx].reset_index(drop=True)
    arr = np.asarray(X, dtype=float)
    return (arr[:, None] if arr.ndim == 1 else arr)[idx]


def _n_rows(X) -> int:
    return len(X) if hasattr(X, "iloc") else np.asarray(X).shape[0]


# --------------------------------------------------------- cause-specific


@dataclass(frozen=True)
class CauseSpecificFit:
    """Cause-specific Cox models, one per cause (immutable, no training data kept).

    Attributes
    ----------
    causes : tuple of int
    fits : tuple of CoxPHFit
        ``fits[k]`` models the hazard of ``causes[k]`` with the other causes censored.
    """

    causes: tuple[int, ...]
    fits: tuple[CoxPHFit, ...]

    def fit_for(self, cause: int) -> CoxPHFit:
        if int(cause) not in self.causes:
            raise ModelError(f"no cause-specific model for cause {cause}; fitted causes: {self.causes}.")
        return self.fits[self.causes.index(int(cause))]


def fit_cause_specific(X, y, *, causes=None, ties="efron", **cox_options) -> CauseSpecificFit:
    """Fit a Cox model for each cause, the other causes treated as censored.

    Parameters
    ----------
    X : DataFrame or array of shape (n_samples, n_params)
    y : competing-risks outcome (``make_competing_outcome``)
    causes : sequence of int, optional
        Causes to model; default every cause with an event. The cumulative
        incidence from :func:`predict_incidence_cause_specific` needs them all.
    ties : {"efron", "breslow"}
    **cox_options
        Passed on to :func:`workbench.stats.coxph.fit_coxph`.

    Returns
    -------
    CauseSpecificFit

    References
    ----------
    Prentice RL, Kalbfleisch JD, Peterson AV, Flournoy N, Farewell VT, Breslow NE.
    The analysis of failure times in the presence of competing risks.
    Biometrics 1978;34:541-54.
    """
    time, cause = split_competing(y)
    seen = tuple(int(k) for k in np.unique(cause[cause > 0]))
    causes = seen if causes is None else tuple(int(k) for k in causes)
    fits = tuple(fit_coxph(X, time, cause == k, ties=ties, **cox_options) for k in causes)
    return CauseSpecificFit(causes=causes, fits=fits)


def predict_incidence_cause_specific(fit: CauseSpecificFit, X, times, cause: int = 1) -> IncidenceCurves:
    r"""Cumulative incidence of ``cause`` from the cause-specific hazards of all causes.

    .. math:: F_k(t \mid x) = \sum_{s \le t} S(s- \mid x)\,
              \big(1 - e^{-\Delta H(s \mid x)}\big)\, \frac{\Delta H_k(s \mid x)}{\Delta H(s \mid x)},\qquad
              S(t \mid x) = \exp\big(-H(t \mid x)\big),

    with :math:`H_l(t \mid x) = H_{0l}(t) e^{\eta_l(x)}` the cumulative
    hazard of each cause-specific model (its fitted baseline), :math:`H = \sum_l H_l`,
    on the union of their event times. The probability of leaving in a step,
    :math:`1 - e^{-\Delta H}`, is shared between the causes in proportion to
    their hazard increments, so the incidences of all causes and S add to
    exactly 1 (the first-order form :math:`S(s-)\,\Delta H_k` can exceed 1 where
    late risk sets are small). To first order in :math:`\Delta H` both agree.

    Returns
    -------
    IncidenceCurves of shape (n_samples, len(times))

    References
    ----------
    Benichou J, Gail MH. Estimates of absolute cause-specific risk in cohort
    studies. Biometrics 1990;46:813-26.
    """
    fit.fit_for(cause)
    grid = np.unique(np.concatenate([f.baseline_times for f in fit.fits]))
    n = _n_rows(X)
    total = np.zeros((n, grid.size))
    own = None
    for k, f in zip(fit.causes, fit.fits, strict=True):
        idx = np.searchsorted(f.baseline_times, grid, side="right") - 1
        h0 = np.where(idx >= 0, f.baseline_cumhaz[np.maximum(idx, 0)], 0.0)
        H = np.exp(linear_predictor(f, X))[:, None] * h0[None, :]
        total += H
        if k == int(cause):
            own = H
    s_prev = np.exp(-np.hstack([np.zeros((n, 1)), total[:, :-1]]))
    d_own = np.diff(np.hstack([np.zeros((n, 1)), own]), axis=1)
    d_all = np.diff(np.hstack([np.zeros((n, 1)), total]), axis=1)
    with np.errstate(divide="ignore", invalid="ignore"):
        share = np.where(d_all > 0, d_own / d_all, 0.0)
    F = np.cumsum(s_prev * -np.expm1(-d_all) * share, axis=1)
    return IncidenceCurves(times=np.asarray(times, dtype=float), risks=_step_read(grid, F, times), cause=int(cause))


def _step_read(grid, values, times):
    t = np.asarray(times, dtype=float).ravel()
    j = np.searchsorted(grid, t, side="right") - 1
    return np.where((j >= 0)[None, :], values[:, np.maximum(j, 0)], 0.0)


# ------------------------------------------------------------- Fine-Gray


@dataclass(frozen=True)
class ExpandedRows:
    """Counting-process rows of the Fine-Gray expansion.

    Attributes
    ----------
    patient : ndarray of int
        Row of the original data each expanded row belongs to.
    start, stop : ndarray
        The row is at risk on (start, stop].
    event : ndarray of bool
        Event of the cause of interest at ``stop``.
    weight : ndarray
        1 for a patient's own follow-up; G(u) / G(T_i-) after a competing
        event at T_i, on each interval (u, u'] between censoring times.
    """

    patient: np.ndarray
    start: np.ndarray
    stop: np.ndarray
    event: np.ndarray
    weight: np.ndarray


def expand_fine_gray(y, cause: int = 1) -> ExpandedRows:
    r"""Expand a competing-risks outcome for a weighted Cox fit of the subdistribution hazard.

    Every patient keeps a row (0, T_i] with weight 1 (event if the cause is
    ``cause``). A patient with a competing event at T_i gets further rows
    (u_j, u_{j+1}] cut at the censoring times after T_i, up to the last event
    time of ``cause`` (intervals that hold no event time of ``cause`` are left
    out: they enter no risk set), with weight :math:`\hat G(u_j) / \hat G(T_i-)`: so at
    any time t the weight is :math:`\hat G(t-) / \hat G(T_i-)`, the estimated
    probability of still being uncensored at t given uncensored at T_i.
    :math:`\hat G` is the Kaplan-Meier estimate of the censoring distribution
    (events leave the risk set before censorings at the same time:
    :func:`workbench.metrics._ipcw.fit_censoring`).

    References
    ----------
    Geskus RB. Cause-specific cumulative incidence estimation and the Fine and
    Gray model under both left truncation and right censoring. Biometrics
    2011;67:39-49.
    """
    time, c = split_competing(y)
    n = time.size
    own = c == int(cause)
    if not own.any():
        raise ModelError(f"no events of cause {cause} are recorded, so its subdistribution hazard cannot be modelled.")
    t_last = float(time[own].max())
    cens = fit_censoring(make_outcome(time, c > 0))
    cuts = cens.times[cens.censored > 0]
    comp = np.flatnonzero((c > 0) & ~own & (time < t_last))
    lo = np.searchsorted(cuts, time[comp], side="right")
    hi = np.searchsorted(cuts, t_last, side="left")
    m = np.maximum(hi - lo, 0) + 1  # interior cuts plus the final interval
    who = np.repeat(comp, m)
    pos = np.arange(who.size) - np.repeat(np.cumsum(m) - m, m)
    k = np.repeat(lo, m) + pos - 1  # index into cuts of the interval's start; -1 = T_i itself
    start = np.where(pos == 0, time[who], cuts[np.clip(k, 0, max(cuts.size - 1, 0))] if cuts.size else time[who])
    last = pos == np.repeat(m, m) - 1
    stop_idx = np.clip(k + 1, 0, max(cuts.size - 1, 0))
    stop = np.where(last, t_last, cuts[stop_idx] if cuts.size else t_last)
    g_start = cens.survival_at(start, left_limit=False, check_positive=False)
    g_entry = cens.survival_at(time[who], left_limit=True, check_positive=False)
    weight = g_start / g_entry
    # Only risk sets at event times of the cause count: an interval holding none of them
    # changes neither the likelihood nor the baseline, so it is left out.
    ev = np.unique(time[own])
    holds_event = np.searchsorted(ev, stop, side="right") > np.searchsorted(ev, start, side="right")
    keep = (weight > 0) & (stop > start) & holds_event
    return ExpandedRows(
        patient=np.r_[np.arange(n), who[keep]],
        start=np.r_[np.zeros(n), start[keep]],
        stop=np.r_[time, stop[keep]],
        event=np.r_[own, np.zeros(int(keep.sum()), bool)],
        weight=np.r_[np.ones(n), weight[keep]],
    )


@dataclass(frozen=True)
class FineGrayFit:
    """A Fine-Gray subdistribution hazard model of one cause.

    Attributes
    ----------
    cause : int
    cox : CoxPHFit
        The weighted Cox fit on the expanded rows: ``cox.coef`` are the log
        subdistribution hazard ratios and ``cox.baseline_cumhaz`` the baseline
        cumulative subdistribution hazard (at ``cox.x_mean``). Its ``se`` and
        ``cov`` are model-based, treating the weighted rows as independent
        patients: use ``se`` / ``cov`` of this object instead.
    cov : ndarray of shape (n_params, n_params)
        Robust (sandwich) covariance with the score residuals summed per
        patient (see :func:`fit_fine_gray`).
    """

    cause: int
    cox: CoxPHFit
    cov: np.ndarray

    @property
    def se(self) -> np.ndarray:
        """Robust standard errors of ``coef``."""
        return np.sqrt(np.clip(np.diag(self.cov), 0, None))

    @property
    def ci_lower(self) -> np.ndarray:
        """95% Wald limits of ``coef`` with the robust standard errors."""
        return self.coef - _Z95 * self.se

    @property
    def ci_upper(self) -> np.ndarray:
        return self.coef + _Z95 * self.se

    @property
    def coef(self) -> np.ndarray:
        return self.cox.coef

    @property
    def names(self) -> tuple[str, ...]:
        return self.cox.names


def fit_fine_gray(X, y, cause: int = 1, *, ties="efron", **cox_options) -> FineGrayFit:
    r"""Fit the Fine-Gray model of ``cause`` by weighted Cox regression on expanded rows.

    Parameters
    ----------
    X : DataFrame or array of shape (n_samples, n_params)
    y : competing-risks outcome
    cause : int, default 1
    ties : {"efron", "breslow"}
        Tied event times of ``cause``; Fine & Gray (1999) wrote the Breslow
        form. The baseline follows the same rule.
    **cox_options
        Passed on to :func:`workbench.stats.coxph.fit_coxph`.

    Returns
    -------
    FineGrayFit

    Notes
    -----
    Standard errors: the sandwich :math:`I^{-1} (\sum_i U_i U_i^\top) I^{-1}`,
    with :math:`I` the information of the weighted fit and :math:`U_i` patient
    i's score residuals (Breslow form) summed over all of its expanded rows.
    Like Geskus (2011), it treats the censoring weights as known, leaving out
    the term of Fine & Gray (1999) for their estimation;
    ``bench/bench_competing.py`` measures the coverage that results.

    References
    ----------
    Fine JP, Gray RJ. A proportional hazards model for the subdistribution of
    a competing risk. J Am Stat Assoc 1999;94:496-509.
    Geskus RB. Biometrics 2011;67:39-49.
    Lin DY, Wei LJ. The robust inference for the Cox proportional hazards
    model. J Am Stat Assoc 1989;84:1074-8.
    """
    rows = expand_fine_gray(y, cause)
    # A patient's own row is at risk from the start: entry -1 (before any time) keeps an
    # event at time 0 in its own risk set, which entry 0 on (0, time] would not.
    entry = rows.start.copy()
    entry[: _n_rows(X)] = -1.0
    cox = fit_coxph(
        _rows_of(X, rows.patient), rows.stop, rows.event, ties=ties, weights=rows.weight,
        entry=entry, **cox_options,
    )
    Xe = np.asarray(_rows_of(X, rows.patient), dtype=float)
    U = _score_residuals(cox, Xe.reshape(Xe.shape[0], -1), entry, rows.stop, rows.event, rows.weight)
    per_patient = np.zeros((_n_rows(X), U.shape[1]))
    np.add.at(per_patient, rows.patient, U)
    cov = cox.cov @ (per_patient.T @ per_patient) @ cox.cov
    return FineGrayFit(cause=int(cause), cox=cox, cov=cov)


def _score_residuals(cox: CoxPHFit, X, start, stop, event, weight) -> np.ndarray:
    r"""Weighted Breslow-form score residuals of counting-process rows, one row each.

    :math:`U_r = w_r\{\delta_r (x_r - ar x(t_r)) - e^{\eta_r} \sum_{t_k \in (s_r, t_r]}
    (x_r - ar x(t_k))\, d\hat\Lambda_0(t_k)\}`, with risk-set weighted means
    :math:`ar x` and Breslow increments :math:`d\hat\Lambda_0`.
    """
    keep = weight > 0
    X, start, stop, event, weight = X[keep], start[keep], stop[keep], event[keep], weight[keep]
    eta = (X - cox.x_mean) @ cox.coef
    r = weight * np.exp(eta - eta.max())
    tk = np.unique(stop[event])
    by_stop, by_start = np.argsort(stop), np.argsort(start)

    def at_or_after(keys_sorted, order, vals):  # sum of vals over rows with key >= t_k
        tail = np.vstack([np.cumsum(vals[order][::-1], axis=0)[::-1], np.zeros((1, vals.shape[1]))])
        return tail[np.searchsorted(keys_sorted, tk, side="left")]

    rv = np.column_stack([r, r[:, None] * X])
    risk = at_or_after(stop[by_stop], by_stop, rv) - at_or_after(start[by_start], by_start, rv)
    s0, xbar = risk[:, 0], risk[:, 1:] / risk[:, :1]
    d = np.bincount(np.searchsorted(tk, stop[event]), weights=weight[event], minlength=tk.size)
    dlam = d / s0  # in units of exp(-max eta), matching r
    c0 = np.r_[0.0, np.cumsum(dlam)]
    c1 = np.vstack([np.zeros((1, X.shape[1])), np.cumsum(xbar * dlam[:, None], axis=0)])
    i_stop = np.searchsorted(tk, stop, side="right")
    i_start = np.searchsorted(tk, start, side="right")
    comp = (r / weight)[:, None] * (X * (c0[i_stop] - c0[i_start])[:, None] - (c1[i_stop] - c1[i_start]))
    U_ev = np.zeros_like(X)
    U_ev[event] = X[event] - xbar[np.searchsorted(tk, stop[event])]
    out = np.zeros((keep.size, X.shape[1]))
    out[keep] = weight[:, None] * (U_ev - comp)
    return out


def predict_incidence_fine_gray(fit: FineGrayFit, X, times) -> IncidenceCurves:
    r"""Cumulative incidence :math:`1 - \exp(-\hat H_0(t)\, e^{\eta(x)})` of the Fine-Gray model.

    Returns
    -------
    IncidenceCurves of shape (n_samples, len(times))
    """
    surv = predict_survival(fit.cox, X, times)
    return IncidenceCurves(times=np.asarray(times, dtype=float), risks=1.0 - surv, cause=fit.cause)
