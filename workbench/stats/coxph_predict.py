"""Predictions from a fitted Cox model (:class:`~workbench.stats.coxph_types.CoxPHFit`).

Linear predictor, baseline and patient survival on a time grid, and pointwise
delta-method limits on the log cumulative hazard.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
from scipy import special

from workbench.errors import ModelError
from workbench.stats.coxph_engine import _as_design, _frozen, _rows, _vector
from workbench.stats.coxph_types import CoxPHFit, SurvivalWithCI

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
