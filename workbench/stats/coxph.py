"""Cox proportional-hazards engine: arrays in, frozen results out.

The partial likelihood, its gradient and information matrix are evaluated with
one sort and reverse cumulative sums over the time-ordered patients, so one
Newton-Raphson iteration costs O(n p^2) whatever the number of tied event
times. Efron's tie correction is handled by expanding every tied event time
into its correction terms (one per tied event) and folding those back onto the
patients with cumulative sums, so no Python loop runs over patients or tie
groups.

Case weights are frequency weights: a fit with integer weights equals the fit
on the data with each row repeated that many times, Efron ties included, which
is what bootstrap replicates need. For non-integer weights Efron's correction
uses the number of tied rows and their mean weight (the usual convention for
sampling weights).

Predictors are centred on their weighted means and divided by their weighted
standard deviations for the iterations; coefficients, covariance and the
baseline hazard are transformed back, and the baseline refers to a patient
with every predictor at its mean (``x_mean``) and zero offset.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass
from typing import Literal

import numpy as np
import pandas as pd
from scipy import linalg, special

from workbench.errors import ConvergenceWarning, LowEventsWarning, ModelError, SeparationWarning

__all__ = [
    "ChiSquareTest",
    "CoxPHFit",
    "SurvivalWithCI",
    "baseline_survival_at",
    "fit_coxph",
    "linear_predictor",
    "log_cumhaz_se",
    "predict_survival",
    "predict_survival_with_ci",
]

Ties = Literal["efron", "breslow"]


def _frozen(a, dtype=float) -> np.ndarray:
    a = np.array(a, dtype=dtype, copy=True)
    a.setflags(write=False)
    return a


def _join(names) -> str:
    names = [f"'{n}'" for n in names]
    return names[0] if len(names) == 1 else ", ".join(names[:-1]) + " and " + names[-1]


def _rows(mask: np.ndarray) -> str:
    # Spreadsheet numbering (header = row 1), the project's convention for messages.
    idx = np.flatnonzero(mask) + 2
    shown = ", ".join(str(i) for i in idx[:5])
    more = f" and {idx.size - 5} more" if idx.size > 5 else ""
    return f"row{'s' if idx.size > 1 else ''} {shown}{more} (spreadsheet numbering, header = row 1)"


# ----------------------------------------------------------------- results


@dataclass(frozen=True)
class ChiSquareTest:
    """A chi-square test: statistic, degrees of freedom and p-value."""

    statistic: float
    df: int
    p_value: float


@dataclass(frozen=True)
class CoxPHFit:
    """A fitted Cox proportional-hazards model (immutable; no training data kept).

    Attributes
    ----------
    coef, se : ndarray of shape (n_params,)
        Log hazard ratios per unit of each predictor and their model-based
        standard errors (inverse of the observed, penalised information).
    cov : ndarray of shape (n_params, n_params)
        Covariance matrix of ``coef``.
    z, p_value : ndarray of shape (n_params,)
        Wald z statistics and two-sided p-values.
    ci_lower, ci_upper : ndarray of shape (n_params,)
        95% Wald limits on the log hazard ratio scale (exponentiate for hazard
        ratios, or use ``hr_ci_lower`` / ``hr_ci_upper``).
    hazard_ratio : ndarray of shape (n_params,)
        ``exp(coef)``.
    loglik, loglik_null : float
        Log partial likelihood (without the penalty) at ``coef`` and at zero.
    lr_statistic, lr_df, lr_p_value : float, int, float
        Likelihood-ratio test against the model without predictors.
    score_test, wald_test : ChiSquareTest
        Score (log-rank type) test at zero and Wald test of all coefficients.
    n, n_events : float
        Sum of case weights over patients and over events (the plain counts
        when the fit is unweighted).
    converged : bool
    n_iter : int
        Newton-Raphson iterations taken.
    names : tuple of str
    ties, baseline_ties : str
        Tie handling of the likelihood and of the baseline hazard increments.
    penalty : float
        Ridge penalty on the standardised coefficients.
    baseline_times : ndarray of shape (n_times,)
        Unique event times.
    baseline_cumhaz : ndarray of shape (n_times,)
        Cumulative baseline hazard H0(t) at ``baseline_times`` for a patient
        at ``x_mean`` with zero offset (see :func:`fit_coxph` for the estimator).
    baseline_var : ndarray of shape (n_times,)
        Cumulative variance term of H0 with the coefficients held fixed.
    baseline_xbar : ndarray of shape (n_times, n_params)
        Cumulative hazard-weighted risk-set means, centred on ``x_mean``; the
        derivative of H0 with respect to the coefficients is ``-baseline_xbar``.
    x_mean, x_scale : ndarray of shape (n_params,)
        Weighted means (the centring vector of :func:`linear_predictor`) and
        weighted standard deviations used for internal standardisation.
    separated : tuple of str
        Predictors flagged for monotone likelihood (separation).
    """

    coef: np.ndarray
    se: np.ndarray
    cov: np.ndarray
    z: np.ndarray
    p_value: np.ndarray
    ci_lower: np.ndarray
    ci_upper: np.ndarray
    hazard_ratio: np.ndarray
    loglik: float
    loglik_null: float
    lr_statistic: float
    lr_df: int
    lr_p_value: float
    score_test: ChiSquareTest
    wald_test: ChiSquareTest
    n: float
    n_events: float
    converged: bool
    n_iter: int
    names: tuple[str, ...]
    ties: str
    baseline_ties: str
    penalty: float
    baseline_times: np.ndarray
    baseline_cumhaz: np.ndarray
    baseline_var: np.ndarray
    baseline_xbar: np.ndarray
    x_mean: np.ndarray
    x_scale: np.ndarray
    separated: tuple[str, ...] = ()

    @property
    def n_params(self) -> int:
        return self.coef.size

    @property
    def hr_ci_lower(self) -> np.ndarray:
        return np.exp(self.ci_lower)

    @property
    def hr_ci_upper(self) -> np.ndarray:
        return np.exp(self.ci_upper)

    def to_frame(self) -> pd.DataFrame:
        """Coefficient table, one row per predictor."""
        return pd.DataFrame(
            {
                "coef": self.coef,
                "hazard_ratio": self.hazard_ratio,
                "hr_ci_lower": self.hr_ci_lower,
                "hr_ci_upper": self.hr_ci_upper,
                "se": self.se,
                "z": self.z,
                "p_value": self.p_value,
            },
            index=pd.Index(self.names, name="predictor"),
        )


@dataclass(frozen=True)
class SurvivalWithCI:
    """Predicted survival with pointwise confidence limits, each (n_samples, n_times)."""

    times: np.ndarray
    survival: np.ndarray
    lower: np.ndarray
    upper: np.ndarray
    conf_level: float


# ------------------------------------------------------------ input checks


@dataclass(frozen=True)
class _Data:
    X: np.ndarray
    time: np.ndarray
    event: np.ndarray
    weights: np.ndarray
    offset: np.ndarray
    names: tuple[str, ...]
    integer_weights: bool
    rows: np.ndarray
    entry: np.ndarray | None = None


def _as_design(X, names) -> tuple[np.ndarray, tuple[str, ...]]:
    if isinstance(X, pd.DataFrame):
        cols = tuple(str(c) for c in X.columns)
        bad = [c for c, dt in zip(cols, X.dtypes, strict=True) if not (pd.api.types.is_numeric_dtype(dt) or pd.api.types.is_bool_dtype(dt))]
        if bad:
            raise ModelError(
                f"Predictor column(s) {_join(bad)} are not numeric. The Cox engine needs numbers: "
                "encode categories as 0/1 indicator columns first."
            )
        arr = X.to_numpy(dtype=float)
    else:
        arr = np.asarray(X, dtype=float)
        cols = None
        if arr.ndim == 1:
            arr = arr[:, None]
    if arr.ndim != 2:
        raise ModelError(f"The predictors must form a table (patients x predictors); got shape {arr.shape}.")
    if names is not None:
        names = tuple(str(n) for n in names)
        if len(names) != arr.shape[1]:
            raise ModelError(f"{len(names)} names were given for {arr.shape[1]} predictor columns; they must match.")
    else:
        names = cols if cols is not None else tuple(f"x{j + 1}" for j in range(arr.shape[1]))
    return arr, names


def _vector(v, n: int, what: str, default: float) -> np.ndarray:
    if v is None:
        return np.full(n, default)
    v = np.asarray(v, dtype=float).ravel()
    if v.size != n:
        raise ModelError(f"{what} has {v.size} values but there are {n} patients; they must match.")
    if not np.all(np.isfinite(v)):
        raise ModelError(f"{what} contains missing or infinite values in {_rows(~np.isfinite(v))}.")
    return v


def _prepare(X, time, event, weights=None, offset=None, names=None, entry=None) -> _Data:
    X, names = _as_design(X, names)
    n = X.shape[0]
    t = _vector(time, n, "The follow-up time", 0.0)
    if np.any(t < 0):
        raise ModelError(f"The follow-up time is negative in {_rows(t < 0)}; times must be zero or positive.")
    e = np.asarray(event).ravel()
    if e.size != n:
        raise ModelError(f"The event indicator has {e.size} values but there are {n} patients; they must match.")
    if e.dtype != bool:
        ef = np.asarray(e, dtype=float)
        if np.any(~np.isfinite(ef)) or np.any((ef != 0) & (ef != 1)):
            raise ModelError(
                f"The event indicator must be 1 (event) or 0 (censored); other values found in {_rows(~np.isin(ef, (0, 1)))}."
            )
        e = ef == 1
    nan = ~np.isfinite(X)
    if nan.any():
        j = int(np.flatnonzero(nan.any(axis=0))[0])
        cols = [names[k] for k in np.flatnonzero(nan.any(axis=0))]
        raise ModelError(
            f"Predictor {_join(cols)} has missing or infinite values (column '{names[j]}': {_rows(nan[:, j])}). "
            "The Cox model needs a value for every patient: impute or remove these rows before fitting."
        )
    w = _vector(weights, n, "The case weights", 1.0)
    if np.any(w < 0):
        raise ModelError(f"Case weights must not be negative; negative in {_rows(w < 0)}.")
    off = _vector(offset, n, "The offset", 0.0)
    ent = None
    if entry is not None:
        ent = _vector(entry, n, "The entry time", 0.0)
        late = (ent > t) | (e & (ent >= t))
        if late.any():
            raise ModelError(
                f"The entry time is not before the follow-up time in {_rows(late)}; a row is at risk "
                "on (entry, time], so entry must be earlier than time (and strictly earlier for an event)."
            )
    keep = w > 0
    if not keep.all():
        X, t, e, w, off = X[keep], t[keep], e[keep], w[keep], off[keep]
        ent = None if ent is None else ent[keep]
    if not np.any(e):
        raise ModelError(
            f"No events are recorded among the {int(keep.sum())} patients, so no hazard ratio can be estimated. "
            "Check the coding of the event column (1 = event such as death or relapse, 0 = censored)."
        )
    integer = bool(np.all(np.abs(w - np.rint(w)) < 1e-8))
    return _Data(X, t, e, w, off, names, integer, np.flatnonzero(keep), ent)


# --------------------------------------------------------- risk-set engine


@dataclass(frozen=True)
class _Terms:
    """Efron/Breslow correction terms: one row per (event time, tie index)."""

    group: np.ndarray
    frac: np.ndarray
    mult: np.ndarray


class _RiskSets:
    """Time-sorted layout of one data set; evaluates the partial likelihood."""

    def __init__(self, time, event, weights, integer_weights: bool, entry=None):
        order = np.argsort(time, kind="stable")
        self.order = order
        self.t, self.d, self.w = time[order], event[order], weights[order]
        self.ev_pos = np.flatnonzero(self.d)
        self.times, self.ev_starts, self.m = np.unique(
            self.t[self.ev_pos], return_index=True, return_counts=True
        )
        self.n_groups = self.times.size
        self.first = np.searchsorted(self.t, self.times, side="left")
        self.ev_group = np.repeat(np.arange(self.n_groups), self.m)
        self.wd = np.add.reduceat(self.w[self.ev_pos], self.ev_starts)
        self.n_groups_le = np.searchsorted(self.times, self.t, side="right")
        self.integer_weights = integer_weights
        # Delayed entry (counting-process rows): row i is at risk at event time s when
        # entry_i < s <= t_i, so the rows that entered at or after s are subtracted.
        self.late = None
        if entry is not None and np.any(entry[order] > 0):
            self.entry = entry[order]
            self.entry_order = np.argsort(self.entry, kind="stable")
            self.late = np.searchsorted(self.entry[self.entry_order], self.times, side="left")
            self.n_groups_le_entry = np.searchsorted(self.times, self.entry, side="right")

    def terms(self, ties: str) -> _Terms:
        G = self.n_groups
        if ties == "breslow":
            return _Terms(np.arange(G), np.zeros(G), self.wd.copy())
        # Frequency weights count as tied rows; otherwise rows carry their mean weight.
        size = np.rint(self.wd).astype(int) if self.integer_weights else self.m
        group = np.repeat(np.arange(G), size)
        tie_index = np.arange(group.size) - np.repeat(np.cumsum(size) - size, size)
        frac = tie_index / size[group]
        mult = np.ones(group.size) if self.integer_weights else (self.wd / self.m)[group]
        return _Terms(group, frac, mult)

    def evaluate(self, Xs, off, beta, terms: _Terms, hessian: bool = True):
        """Log partial likelihood, score and information at ``beta``.

        ``Xs`` and ``off`` are in sorted order. Returns (loglik, score, info,
        parts) where parts holds per-term risk sums for the baseline hazard.
        """
        eta = Xs @ beta + off
        shift = float(eta.max())
        r = self.w * np.exp(eta - shift)
        rX = r[:, None] * Xs
        S0 = np.cumsum(r[::-1])[::-1][self.first]
        S1 = np.cumsum(rX[::-1], axis=0)[::-1][self.first]
        if self.late is not None:
            eo = self.entry_order
            S0 = S0 - np.r_[np.cumsum(r[eo][::-1])[::-1], 0.0][self.late]
            S1 = S1 - np.vstack([np.cumsum(rX[eo][::-1], axis=0)[::-1], np.zeros((1, Xs.shape[1]))])[self.late]
        E0 = np.add.reduceat(r[self.ev_pos], self.ev_starts)
        E1 = np.add.reduceat(rX[self.ev_pos], self.ev_starts, axis=0)
        g, f, c = terms.group, terms.frac, terms.mult
        s0 = S0[g] - f * E0[g]
        a = (S1[g] - f[:, None] * E1[g]) / s0[:, None]
        wev = self.w[self.ev_pos]
        if not s0.min() > 1e-200:
            # Linear predictors spanning hundreds of log units (runaway coefficients)
            # underflow a risk set; report the point as unusable so the step is halved.
            return np.nan, None, None, (s0, a, shift)
        loglik = float(wev @ eta[self.ev_pos] - c @ (np.log(s0) + shift))
        score = wev @ Xs[self.ev_pos] - c @ a
        info = None
        if hessian:
            alpha = np.bincount(g, weights=c / s0, minlength=self.n_groups)
            gamma = np.bincount(g, weights=c * f / s0, minlength=self.n_groups)
            cum_alpha = np.concatenate([[0.0], np.cumsum(alpha)])
            diag = r * cum_alpha[self.n_groups_le]
            if self.late is not None:
                diag -= r * cum_alpha[self.n_groups_le_entry]
            diag[self.ev_pos] -= r[self.ev_pos] * gamma[self.ev_group]
            info = (Xs * diag[:, None]).T @ Xs - (a * c[:, None]).T @ a
        return loglik, score, info, (s0, a, shift)


def _solve(info, rhs):
    try:
        return linalg.cho_solve(linalg.cho_factor(info, check_finite=False), rhs, check_finite=False)
    except (linalg.LinAlgError, ValueError):
        return None


def _check_design(Xs, w, names):
    """Raise a plain-language error for constant or collinear predictor columns."""
    p = Xs.shape[1]
    if p == 0:
        return
    # Eigen-decomposition of the weighted correlation matrix: p x p, cheap for any n.
    gram = (Xs * (w / w.sum())[:, None]).T @ Xs
    evals, evecs = np.linalg.eigh(gram)
    small = evals < 1e-10 * max(evals[-1], 1.0)
    if small.any():
        involved = np.flatnonzero(np.any(np.abs(evecs[:, small]) > 1e-4, axis=1))
        raise ModelError(
            f"Predictors {_join([names[j] for j in involved])} are collinear: one of them is an exact "
            "combination of the others (for example indicator columns for every category of a variable, "
            "or the same measurement in two units), so their separate hazard ratios cannot be estimated. "
            "Remove one of them, or leave one category out as the reference."
        )


def _perfect_order(Xs, rs: _RiskSets) -> np.ndarray:
    """Columns whose value at every event is the extreme of its risk set."""
    rev_max = np.maximum.accumulate(Xs[::-1], axis=0)[::-1][rs.first]
    rev_min = np.minimum.accumulate(Xs[::-1], axis=0)[::-1][rs.first]
    xe = Xs[rs.ev_pos]
    tol = 1e-12
    spread = np.any(rev_max - rev_min > tol, axis=0)
    at_max = np.all(xe >= rev_max[rs.ev_group] - tol, axis=0)
    at_min = np.all(xe <= rev_min[rs.ev_group] + tol, axis=0)
    return spread & (at_max | at_min)


# -------------------------------------------------------------------- fit


def fit_coxph(
    X,
    time,
    event,
    *,
    ties: Ties = "efron",
    weights=None,
    offset=None,
    penalty: float = 0.0,
    max_iter: int = 50,
    tol: float = 1e-9,
    names=None,
    baseline_ties: Ties | None = None,
    min_events_per_parameter: float = 10.0,
    entry=None,
) -> CoxPHFit:
    r"""Fit a Cox proportional-hazards model by Newton-Raphson.

    Parameters
    ----------
    X : array-like or DataFrame of shape (n_samples, n_params)
        Numeric predictors (categories already as indicator columns). A
        DataFrame supplies the names. Zero columns fit the null model.
    time : array-like of shape (n_samples,)
        Follow-up times, finite and non-negative.
    event : array-like of shape (n_samples,)
        1/True for an event, 0/False for censoring.
    ties : {"efron", "breslow"}
        Approximation of the partial likelihood at tied event times.
    weights : array-like of shape (n_samples,), optional
        Non-negative case weights; integer weights act as repeated rows.
    offset : array-like of shape (n_samples,), optional
        Known part of the linear predictor, with coefficient fixed at one.
    penalty : float
        Ridge penalty :math:`\tfrac{\lambda}{2}\sum_j (\beta_j s_j)^2` with
        :math:`s_j` the weighted standard deviation of column j (so it acts on
        standardised coefficients). Zero gives the ordinary fit.
    max_iter : int
    tol : float
        Convergence when half the Newton decrement falls below
        ``tol * max(1, |loglik|)``.
    names : sequence of str, optional
        Predictor names for results and messages.
    baseline_ties : {"efron", "breslow"}, optional
        Increments of the baseline hazard; defaults to ``ties``. "breslow" gives
        :math:`d_k / \sum_{R_k} w_i e^{\eta_i}`; "efron" spreads each tied event
        time over its correction terms, :math:`\sum_{l<d_k} 1/(S_0 - \tfrac{l}{d_k} E_0)`,
        consistent with the Efron likelihood (for the null model it is the
        Fleming-Harrington estimator).
    min_events_per_parameter : float
        Threshold for :class:`LowEventsWarning` (common practice: 10); 0 disables.
    entry : array-like of shape (n_samples,), optional
        Entry times for counting-process rows (delayed entry): a row is at risk
        on (entry, time]. Used for time-varying weights, e.g. the Fine-Gray
        model on expanded data (:mod:`workbench.competing.regression`). The
        perfect-ordering separation check then compares with a superset of
        each risk set; the likelihood probe still applies.

    Returns
    -------
    CoxPHFit

    Warns
    -----
    ConvergenceWarning, SeparationWarning, LowEventsWarning

    Raises
    ------
    ModelError
        Missing values, no events, constant or collinear predictors.

    References
    ----------
    Cox DR. Regression models and life-tables. J R Stat Soc B 1972;34:187-220.
    Efron B. The efficiency of Cox's likelihood function for censored data.
    J Am Stat Assoc 1977;72:557-65.
    Breslow NE. Covariance analysis of censored survival data. Biometrics 1974;30:89-99.
    Heinze G, Schemper M. A solution to the problem of monotone likelihood in
    Cox regression. Biometrics 2001;57:114-9.
    """
    if ties not in ("efron", "breslow"):
        raise ModelError(f"ties must be 'efron' or 'breslow', not {ties!r}.")
    baseline_ties = ties if baseline_ties is None else baseline_ties
    if baseline_ties not in ("efron", "breslow"):
        raise ModelError(f"baseline_ties must be 'efron' or 'breslow', not {baseline_ties!r}.")
    if penalty < 0 or not np.isfinite(penalty):
        raise ModelError(f"The ridge penalty must be zero or positive, not {penalty}.")
    data = _prepare(X, time, event, weights, offset, names, entry)
    names = data.names
    n_par = data.X.shape[1]
    w = data.weights
    wsum = w.sum()
    x_mean = w @ data.X / wsum
    x_scale = np.sqrt(w @ (data.X - x_mean) ** 2 / wsum)
    const = x_scale <= 1e-12 * np.maximum(1.0, np.abs(x_mean))
    if const.any():
        j = int(np.flatnonzero(const)[0])
        raise ModelError(
            f"Predictor {_join([names[k] for k in np.flatnonzero(const)])} has the same value "
            f"({data.X[0, j]:g} for '{names[j]}') for every patient, so its hazard ratio cannot be "
            "estimated. Remove it from the model."
        )
    rs = _RiskSets(data.time, data.event, w, data.integer_weights, data.entry)
    Xs = ((data.X - x_mean) / x_scale)[rs.order]
    off = data.offset[rs.order]
    _check_design(Xs, rs.w, names)
    n_events = float(w[data.event].sum())
    if n_par and min_events_per_parameter > 0 and n_events / n_par < min_events_per_parameter:
        warnings.warn(
            f"Only {n_events:g} events for {n_par} model parameters ({n_events / n_par:.1f} per "
            f"parameter); common practice asks for at least {min_events_per_parameter:g}. Hazard ratios "
            "will be unstable and look better than they are: use fewer predictors or a penalised model.",
            LowEventsWarning,
            stacklevel=2,
        )
    terms = rs.terms(ties)
    beta = np.zeros(n_par)
    ll, score, info, _ = rs.evaluate(Xs, off, beta, terms)
    ll_null = ll
    if n_par:
        dead = np.diag(info) <= 1e-10 * n_events
        if dead.any():
            raise ModelError(
                f"Predictor {_join([names[j] for j in np.flatnonzero(dead)])} does not vary among the "
                "patients still at risk at any event time, so it carries no information on the hazard. "
                "Remove it, or check that it was recorded for patients with events."
            )
        step0 = _solve(info, score)
        score_stat = float(score @ step0) if step0 is not None else np.nan
    else:
        score_stat = 0.0

    def penalised(ll_, sc_, inf_, b):
        if penalty == 0:
            return ll_, sc_, inf_
        return ll_ - 0.5 * penalty * b @ b, sc_ - penalty * b, inf_ + penalty * np.eye(n_par)

    converged, n_iter = n_par == 0, 0
    pll, psc, pinf = penalised(ll, score, info, beta)
    while not converged and n_iter < max_iter:
        step = _solve(pinf, psc)
        if step is None:
            break
        decrement = float(psc @ step)
        if not np.isfinite(decrement):
            break
        size = 1.0
        for _ in range(40):
            cand = beta + size * step
            res = rs.evaluate(Xs, off, cand, terms)
            if not np.isfinite(res[0]):
                size /= 2
                continue
            cll, csc, cinf = penalised(res[0], res[1], res[2], cand)
            if np.isfinite(cll) and cll >= pll - 1e-12 * abs(pll) and np.all(np.isfinite(cinf)):
                break
            size /= 2
        else:
            break
        beta, ll, score, info = cand, res[0], res[1], res[2]
        pll, psc, pinf = cll, csc, cinf
        n_iter += 1
        converged = decrement / 2 <= tol * max(1.0, abs(pll))

    # Separation: a column that orders the events perfectly, or a coefficient so
    # large that pushing it further still does not lower the likelihood.
    flagged = _perfect_order(Xs, rs) if n_par else np.zeros(0, bool)
    for j in np.flatnonzero((np.abs(beta) > 3) & ~flagged):
        probe = beta.copy()
        probe[j] += np.sign(beta[j])
        ll_probe = rs.evaluate(Xs, off, probe, terms, hessian=False)[0]
        # An underflowing risk set (nan) means the predictor already spans hundreds of log units.
        if not ll_probe < ll - 1e-3:
            flagged[j] = True
    separated = tuple(names[j] for j in np.flatnonzero(flagged))
    if separated:
        warnings.warn(
            f"The hazard ratio for {_join(separated)} runs off towards zero or infinity (monotone "
            "likelihood, also called separation): the predictor almost perfectly sorts who has the event "
            "first among the patients at risk, so no finite estimate exists and its confidence interval "
            "is meaningless. Merge sparse categories, remove the predictor, or use a penalised fit.",
            SeparationWarning,
            stacklevel=2,
        )
    if not converged:
        warnings.warn(
            f"The Cox model did not converge after {n_iter} Newton-Raphson iterations "
            f"(maximum {max_iter}); the estimates may be unreliable. Look for separation, extreme "
            "predictor values or near-collinear predictors, or raise max_iter.",
            ConvergenceWarning,
            stacklevel=2,
        )

    cov_s = _solve(pinf, np.eye(n_par)) if n_par else np.zeros((0, 0))
    if cov_s is None:
        cov_s = np.linalg.pinv(pinf)
    inv_scale = 1.0 / x_scale
    coef = beta * inv_scale
    cov = cov_s * np.outer(inv_scale, inv_scale)
    se = np.sqrt(np.clip(np.diag(cov), 0, None))
    with np.errstate(divide="ignore", invalid="ignore"):
        z = coef / se
    z95 = float(special.ndtri(0.975))
    wald = float(beta @ pinf @ beta) if n_par else 0.0
    lr = 2.0 * (ll - ll_null)

    bterms = terms if baseline_ties == ties else rs.terms(baseline_ties)
    s0, a, shift = rs.evaluate(Xs, off, beta, bterms, hessian=False)[3]
    scaled = bterms.mult / s0 * np.exp(-shift)
    G = rs.n_groups
    dH = np.bincount(bterms.group, weights=scaled, minlength=G)
    dV = np.bincount(bterms.group, weights=scaled / s0 * np.exp(-shift), minlength=G)
    dQ = np.zeros((G, n_par))
    np.add.at(dQ, bterms.group, a * x_scale * scaled[:, None])

    return CoxPHFit(
        coef=_frozen(coef),
        se=_frozen(se),
        cov=_frozen(cov),
        z=_frozen(z),
        p_value=_frozen(2 * special.ndtr(-np.abs(z))),
        ci_lower=_frozen(coef - z95 * se),
        ci_upper=_frozen(coef + z95 * se),
        hazard_ratio=_frozen(np.exp(coef)),
        loglik=float(ll),
        loglik_null=float(ll_null),
        lr_statistic=float(lr),
        lr_df=n_par,
        lr_p_value=float(special.chdtrc(n_par, lr)) if n_par else 1.0,
        score_test=ChiSquareTest(score_stat, n_par, float(special.chdtrc(n_par, score_stat)) if n_par else 1.0),
        wald_test=ChiSquareTest(wald, n_par, float(special.chdtrc(n_par, wald)) if n_par else 1.0),
        n=float(wsum),
        n_events=n_events,
        converged=bool(converged),
        n_iter=n_iter,
        names=names,
        ties=ties,
        baseline_ties=baseline_ties,
        penalty=float(penalty),
        baseline_times=_frozen(rs.times),
        baseline_cumhaz=_frozen(np.cumsum(dH)),
        baseline_var=_frozen(np.cumsum(dV)),
        baseline_xbar=_frozen(np.cumsum(dQ, axis=0)),
        x_mean=_frozen(x_mean),
        x_scale=_frozen(x_scale),
        separated=separated,
    )


# ------------------------------------------------------------- prediction


def _design_for(fit: CoxPHFit, X) -> np.ndarray:
    if isinstance(X, pd.DataFrame) and set(fit.names) <= set(map(str, X.columns)):
        X = X.rename(columns=str)[list(fit.names)]
    arr, _ = _as_design(X, None)
    if arr.shape[1] != fit.n_params:
        raise ModelError(
            f"The new data have {arr.shape[1]} predictor columns but the model was fitted with "
            f"{fit.n_params} ({', '.join(fit.names) or 'none'}); supply the same columns in the same order."
        )
    bad = ~np.isfinite(arr)
    if bad.any():
        j = int(np.flatnonzero(bad.any(axis=0))[0])
        raise ModelError(
            f"Predictor '{fit.names[j]}' has missing or infinite values in {_rows(bad[:, j])}; "
            "a prediction needs every predictor."
        )
    return arr


def linear_predictor(fit: CoxPHFit, X, offset=None) -> np.ndarray:
    """Linear predictor ``(X - x_mean) @ coef + offset``, centred on the fit's means.

    Centring makes zero the prognosis of an average patient, the reference of
    ``baseline_cumhaz``; differences between patients, hazard ratios and
    concordance are unaffected by it.

    Returns
    -------
    ndarray of shape (n_samples,)
    """
    arr = _design_for(fit, X)
    lp = (arr - fit.x_mean) @ fit.coef
    if offset is not None:
        lp = lp + _vector(offset, arr.shape[0], "The offset", 0.0)
    return lp


def _cumhaz_at(fit: CoxPHFit, times, values) -> np.ndarray:
    t = np.asarray(times, dtype=float).ravel()
    if not np.all(np.isfinite(t)):
        raise ModelError("Prediction times must be finite numbers.")
    idx = np.searchsorted(fit.baseline_times, t, side="right") - 1
    out = np.where((idx >= 0)[(...,) + (None,) * (values.ndim - 1)], values[np.maximum(idx, 0)], 0.0)
    return out


def baseline_survival_at(fit: CoxPHFit, times) -> np.ndarray:
    """Baseline survival exp(-H0(t)) of a patient at ``x_mean``, a right-continuous step function.

    Before the first event time it is 1; after the last event time the last
    value is carried forward (no extrapolation).
    """
    return np.exp(-_cumhaz_at(fit, times, fit.baseline_cumhaz))


def predict_survival(fit: CoxPHFit, X, times, offset=None) -> np.ndarray:
    """Predicted survival S(t | x) = S0(t) ** exp(LP) on a time grid.

    Returns
    -------
    ndarray of shape (n_samples, n_times)
    """
    H0 = _cumhaz_at(fit, times, fit.baseline_cumhaz)
    return np.exp(-np.exp(linear_predictor(fit, X, offset))[:, None] * H0[None, :])


def log_cumhaz_se(fit: CoxPHFit, xc, H0, V0, Q) -> np.ndarray:
    """Delta-method SE of log H(t | x) from the baseline pieces (see :func:`predict_survival_with_ci`).

    ``xc`` are centred predictors (n_samples, n_params); ``H0``, ``V0`` and ``Q`` the
    baseline cumulative hazard, its variance term and the cumulative risk-set means
    over the interval of interest, (n_times,) and (n_times, n_params): read at t for
    S(t | x), or differences between t and s for survival over (s, t]. Returns
    (n_samples, n_times); 0 where H0 is 0.
    """
    with np.errstate(divide="ignore", invalid="ignore"):
        pos = H0 > 0
        qbar = np.where(pos[:, None], Q / np.where(pos, H0, 1.0)[:, None], 0.0)
        base = np.where(pos, V0 / np.where(pos, H0, 1.0) ** 2, 0.0)
    C = fit.cov
    quad = (
        np.einsum("ij,jk,ik->i", xc, C, xc)[:, None]
        - 2 * xc @ C @ qbar.T
        + np.einsum("tj,jk,tk->t", qbar, C, qbar)[None, :]
    )
    return np.sqrt(np.clip(base[None, :] + quad, 0, None))


def predict_survival_with_ci(fit: CoxPHFit, X, times, conf_level: float = 0.95, offset=None) -> SurvivalWithCI:
    r"""Predicted survival with pointwise delta-method limits on the log cumulative hazard.

    For a patient with centred predictors :math:`x` the variance of
    :math:`\log \hat H(t\mid x)` is approximated by

    .. math:: \frac{V_0(t)}{H_0(t)^2} + (x - \bar q(t))^\top \Sigma (x - \bar q(t)),

    with :math:`V_0(t) = \sum_{t_k \le t} d_k / S_0(t_k)^2` (the variance of the
    baseline with coefficients fixed), :math:`\bar q(t)` the hazard-weighted mean
    of the risk-set averages up to t (``baseline_xbar / baseline_cumhaz``) and
    :math:`\Sigma` the coefficient covariance. Limits
    :math:`\hat S^{\exp(\pm z\,\mathrm{se})}` stay inside [0, 1]. Before the first
    event time both limits equal 1.

    References
    ----------
    Tsiatis AA. A large sample study of Cox's regression model. Ann Stat 1981;9:93-108.
    Link CL. Confidence intervals for the survival function using Cox's
    proportional hazard model with covariates. Biometrics 1984;40:601-9.
    Therneau TM, Grambsch PM. Modeling Survival Data: Extending the Cox Model.
    Springer 2000, section 10.2.
    """
    if not 0 < conf_level < 1:
        raise ModelError(f"conf_level must lie between 0 and 1, not {conf_level}.")
    arr = _design_for(fit, X)
    xc = arr - fit.x_mean
    lp = xc @ fit.coef
    if offset is not None:
        lp = lp + _vector(offset, arr.shape[0], "The offset", 0.0)
    H0 = _cumhaz_at(fit, times, fit.baseline_cumhaz)
    V0 = _cumhaz_at(fit, times, fit.baseline_var)
    Q = _cumhaz_at(fit, times, fit.baseline_xbar)
    se = log_cumhaz_se(fit, xc, H0, V0, Q)
    surv = np.exp(-np.exp(lp)[:, None] * H0[None, :])
    zq = float(special.ndtri(0.5 + conf_level / 2))
    return SurvivalWithCI(
        times=_frozen(np.asarray(times, dtype=float).ravel()),
        survival=_frozen(surv),
        lower=_frozen(surv ** np.exp(zq * se)),
        upper=_frozen(surv ** np.exp(-zq * se)),
        conf_level=float(conf_level),
    )
