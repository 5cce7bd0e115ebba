"""Random-effects pooling against statsmodels' meta-analysis functions and scipy.

Source: statsmodels.stats.meta_analysis.combine_effects(method_re="chi2") is the
DerSimonian-Laird estimator (statsmodels 0.14+ documentation), and its
"random effect wls" row with use_t=True the Hartung-Knapp-Sidik-Jonkman interval;
the REML value is
checked against a direct numerical maximisation of the restricted likelihood
with scipy.optimize. Data: log risk ratios and their variances computed from the
2x2 counts of the 13 BCG-vaccine trials (Colditz et al. 1994), counts recalled
from memory; the checks compare two computations on the same input, so they do
not depend on the counts being exact.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy import optimize, stats

from workbench.errors import MetricError
from workbench.validation.meta import predictive_interval, random_effects

# dat.bcg: tpos, tneg, cpos, cneg (13 trials)
BCG = np.array([
    [4, 119, 11, 128], [6, 300, 29, 274], [3, 228, 11, 209], [62, 13536, 248, 12619],
    [33, 5036, 47, 5761], [180, 1361, 372, 1079], [8, 2537, 10, 619], [505, 87886, 499, 87892],
    [29, 7470, 45, 7232], [17, 1699, 65, 1600], [186, 50448, 141, 27197], [5, 2493, 3, 2338],
    [27, 16886, 29, 17825],
], dtype=float)


def _log_rr():
    a, b, c, d = BCG.T
    y = np.log((a / (a + b)) / (c / (c + d)))
    v = 1 / a - 1 / (a + b) + 1 / c - 1 / (c + d)
    return y, v


def test_dersimonian_laird_matches_statsmodels():
    from statsmodels.stats.meta_analysis import combine_effects

    y, v = _log_rr()
    ref = combine_effects(y, v, method_re="chi2")
    res = random_effects(y, np.sqrt(v), transformed=True, method="dl", ci="normal", prediction="t")
    assert res.tau2 == pytest.approx(ref.tau2, abs=1e-6)
    assert res.mu == pytest.approx(ref.mean_effect_re, abs=1e-6)
    assert res.se_mu == pytest.approx(ref.sd_eff_w_re, abs=1e-6)
    assert res.q == pytest.approx(ref.q, abs=1e-6)
    assert res.i2 == pytest.approx(ref.i2, abs=1e-6)
    frame = ref.summary_frame()
    assert res.ci_lower == pytest.approx(frame.loc["random effect", "ci_low"], abs=1e-6)
    assert res.ci_upper == pytest.approx(frame.loc["random effect", "ci_upp"], abs=1e-6)
    # prediction interval: mu +- t_{k-2} sqrt(tau2 + se^2) (Riley, Higgins & Deeks, BMJ 2011)
    half = stats.t.ppf(0.975, y.size - 2) * np.sqrt(ref.tau2 + ref.sd_eff_w_re**2)
    assert res.pi_lower == pytest.approx(ref.mean_effect_re - half, abs=1e-6)
    assert res.pi_upper == pytest.approx(ref.mean_effect_re + half, abs=1e-6)


@pytest.mark.filterwarnings("ignore::statsmodels.tools.sm_exceptions.InvalidTestWarning")
def test_hartung_knapp_interval_matches_statsmodels():
    from statsmodels.stats.meta_analysis import combine_effects

    y, v = _log_rr()
    ref = combine_effects(y, v, method_re="chi2", use_t=True).summary_frame().loc["random effect wls"]
    res = random_effects(y, np.sqrt(v), transformed=True, method="dl", prediction="t")  # ci="hksj" is the default
    assert res.ci == "hksj"
    assert res.ci_lower == pytest.approx(ref["ci_low"], abs=1e-6)
    assert res.ci_upper == pytest.approx(ref["ci_upp"], abs=1e-6)


def test_reml_maximises_the_restricted_likelihood():
    y, v = _log_rr()

    def neg_restricted_loglik(tau2):
        w = 1 / (v + tau2)
        mu = np.sum(w * y) / np.sum(w)
        return 0.5 * (np.sum(np.log(v + tau2)) + np.log(np.sum(w)) + np.sum(w * (y - mu) ** 2))

    best = optimize.minimize_scalar(neg_restricted_loglik, bounds=(0, 5), method="bounded",
                                    options={"xatol": 1e-12})
    res = random_effects(y, np.sqrt(v), transformed=True, method="reml", prediction="t")
    assert res.tau2 == pytest.approx(best.x, abs=1e-6)


def test_back_transformed_scales():
    c = np.array([0.70, 0.74, 0.66, 0.80])
    se_logit = np.array([0.10, 0.12, 0.15, 0.09])
    res = random_effects(c, se_logit, scale="logit")
    logit = np.log(c / (1 - c))
    direct = random_effects(logit, se_logit, transformed=True, scale="logit")
    assert res.estimate == pytest.approx(1 / (1 + np.exp(-direct.mu)), abs=1e-12)
    assert 0.66 < res.estimate < 0.80 and res.ci_lower < res.estimate < res.ci_upper
    assert res.pi_lower <= res.ci_lower and res.pi_upper >= res.ci_upper
    two = random_effects(c[:2], se_logit[:2], scale="logit")
    assert np.isnan(two.pi_lower)  # k = 2: no prediction interval
    with pytest.raises(MetricError, match="prior scale"):
        random_effects(logit, se_logit, transformed=True)  # identity scale: units unknown, no default prior


def _predictive_by_grid(y, v, scale, level=0.95):
    """Independent computation of the half-normal-prior predictive interval on a 2-D grid.

    Unnormalised joint posterior of (mu, tau) under a flat prior on mu:
    prod N(y_i; mu, v_i + tau^2) * halfnormal(tau; scale), evaluated with scipy.stats on a
    fine (mu, tau) grid (no closed form for the mu integral is used). The predictive CDF of a
    new hospital's theta is the grid average of Phi((x - mu) / tau); its quantiles by brentq.
    """
    mu = np.linspace(y.min() - 1.5, y.max() + 1.5, 1201)
    tau = np.linspace(1e-6, 8 * scale, 801)
    m, t = np.meshgrid(mu, tau, indexing="ij")
    logp = sum(stats.norm.logpdf(yi, m, np.sqrt(vi + t**2)) for yi, vi in zip(y, v, strict=True)) \
        + stats.halfnorm.logpdf(t, scale=scale)
    p = np.exp(logp - logp.max()).ravel()
    p /= p.sum()
    m, t = m.ravel()[p > 1e-14], t.ravel()[p > 1e-14]
    p = p[p > 1e-14]

    def cdf(x):
        return float(np.sum(p * stats.norm.cdf((x - m) / t)))

    a = (1 - level) / 2
    return tuple(optimize.brentq(lambda x, q=q: cdf(x) - q, y.min() - 3, y.max() + 3, xtol=1e-7) for q in (a, 1 - a))


def test_predictive_interval_matches_a_direct_grid_integration():
    # five hospitals' logit C (invented numbers; the check compares two computations of one posterior)
    y = np.array([0.62, 0.95, 0.71, 1.10, 0.80])
    v = np.array([0.012, 0.009, 0.015, 0.010, 0.011])
    lo, hi = predictive_interval(y, v, prior_scale=0.5)
    ref_lo, ref_hi = _predictive_by_grid(y, v, 0.5)
    assert lo == pytest.approx(ref_lo, abs=1e-3) and hi == pytest.approx(ref_hi, abs=1e-3)  # grid step of the reference
    # it is wider than the plug-in t interval here: it carries the uncertainty of tau^2
    res = random_effects(y, np.sqrt(v), transformed=True, scale="logit")
    plug = random_effects(y, np.sqrt(v), transformed=True, scale="logit", prediction="t")
    assert res.pi_method == "bayes" and res.prior_scale == 0.5 and plug.pi_method == "t"
    assert res.mu == plug.mu and res.tau2 == plug.tau2


def test_predictive_interval_limits():
    """A tiny prior scale pins tau near 0: the interval tends to the fixed-effect mu +- z sqrt(1/sum w).
    With many precise hospitals it tends to mu +- z tau (textbook limits of the normal model)."""
    y = np.array([0.62, 0.95, 0.71, 1.10, 0.80])
    v = np.array([0.012, 0.009, 0.015, 0.010, 0.011])
    lo, hi = predictive_interval(y, v, prior_scale=1e-6)
    w = 1 / v
    mu = np.sum(w * y) / np.sum(w)
    half = stats.norm.ppf(0.975) / np.sqrt(np.sum(w))
    assert lo == pytest.approx(mu - half, abs=1e-4) and hi == pytest.approx(mu + half, abs=1e-4)
    rng = np.random.default_rng(3)
    theta = rng.normal(0.8, 0.2, 400)
    y_many = theta + rng.normal(0, 0.01, 400)
    lo, hi = predictive_interval(y_many, np.full(400, 1e-4), prior_scale=0.5)
    assert lo == pytest.approx(y_many.mean() - 1.96 * np.std(y_many), abs=0.02)
    assert hi == pytest.approx(y_many.mean() + 1.96 * np.std(y_many), abs=0.02)
