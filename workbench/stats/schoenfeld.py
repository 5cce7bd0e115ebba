"""Schoenfeld residuals and the Grambsch-Therneau test of proportional hazards.

The fitted model keeps no training data, so the residuals are recomputed from
the fit and the data it was fitted on. Residuals follow the tie handling of the
fit (Efron residuals average the risk-set means over the tie-correction terms).
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass
from typing import Literal

import numpy as np
import pandas as pd
from scipy import stats

from workbench.errors import ModelError, ProportionalHazardsWarning
from workbench.stats.coxph_engine import _frozen, _join, _prepare, _RiskSets
from workbench.stats.coxph_types import CoxPHFit

__all__ = [
    "PHTestResult",
    "SchoenfeldResiduals",
    "proportional_hazards_test",
    "schoenfeld_residuals",
    "warn_if_nonproportional",
]

TimeTransform = Literal["km", "rank", "identity", "log"]
_TRANSFORMS = ("km", "rank", "identity", "log")


@dataclass(frozen=True)
class SchoenfeldResiduals:
    """Schoenfeld residuals, one row per event, sorted by event time.

    Attributes
    ----------
    names : tuple of str
    rows : ndarray of shape (n_event_rows,)
        Position (from 0) of each event row in the data passed in.
    event_times : ndarray of shape (n_event_rows,)
    weights : ndarray of shape (n_event_rows,)
        Case weights of the event rows (ones when unweighted).
    residuals : ndarray of shape (n_event_rows, n_params)
        Observed predictor value minus its expected value in the risk set.
    scaled : ndarray of shape (n_event_rows, n_params)
        Scaled residuals ``d * residuals @ cov + coef`` (d = weighted number
        of events); plotted against time they estimate beta_j(t).
    """

    names: tuple[str, ...]
    rows: np.ndarray
    event_times: np.ndarray
    weights: np.ndarray
    residuals: np.ndarray
    scaled: np.ndarray


@dataclass(frozen=True)
class PHTestResult:
    """Grambsch-Therneau test of proportional hazards, per term and global.

    Attributes
    ----------
    names : tuple of str
    statistic, p_value : ndarray of shape (n_params,)
        Chi-square statistic (1 df each) and p-value per term.
    df : ndarray of shape (n_params,)
    global_statistic, global_p_value : float
    global_df : int
    time_transform : str
    transformed_times : ndarray of shape (n_event_rows,)
        g(t) at each event row, the regressor of the test.
    residuals : SchoenfeldResiduals
        For plotting scaled residuals against time.
    """

    names: tuple[str, ...]
    statistic: np.ndarray
    df: np.ndarray
    p_value: np.ndarray
    global_statistic: float
    global_df: int
    global_p_value: float
    time_transform: str
    transformed_times: np.ndarray
    residuals: SchoenfeldResiduals

    def to_frame(self) -> pd.DataFrame:
        """Per-term table with a final 'GLOBAL' row."""
        return pd.DataFrame(
            {
                "statistic": [*self.statistic, self.global_statistic],
                "df": [*self.df, self.global_df],
                "p_value": [*self.p_value, self.global_p_value],
            },
            index=pd.Index([*self.names, "GLOBAL"], name="term"),
        )


def _check_data(fit: CoxPHFit, X, time, event, weights, offset):
    if isinstance(X, pd.DataFrame) and set(fit.names) <= set(map(str, X.columns)):
        X = X.rename(columns=str)[list(fit.names)]
    data = _prepare(X, time, event, weights, offset, None)
    if data.X.shape[1] != fit.n_params:
        raise ModelError(
            f"The data have {data.X.shape[1]} predictor columns but the model has {fit.n_params} "
            f"({', '.join(fit.names)}); pass the data the model was fitted on."
        )
    if fit.n_params == 0:
        raise ModelError("The model has no predictors, so there are no residuals to test.")
    return data


def schoenfeld_residuals(fit: CoxPHFit, X, time, event, *, weights=None, offset=None) -> SchoenfeldResiduals:
    """Schoenfeld residuals of a fitted Cox model on its training data.

    Parameters
    ----------
    fit : CoxPHFit
    X, time, event, weights, offset
        The data and options the model was fitted with.

    Returns
    -------
    SchoenfeldResiduals

    Raises
    ------
    ModelError
        If the data do not match the fit (the residuals of an unpenalised,
        converged fit sum to zero; a large sum means other data were passed).

    References
    ----------
    Schoenfeld D. Partial residuals for the proportional hazards regression
    model. Biometrika 1982;69:239-41.
    Grambsch PM, Therneau TM. Proportional hazards tests and diagnostics based
    on weighted residuals. Biometrika 1994;81:515-26.
    """
    return _residuals(fit, _check_data(fit, X, time, event, weights, offset))[0]


def _residuals(fit: CoxPHFit, data) -> tuple[SchoenfeldResiduals, _RiskSets]:
    rs = _RiskSets(data.time, data.event, data.weights, data.integer_weights)
    Xc = (data.X - fit.x_mean)[rs.order]
    terms = rs.terms(fit.ties)
    _, score, _, (_, a, _) = rs.evaluate(Xc, data.offset[rs.order], np.asarray(fit.coef), terms, hessian=False)
    if fit.penalty == 0 and fit.converged and float(score @ fit.cov @ score) > 1e-2:
        raise ModelError(
            "These data do not match the fitted model (its score equations are far from zero). "
            "Pass exactly the predictors, times, events, weights and offset the model was fitted with."
        )
    p = fit.n_params
    num = np.zeros((rs.n_groups, p))
    np.add.at(num, terms.group, a * terms.mult[:, None])
    den = np.bincount(terms.group, weights=terms.mult, minlength=rs.n_groups)
    expected = num / den[:, None]
    resid = Xc[rs.ev_pos] - expected[rs.ev_group]
    w_ev = rs.w[rs.ev_pos]
    scaled = fit.n_events * resid @ fit.cov + fit.coef
    res = SchoenfeldResiduals(
        names=fit.names,
        rows=_frozen(data.rows[rs.order[rs.ev_pos]], dtype=int),
        event_times=_frozen(rs.t[rs.ev_pos]),
        weights=_frozen(w_ev),
        residuals=_frozen(resid),
        scaled=_frozen(scaled),
    )
    return res, rs


def _transform_times(rs: _RiskSets, how: str) -> np.ndarray:
    t_ev = rs.t[rs.ev_pos]
    if how == "identity":
        return t_ev.astype(float)
    if how == "log":
        if np.any(t_ev <= 0):
            raise ModelError("The 'log' time transform needs event times above zero; use 'km' or 'rank'.")
        return np.log(t_ev)
    if how == "rank":
        # Tied event times share the average of the ranks they occupy.
        before = np.concatenate([[0.0], np.cumsum(rs.wd)[:-1]])
        return (before + (rs.wd + 1) / 2)[rs.ev_group]
    at_risk = np.cumsum(rs.w[::-1])[::-1][rs.first]
    km = np.cumprod(1.0 - rs.wd / at_risk)
    return (1.0 - km)[rs.ev_group]


def proportional_hazards_test(
    fit: CoxPHFit,
    X,
    time,
    event,
    *,
    time_transform: TimeTransform = "km",
    weights=None,
    offset=None,
) -> PHTestResult:
    r"""Test proportional hazards with scaled Schoenfeld residuals.

    With :math:`g_k` the transformed time of event k, :math:`r_k` its Schoenfeld
    residual vector, :math:`d` the number of events and :math:`V` the
    coefficient covariance, the score test for a linear trend in
    :math:`\beta(t)` against :math:`g(t)` is

    .. math:: T = \frac{d\, u^\top V u}{\sum_k (g_k - \bar g)^2},
              \qquad u = \sum_k (g_k - \bar g)\, r_k,

    chi-square with p df (global); the per-term statistic replaces
    :math:`u^\top V u` by :math:`(Vu)_j^2 / V_{jj}` (1 df). This uses the
    approximation of the per-event information by :math:`V^{-1}/d` proposed
    in the reference. No warning is raised here; see
    :func:`warn_if_nonproportional`.

    Parameters
    ----------
    fit : CoxPHFit
    X, time, event, weights, offset
        The data the model was fitted with.
    time_transform : {"km", "rank", "identity", "log"}
        g(t): one minus the Kaplan-Meier estimate at t (default), the rank of
        the event time (ties share their average rank), t, or log t.

    Returns
    -------
    PHTestResult

    References
    ----------
    Grambsch PM, Therneau TM. Proportional hazards tests and diagnostics based
    on weighted residuals. Biometrika 1994;81:515-26.
    """
    if time_transform not in _TRANSFORMS:
        raise ModelError(f"time_transform must be one of {', '.join(_TRANSFORMS)}; got {time_transform!r}.")
    res, rs = _residuals(fit, _check_data(fit, X, time, event, weights, offset))
    g = _transform_times(rs, time_transform)
    w = res.weights
    gc = g - (w @ g) / w.sum()
    ss = float(w @ gc**2)
    if ss <= 0:
        raise ModelError("All events happen at the same time, so a change of effect over time cannot be tested.")
    d = fit.n_events
    V = np.asarray(fit.cov)
    u = (w * gc) @ res.residuals
    Vu = V @ u
    per_term = d * Vu**2 / (np.diag(V) * ss)
    glob = float(d * u @ Vu / ss)
    p = fit.n_params
    return PHTestResult(
        names=fit.names,
        statistic=_frozen(per_term),
        df=_frozen(np.ones(p, dtype=int), dtype=int),
        p_value=_frozen(stats.chi2.sf(per_term, 1)),
        global_statistic=glob,
        global_df=p,
        global_p_value=float(stats.chi2.sf(glob, p)),
        time_transform=time_transform,
        transformed_times=_frozen(g),
        residuals=res,
    )


def warn_if_nonproportional(result: PHTestResult, *, alpha: float = 0.05, stacklevel: int = 2,
                            labels=None, model: str = "") -> tuple[str, ...]:
    """Warn with :class:`ProportionalHazardsWarning` when a term's test has p < alpha.

    Returns the names of the flagged terms (plus "GLOBAL" when the global test
    alone is below ``alpha``); an empty tuple means no warning was raised. ``labels``
    (a function of a design-column name) words the terms for people; ``model`` names
    the model in the message.
    """
    flagged = tuple(n for n, p in zip(result.names, result.p_value, strict=True) if p < alpha)
    if not flagged and result.global_p_value < alpha:
        flagged = ("GLOBAL",)
    if flagged:
        words = [labels(n) if labels is not None else n for n in flagged]
        which = "the model as a whole" if flagged == ("GLOBAL",) else _join(words)
        which = f"{which} in the {model} model" if model else which
        warnings.warn(
            f"The effect of {which} seems to change over follow-up (proportional-hazards test, "
            f"p < {alpha:g}, time scale '{result.time_transform}'), so a single hazard ratio may "
            "misdescribe it. Look at the scaled Schoenfeld residual plot; consider stratifying, "
            "splitting follow-up into periods, or a time-varying effect.",
            ProportionalHazardsWarning,
            stacklevel=stacklevel,
        )
    return flagged
