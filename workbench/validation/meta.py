"""Random-effects meta-analysis of performance across hospitals (or scanners).

Each hospital gives an estimate y_i with a within-hospital standard error s_i
on a scale where the sampling distribution is close to normal: the C-index on
the logit scale, the observed/expected ratio on the log scale, the calibration
slope and the Brier score as they are (Debray et al. 2017; Snell et al. 2018).
The random-effects model y_i ~ N(mu, s_i^2 + tau^2) is fitted by
DerSimonian-Laird (method of moments, the default) or REML (Fisher scoring).

Reported: the pooled mean mu with its confidence interval, tau^2, the
I^2 share of variation due to heterogeneity (Higgins & Thompson 2002), the
Q statistic, and the 95% prediction interval for the performance in a new
hospital (k >= 3). Everything is back-transformed to the natural scale.

Prediction interval. The usual plug-in interval mu +- t_{k-2} sqrt(tau^2 +
SE(mu)^2) (Higgins, Thompson & Spiegelhalter 2009; Riley, Higgins & Deeks 2011;
``prediction="t"``) treats the estimated tau^2 as known; with 5 to 10 hospitals
it covered a new hospital's C only 0.92-0.94 of the time (bench/
bench_meta_pi_variants.py), and no plug-in variant reached 0.95. The default,
``prediction="bayes"``, is the posterior predictive interval of the same
normal random-effects model with a flat prior on mu and a half-normal prior on
tau, integrated numerically over a grid of tau (the marginal posterior of tau
is available in closed form once mu is integrated out; Higgins, Thompson &
Spiegelhalter 2009, section 5; Roever et al. 2021 for half-normal priors on
tau - both recalled from memory): it carries the uncertainty of tau^2 that
the plug-in interval ignores. Prior scales (:data:`PRIOR_SCALES`) are weakly
informative on each pooling scale: 0.5 on the logit-C and log-O/E scales (a
prior median between-hospital SD of 0.34), the scale benchmarked for C
(coverage 0.969 at k = 5 and 0.945 at k = 10, bench/bench_meta_pi_variants.py);
0.5 for the calibration slope, 0.1 for the Brier score and 0.2 for the IPA
(natural units; not benchmarked).

The confidence interval of mu is by default the Hartung-Knapp-Sidik-Jonkman
interval, mu +- t_{k-1} sqrt(q / sum w*), q = sum w* (y - mu)^2 / (k - 1)
(Hartung & Knapp 2001; IntHout et al. 2014), as Debray et al. (2017) advise for
few hospitals: the normal interval under-covers there
(bench/bench_meta_coverage.py). ``ci="normal"`` gives mu +- z SE(mu).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import stats

from workbench.errors import MetricError

__all__ = ["MetaResult", "POOLING_SCALES", "PRIOR_SCALES", "predictive_interval", "prior_scale_for",
           "random_effects"]

POOLING_SCALES = {"harrell_c": "logit", "uno_c": "logit", "auc": "logit", "oe_ratio": "log",
                  "cal_slope": "identity", "brier": "identity", "ipa": "identity"}
"""Scale on which each metric family is pooled (metric name before any ``@horizon``)."""

PRIOR_SCALES = {"logit": 0.5, "log": 0.5, "cal_slope": 0.5, "brier": 0.1, "ipa": 0.2}
"""Scale of the half-normal prior on tau for the predictive interval: by pooling scale for
logit and log metrics, by metric family for metrics pooled as they are."""


def prior_scale_for(metric: str) -> float | None:
    """Half-normal prior scale on tau for a metric (name before any ``@horizon``), or None."""
    base = metric.split("@")[0]
    scale = POOLING_SCALES.get(base, "identity")
    return PRIOR_SCALES.get(base if scale == "identity" else scale)


_FWD = {"identity": lambda x: x, "log": np.log, "logit": lambda x: np.log(x / (1.0 - x))}
_BACK = {"identity": lambda x: x, "log": np.exp, "logit": lambda x: 1.0 / (1.0 + np.exp(-x))}


@dataclass(frozen=True)
class MetaResult:
    """Random-effects pooling of k per-hospital estimates (natural scale unless said).

    Attributes
    ----------
    scale : {"identity", "log", "logit"}
    method : {"dl", "reml"}
    ci : {"hksj", "normal"}
    k : int
    estimate, ci_lower, ci_upper : float
        Pooled mean and its confidence interval.
    pi_lower, pi_upper : float
        Prediction interval for a new hospital (NaN when k < 3).
    pi_method : {"bayes", "t"}
        Half-normal-prior predictive interval or plug-in t interval on k - 2 df.
    prior_scale : float
        Scale of the half-normal prior on tau ("bayes"; NaN for "t").
    tau2 : float
        Between-hospital variance on the pooling scale.
    i2 : float
        Share of the total variation due to heterogeneity (0 to 1).
    q, q_p : float
        Cochran's Q and its chi-square p-value on k - 1 df.
    mu, se_mu : float
        Pooled mean and its standard error on the pooling scale.
    """

    scale: str
    method: str
    ci: str
    k: int
    estimate: float
    ci_lower: float
    ci_upper: float
    pi_lower: float
    pi_upper: float
    tau2: float
    i2: float
    q: float
    q_p: float
    mu: float
    se_mu: float
    pi_method: str = "bayes"
    prior_scale: float = float("nan")


def predictive_interval(y, v, prior_scale: float, conf_level: float = 0.95, n_grid: int = 600) -> tuple[float, float]:
    """Posterior predictive interval for a new hospital's true value (pooling scale).

    Model: y_i ~ N(theta_i, v_i), theta_i ~ N(mu, tau^2); prior flat on mu and
    half-normal(``prior_scale``) on tau. With mu integrated out, the marginal
    posterior of tau is proportional to
    ``p(tau) prod(v_i + tau^2)^(-1/2) (sum w)^(-1/2) exp(-Q(tau) / 2)``,
    w_i = 1 / (v_i + tau^2), Q(tau) = sum w_i (y_i - mu(tau))^2, mu(tau) the
    weighted mean; given tau, a new hospital's theta is
    N(mu(tau), 1 / sum w + tau^2). The predictive distribution is that normal
    mixed over the posterior of tau (trapezoidal rule on ``n_grid`` points up to
    the prior's 1 - 1e-9 quantile); its quantiles are found by bisection.
    """
    y, v = np.asarray(y, dtype=float), np.asarray(v, dtype=float)
    upper = prior_scale * stats.norm.ppf(1.0 - 0.5e-9)
    tau = np.linspace(0.0, upper, n_grid)
    w = 1.0 / (v[None, :] + tau[:, None] ** 2)
    sw = w.sum(1)
    mu = (w * y).sum(1) / sw
    log_post = (0.5 * np.log(w).sum(1) - 0.5 * np.log(sw) - 0.5 * (w * (y[None, :] - mu[:, None]) ** 2).sum(1)
                - 0.5 * (tau / prior_scale) ** 2)
    p = np.exp(log_post - log_post.max())
    p[[0, -1]] *= 0.5  # trapezoidal weights on an even grid
    p /= p.sum()
    sd = np.sqrt(1.0 / sw + tau**2)

    def cdf(x: float) -> float:
        return float(np.sum(p * stats.norm.cdf((x - mu) / sd)))

    a = (1.0 - conf_level) / 2.0
    span = (float((mu - 10 * sd).min()), float((mu + 10 * sd).max()))
    out = []
    for target in (a, 1.0 - a):
        lo, hi = span
        for _ in range(100):
            mid = 0.5 * (lo + hi)
            lo, hi = (mid, hi) if cdf(mid) < target else (lo, mid)
            if hi - lo < 1e-10 * max(1.0, abs(mid)):
                break
        out.append(0.5 * (lo + hi))
    return out[0], out[1]


def _reml_tau2(y, v, start: float, max_iter: int = 200, tol: float = 1e-12) -> float:
    tau2 = start
    for _ in range(max_iter):
        w = 1.0 / (v + tau2)
        mu = np.sum(w * y) / np.sum(w)
        # Fisher scoring step of the restricted likelihood (Viechtbauer 2005, eq. 12 form)
        new = np.sum(w**2 * ((y - mu) ** 2 - v)) / np.sum(w**2) + 1.0 / np.sum(w)
        new = max(new, 0.0)
        if abs(new - tau2) < tol:
            return new
        tau2 = new
    return tau2


def random_effects(values, std_errors, *, scale: str = "identity", method: str = "dl", ci: str = "hksj",
                   conf_level: float = 0.95, transformed: bool = False, prediction: str = "bayes",
                   prior_scale: float | None = None) -> MetaResult:
    """Pool per-hospital estimates by a random-effects meta-analysis.

    Parameters
    ----------
    values : array-like of shape (k,)
        Per-hospital estimates, on the natural scale (or on the pooling scale
        when ``transformed`` is True).
    std_errors : array-like of shape (k,)
        Their standard errors ON THE POOLING SCALE.
    scale : {"identity", "log", "logit"}
    method : {"dl", "reml"}
        DerSimonian-Laird or restricted maximum likelihood for tau^2.
    ci : {"hksj", "normal"}
        Confidence interval of the pooled mean: Hartung-Knapp-Sidik-Jonkman
        (t on k - 1 df, default) or normal.
    conf_level : float
    transformed : bool
        ``values`` are already on the pooling scale.
    prediction : {"bayes", "t"}
        Prediction interval for a new hospital: posterior predictive with a
        half-normal prior on tau (default, :func:`predictive_interval`) or the
        plug-in t interval on k - 2 df.
    prior_scale : float, optional
        Scale of the half-normal prior on tau (pooling scale); default
        ``PRIOR_SCALES[scale]`` for logit and log scales. Needed for the
        identity scale, where units differ between metrics.

    Returns
    -------
    MetaResult

    References
    ----------
    .. [1] DerSimonian R, Laird N. Meta-analysis in clinical trials. Control
           Clin Trials 1986;7:177-88.
    .. [2] Higgins JPT, Thompson SG, Spiegelhalter DJ. A re-evaluation of
           random-effects meta-analysis. J R Stat Soc A 2009;172:137-59.
    .. [3] Riley RD, Higgins JPT, Deeks JJ. Interpretation of random effects
           meta-analyses. BMJ 2011;342:d549.
    .. [4] Debray TPA et al. A guide to systematic review and meta-analysis of
           prediction model performance. BMJ 2017;356:i6460.
    .. [5] Riley RD et al. External validation of clinical prediction models
           using big datasets from e-health records or IPD meta-analysis:
           opportunities and challenges. BMJ 2016;353:i3140.
    .. [6] Hartung J, Knapp G. A refined method for the meta-analysis of
           controlled clinical trials with binary outcome. Stat Med
           2001;20:3875-89.
    """
    if scale not in _FWD:
        raise MetricError(f"unknown pooling scale {scale!r}; choose identity, log or logit.")
    if method not in ("dl", "reml"):
        raise MetricError(f"unknown random-effects method {method!r}; choose 'dl' or 'reml'.")
    if prediction not in ("bayes", "t"):
        raise MetricError(f"unknown prediction interval {prediction!r}; choose 'bayes' or 't'.")
    if prediction == "bayes":
        prior_scale = PRIOR_SCALES.get(scale) if prior_scale is None else float(prior_scale)
        if prior_scale is None or not (np.isfinite(prior_scale) and prior_scale > 0):
            raise MetricError(f"the predictive interval needs a positive prior scale for tau on the {scale} scale; "
                              "pass prior_scale (see PRIOR_SCALES).")
    else:
        prior_scale = float("nan")
    if ci not in ("hksj", "normal"):
        raise MetricError(f"unknown interval {ci!r} for the pooled mean; choose 'hksj' or 'normal'.")
    y = np.asarray(values, dtype=float)
    s = np.asarray(std_errors, dtype=float)
    if y.shape != s.shape or y.ndim != 1:
        raise MetricError("values and std_errors must be 1-D arrays of the same length.")
    if not transformed:
        with np.errstate(divide="ignore", invalid="ignore"):
            y = _FWD[scale](y)
    keep = np.isfinite(y) & np.isfinite(s) & (s > 0)
    y, v = y[keep], s[keep] ** 2
    k = int(y.size)
    if k < 2:
        raise MetricError(f"random-effects pooling needs at least 2 hospitals with a finite estimate and SE; got {k}.")
    w = 1.0 / v
    mu_fe = np.sum(w * y) / np.sum(w)
    q = float(np.sum(w * (y - mu_fe) ** 2))
    tau2 = max(0.0, (q - (k - 1)) / (np.sum(w) - np.sum(w**2) / np.sum(w)))
    if method == "reml":
        tau2 = _reml_tau2(y, v, tau2)
    ws = 1.0 / (v + tau2)
    mu = float(np.sum(ws * y) / np.sum(ws))
    se_mu = float(np.sqrt(1.0 / np.sum(ws)))
    if ci == "hksj":
        q_hk = float(np.sum(ws * (y - mu) ** 2) / (k - 1))
        half_ci = stats.t.ppf(0.5 + conf_level / 2.0, k - 1) * np.sqrt(q_hk / np.sum(ws))
    else:
        half_ci = stats.norm.ppf(0.5 + conf_level / 2.0) * se_mu
    if k >= 3 and prediction == "bayes":
        pi = predictive_interval(y, v, prior_scale, conf_level)
    elif k >= 3:
        t = stats.t.ppf(0.5 + conf_level / 2.0, k - 2)
        half = t * np.sqrt(tau2 + se_mu**2)
        pi = (mu - half, mu + half)
    else:
        pi = (np.nan, np.nan)
    back = _BACK[scale]
    return MetaResult(
        scale=scale, method=method, ci=ci, k=k, estimate=float(back(mu)),
        ci_lower=float(back(mu - half_ci)), ci_upper=float(back(mu + half_ci)),
        pi_lower=float(back(pi[0])), pi_upper=float(back(pi[1])), tau2=float(tau2),
        i2=float(max(0.0, (q - (k - 1)) / q)) if q > 0 else 0.0,
        q=q, q_p=float(stats.chi2.sf(q, k - 1)), mu=mu, se_mu=se_mu, pi_method=prediction,
        prior_scale=float(prior_scale),
    )


def transform(values, scale: str) -> np.ndarray:
    """Values on the pooling scale (NaN where undefined)."""
    with np.errstate(divide="ignore", invalid="ignore"):
        return _FWD[scale](np.asarray(values, dtype=float))
