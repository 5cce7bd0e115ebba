"""Kaplan-Meier, median follow-up and log-rank against published values and lifelines.

Sources
-------
- 6-MP vs placebo remission data: Freireich et al., Blood 1963, as shipped in
  ``lifelines.datasets.load_leukemia`` (Rx = 0 is 6-MP, Rx = 1 placebo). The
  Kaplan-Meier values, medians and log-rank numbers are the survival textbooks'
  worked example (weighted log-rank values from memory, checked against
  lifelines' weightings below).
- Second public datasets: ``lifelines.datasets.load_rossi`` (Rossi recidivism)
  and ``sksurv.datasets.load_gbsg2`` (GBSG2), compared with lifelines'
  KaplanMeierFitter and statistics module, and scikit-survival's estimator.
"""

import numpy as np
import pytest
from lifelines import KaplanMeierFitter
from lifelines.datasets import load_leukemia, load_rossi
from lifelines.statistics import logrank_test as lifelines_logrank
from lifelines.statistics import multivariate_logrank_test
from lifelines.utils import median_survival_times
from sksurv.datasets import load_gbsg2
from sksurv.nonparametric import kaplan_meier_estimator

from workbench.stats.km import (
    kaplan_meier,
    km_ci_at,
    median_survival,
    reverse_kaplan_meier_median_followup,
    survival_at,
)
from workbench.stats.logrank import logrank_test


@pytest.fixture(scope="module")
def leukemia():
    return load_leukemia()


@pytest.fixture(scope="module")
def rossi():
    return load_rossi()


@pytest.fixture(scope="module")
def gbsg2():
    _, y = load_gbsg2()
    return y["time"].astype(float), y["cens"].astype(bool)


# ------------------------------------------------------------ 6-MP worked example


def test_6mp_kaplan_meier_textbook_values(leukemia):
    # Published worked example (4 decimals): tolerance half a unit in the 4th decimal.
    arm = leukemia[leukemia.Rx == 0]
    r = kaplan_meier(arm.t, arm.status)
    weeks = [6, 7, 10, 13, 16, 22, 23]
    expected = [0.8571, 0.8067, 0.7529, 0.6902, 0.6275, 0.5378, 0.4482]
    np.testing.assert_allclose(survival_at(r, weeks), expected, atol=5e-5)


def test_6mp_and_placebo_medians(leukemia):
    # Published worked example: 23 weeks (6-MP) and 8 weeks (placebo).
    for rx, med in [(0, 23.0), (1, 8.0)]:
        arm = leukemia[leukemia.Rx == rx]
        assert median_survival(kaplan_meier(arm.t, arm.status)).median == med


def test_6mp_logrank_textbook(leukemia):
    # Published worked example: chi-square 16.79 on 1 df; 6-MP observed 9, expected 19.25.
    r = logrank_test(leukemia.t, leukemia.status, leukemia.Rx)
    assert r.df == 1
    assert r.statistic == pytest.approx(16.79, abs=5e-3)
    i = int(np.flatnonzero(r.groups == 0)[0])
    assert r.observed[i] == 9
    assert r.expected[i] == pytest.approx(19.25, abs=5e-3)
    assert r.observed.sum() == pytest.approx(r.expected.sum(), rel=1e-12)


@pytest.mark.parametrize(
    "weighting, textbook",
    [(None, 16.79), ("wilcoxon", 13.46), ("tarone-ware", 15.12), ("peto", 14.08)],
)
def test_6mp_weighted_logrank_vs_textbook_and_lifelines(leukemia, weighting, textbook):
    # Textbook values (weighted ones from memory, 2 decimals) and lifelines 0.30 to 1e-9.
    r = logrank_test(leukemia.t, leukemia.status, leukemia.Rx, weighting=weighting)
    assert r.statistic == pytest.approx(textbook, abs=5e-3)
    a, b = leukemia[leukemia.Rx == 0], leukemia[leukemia.Rx == 1]
    ref = lifelines_logrank(a.t, b.t, a.status, b.status, weightings=weighting)
    assert r.statistic == pytest.approx(ref.test_statistic, rel=1e-9)
    assert r.p_value == pytest.approx(ref.p_value, rel=1e-7)


@pytest.mark.parametrize("weighting", [None, "wilcoxon", "tarone-ware", "peto"])
def test_k_group_logrank_vs_lifelines_on_rossi(rossi, weighting):
    # lifelines multivariate_logrank_test, Rossi data, four prior-conviction groups.
    group = rossi.prio.clip(0, 3).to_numpy()
    r = logrank_test(rossi.week, rossi.arrest, group, weighting=weighting)
    ref = multivariate_logrank_test(rossi.week, group, rossi.arrest, weightings=weighting)
    assert r.df == 3
    assert r.statistic == pytest.approx(ref.test_statistic, rel=1e-9)
    assert r.p_value == pytest.approx(ref.p_value, rel=1e-7)


# ------------------------------------------------------------ second datasets vs lifelines


def _lifelines_km(time, event, weights=None):
    kmf = KaplanMeierFitter()
    kmf.fit(time, event, weights=weights)
    grid = kmf.timeline
    return kmf, grid


@pytest.mark.parametrize("dataset", ["rossi", "gbsg2"])
def test_km_and_loglog_ci_vs_lifelines(dataset, rossi, gbsg2):
    # lifelines KaplanMeierFitter: same product-limit estimate and Greenwood
    # log(-log) ("exponential Greenwood") interval; tolerance 1e-10.
    if dataset == "rossi":
        time, event = rossi.week.to_numpy(float), rossi.arrest.to_numpy(bool)
    else:
        time, event = gbsg2
    kmf, grid = _lifelines_km(time, event)
    r = kaplan_meier(time, event)
    np.testing.assert_allclose(survival_at(r, grid), kmf.survival_function_.iloc[:, 0], atol=1e-10)
    lo, hi = km_ci_at(r, grid)
    ci = kmf.confidence_interval_
    np.testing.assert_allclose(lo, ci.iloc[:, 0], atol=1e-10)
    np.testing.assert_allclose(hi, ci.iloc[:, 1], atol=1e-10)
    m = median_survival(r)
    ref_ci = median_survival_times(kmf.confidence_interval_).to_numpy().ravel()
    assert m.median == kmf.median_survival_time_
    np.testing.assert_array_equal([m.ci_lower, m.ci_upper], ref_ci)


def test_km_ci_vs_scikit_survival_gbsg2(gbsg2):
    # scikit-survival kaplan_meier_estimator with conf_type="log-log", tolerance 1e-10.
    time, event = gbsg2
    t_ref, s_ref, ci_ref = kaplan_meier_estimator(event, time, conf_type="log-log")
    r = kaplan_meier(time, event)
    np.testing.assert_allclose(r.times, t_ref)
    np.testing.assert_allclose(r.survival, s_ref, atol=1e-12)
    ok = r.survival > 0
    np.testing.assert_allclose(r.ci_lower[ok], ci_ref[0][ok], atol=1e-10)
    np.testing.assert_allclose(r.ci_upper[ok], ci_ref[1][ok], atol=1e-10)


def test_greenwood_se_from_lifelines_variance(gbsg2):
    # lifelines keeps the Greenwood sum sum d/(n(n-d)) as the cumulative sum used
    # for its interval; var S = S^2 * that sum (Greenwood 1926). Tolerance 1e-10.
    time, event = gbsg2
    kmf, grid = _lifelines_km(time, event)
    r = kaplan_meier(time, event)
    s = kmf.survival_function_.iloc[:, 0].to_numpy()
    gw = kmf._cumulative_sq_.to_numpy()
    idx = np.searchsorted(r.times, grid, side="right") - 1
    keep = idx >= 0
    np.testing.assert_allclose(r.std_err[idx[keep]], (s * np.sqrt(gw))[keep], atol=1e-10)


@pytest.mark.filterwarnings("ignore:It looks like your weights are not integers")
def test_weighted_km_vs_lifelines_weights(rossi):
    # lifelines KaplanMeierFitter(weights=...) with non-integer weights, tolerance 1e-10.
    rng = np.random.default_rng(20240601)
    w = rng.uniform(0.2, 3.0, len(rossi))
    time, event = rossi.week.to_numpy(float), rossi.arrest.to_numpy(bool)
    kmf, grid = _lifelines_km(time, event, weights=w)
    r = kaplan_meier(time, event, weights=w)
    np.testing.assert_allclose(survival_at(r, grid), kmf.survival_function_.iloc[:, 0], atol=1e-10)


@pytest.mark.parametrize("dataset", ["rossi", "gbsg2"])
def test_reverse_km_followup_vs_lifelines(dataset, rossi, gbsg2):
    # lifelines KaplanMeierFitter fitted with the event indicator flipped.
    if dataset == "rossi":
        time, event = rossi.week.to_numpy(float), rossi.arrest.to_numpy(bool)
    else:
        time, event = gbsg2
    kmf = KaplanMeierFitter().fit(time, ~event)
    m = reverse_kaplan_meier_median_followup(time, event)
    assert m.median == kmf.median_survival_time_
    ref_ci = median_survival_times(kmf.confidence_interval_).to_numpy().ravel()
    np.testing.assert_array_equal([m.ci_lower, m.ci_upper], ref_ci)
