"""The Cox model that relates outcomes to predicted risks, for smoothed calibration and the slope.

The complementary log-log of predicted risk (:func:`_cloglog`), Harrell's restricted
cubic spline on it (:func:`_rcs_knots`, :func:`_rcs_basis`), the one Efron-ties Cox
adapter (:func:`_fit_cox`), and a Cox fit read at the horizon ``t0`` with the Breslow
baseline and a delta-method interval (:class:`_CoxAtHorizon`,
:func:`_fit_cox_at_horizon`). Used by :mod:`workbench.metrics.calibration`, and the
spline by the validation engine and the competing-risks calibration.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.stats import norm

from workbench.errors import MetricError, ModelError
from workbench.stats.coxph import fit_coxph

# Knot positions (quantiles) for restricted cubic splines, Harrell, Regression
# Modeling Strategies, 2nd ed., Section 2.4.6 (from memory).
_HARRELL_QUANTILES = {
    3: (0.10, 0.50, 0.90),
    4: (0.05, 0.35, 0.65, 0.95),
    5: (0.05, 0.275, 0.50, 0.725, 0.95),
    6: (0.05, 0.23, 0.41, 0.59, 0.77, 0.95),
    7: (0.025, 0.1833, 0.3417, 0.50, 0.6583, 0.8167, 0.975),
}
_EPS = 1e-12


def _fit_cox(X: np.ndarray, time: np.ndarray, event: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Coefficients and their covariance from an Efron-ties Cox model (the one Cox adapter)."""
    try:
        # The calibration model has one to a few spline terms; the events-per-parameter
        # warning meant for prognostic models would only confuse here.
        fit = fit_coxph(X, time, event, ties="efron", min_events_per_parameter=0.0)
    except ModelError as exc:
        raise MetricError(
            "the Cox model relating outcomes to predicted risks could not be fitted "
            f"({exc}). This usually means too few events or too little spread in the "
            "predictions at this horizon."
        ) from exc
    return np.asarray(fit.coef, dtype=float), np.asarray(fit.cov, dtype=float)


def _cloglog(risk: np.ndarray) -> np.ndarray:
    r = np.clip(risk, _EPS, 1.0 - _EPS)
    return np.log(-np.log1p(-r))


def _rcs_knots(x: np.ndarray, n_knots: int) -> np.ndarray:
    if n_knots not in _HARRELL_QUANTILES:
        raise MetricError(f"knots must be one of {sorted(_HARRELL_QUANTILES)}, got {n_knots!r}.")
    return np.unique(np.quantile(x, _HARRELL_QUANTILES[n_knots]))


def _rcs_basis(x: np.ndarray, knots: np.ndarray) -> np.ndarray:
    """Restricted cubic spline basis (linear term first), Harrell's parametrisation."""
    cols = [x]
    k = knots.size
    if k >= 3:
        t_last, t_prev = knots[-1], knots[-2]
        scale = (t_last - knots[0]) ** 2

        def cube(u):
            return np.maximum(u, 0.0) ** 3

        for tj in knots[: k - 2]:
            cols.append(
                (
                    cube(x - tj)
                    - cube(x - t_prev) * (t_last - tj) / (t_last - t_prev)
                    + cube(x - t_last) * (t_prev - tj) / (t_last - t_prev)
                )
                / scale
            )
    return np.column_stack(cols)


@dataclass(frozen=True)
class _CoxAtHorizon:
    """What is needed to predict risk at t0 (with a delta-method CI) from a Cox fit."""

    beta: np.ndarray
    cov: np.ndarray
    centre: np.ndarray
    h0: float  # Breslow baseline cumulative hazard at t0 (at the centre)
    a: float  # sum d_j / S0_j^2
    b: np.ndarray  # sum d_j S1_j / S0_j^2

    def risk(self, Z: np.ndarray, conf_level: float | None = None):
        zc = Z - self.centre
        log_h = np.log(self.h0) + zc @ self.beta
        risk = -np.expm1(-np.exp(log_h))
        if conf_level is None:
            return risk
        q = zc * self.h0 - self.b
        var = (self.a + np.einsum("ij,jk,ik->i", q, self.cov, q)) / self.h0**2
        half = norm.ppf(0.5 + conf_level / 2.0) * np.sqrt(np.maximum(var, 0.0))
        return risk, -np.expm1(-np.exp(log_h - half)), -np.expm1(-np.exp(log_h + half))


def _fit_cox_at_horizon(Z, time, event, t0) -> _CoxAtHorizon:
    beta, cov = _fit_cox(Z, time, event)
    centre = Z.mean(axis=0)
    zc = Z - centre
    order = np.argsort(time, kind="stable")
    ts, es, zs = time[order], event[order], zc[order]
    w = np.exp(zs @ beta)
    s0 = np.cumsum(w[::-1])[::-1]
    s1 = np.cumsum((w[:, None] * zs)[::-1], axis=0)[::-1]
    starts = np.flatnonzero(np.r_[True, ts[1:] != ts[:-1]])
    d = np.add.reduceat(es.astype(float), starts)
    keep = (ts[starts] <= t0) & (d > 0)
    d, s0, s1 = d[keep], s0[starts][keep], s1[starts][keep]
    return _CoxAtHorizon(
        beta=beta,
        cov=cov,
        centre=centre,
        h0=float(np.sum(d / s0)),
        a=float(np.sum(d / s0**2)),
        b=np.sum((d / s0**2)[:, None] * s1, axis=0),
    )
