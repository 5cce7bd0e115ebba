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

The pieces: input checks and the risk-set engine (:mod:`.coxph_engine`), the
frozen results (:mod:`.coxph_types`) and predictions (:mod:`.coxph_predict`);
this module holds the Newton-Raphson fit and re-exports the public names.
"""

from __future__ import annotations

import warnings
from typing import Literal

import numpy as np
from scipy import special

from workbench.errors import ConvergenceWarning, LowEventsWarning, ModelError, SeparationWarning
from workbench.stats.coxph_engine import (
    _check_design,
    _frozen,
    _join,
    _perfect_order,
    _prepare,
    _RiskSets,
    _solve,
)
from workbench.stats.coxph_predict import (
    _cumhaz_at,  # noqa: F401  (used by the competing-risks absolute risk and conditional survival)
    _design_for,  # noqa: F401
    baseline_survival_at,
    linear_predictor,
    log_cumhaz_se,
    predict_survival,
    predict_survival_with_ci,
)
from workbench.stats.coxph_types import ChiSquareTest, CoxPHFit, SurvivalWithCI

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
