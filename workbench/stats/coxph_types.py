"""Frozen results of the Cox engine (:mod:`workbench.stats.coxph`): fit, tests, survival with limits."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

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
