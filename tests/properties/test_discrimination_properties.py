"""Properties of the discrimination metrics (hypothesis) and standard-error checks.

Brute-force pair definitions below are the textbook definitions of Harrell's C
(Harrell et al., JAMA 1982), Uno's C (Uno et al., Stat Med 2011) and the
cumulative/dynamic AUC (Uno et al., JASA 2007), written as O(n^2) loops over
pairs on small samples only, to check the fast pair counting.
"""

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from workbench.cohort.outcome import make_outcome
from workbench.errors import MetricError
from workbench.metrics._ipcw import fit_censoring
from workbench.metrics.concordance import harrell_c, uno_c
from workbench.metrics.td_auc import time_dependent_auc
from workbench.predictions import RiskScores, SurvivalCurves

SETTINGS = settings(max_examples=40, deadline=None, suppress_health_check=[HealthCheck.too_slow])


@st.composite
def cohorts(draw, min_size=4, max_size=40):
    """Small cohorts with tied integer times, tied scores and at least one event."""
    n = draw(st.integers(min_size, max_size))
    time = np.array(draw(st.lists(st.integers(1, 15), min_size=n, max_size=n)), dtype=float)
    event = np.array(draw(st.lists(st.booleans(), min_size=n, max_size=n)))
    event[draw(st.integers(0, n - 1))] = True
    score = np.array(draw(st.lists(st.integers(-6, 6), min_size=n, max_size=n)), dtype=float)
    return time, event, score


def _comparable(time, event):
    ti, tj = time[:, None], time[None, :]
    return event[:, None] & ((ti < tj) | ((ti == tj) & ~event[None, :]))


def _brute_harrell(time, event, score, w=None):
    comp = _comparable(time, event)
    if w is not None:
        comp = comp * w[:, None]
    k = (score[:, None] > score[None, :]) + 0.5 * (score[:, None] == score[None, :])
    return np.sum(comp * k) / np.sum(comp)


def _brute_auc(time, event, score, t, g_minus):
    case = event & (time <= t)
    ctrl = time > t
    k = (score[:, None] > score[None, :]) + 0.5 * (score[:, None] == score[None, :])
    w = np.where(case, 1.0 / np.where(case, g_minus, 1.0), 0.0)
    return np.sum(w[:, None] * ctrl[None, :] * k) / (w.sum() * ctrl.sum())


def _has_pairs(time, event):
    return _comparable(time, event).any()


def _inner_horizon(time, event):
    """A horizon strictly inside follow-up with at least one case, or None."""
    cand = np.unique(time[event])
    cand = cand[(cand > time.min()) & (cand < time.max())]
    return None if cand.size == 0 else float(cand[0])


# ------------------------------------------------------------ agreement with definitions


@SETTINGS
@given(cohorts())
def test_harrell_equals_pairwise_definition(c):
    time, event, score = c
    if not _has_pairs(time, event):
        return
    res = harrell_c(make_outcome(time, event), RiskScores(score))
    assert res.c_index == pytest.approx(_brute_harrell(time, event, score), abs=1e-12)
    assert res.comparable == int(_comparable(time, event).sum())
    assert res.concordant + res.discordant + res.tied_risk == res.comparable


@SETTINGS
@given(cohorts())
def test_uno_equals_pairwise_definition(c):
    time, event, score = c
    y = make_outcome(time, event)
    tau = float(np.median(time)) + 0.5
    use = event & (time < tau)
    if not (_comparable(time, event) & use[:, None]).any():
        return
    g = fit_censoring(y).survival_at(time, left_limit=True, check_positive=False)
    w = np.where(use, 1.0 / np.where(use, g, 1.0) ** 2, 0.0)
    res = uno_c(y, y, RiskScores(score), tau=tau)
    assert res.c_index == pytest.approx(_brute_harrell(time, event, score, w), abs=1e-12)


@SETTINGS
@given(cohorts(min_size=6))
def test_auc_equals_pairwise_definition(c):
    time, event, score = c
    t = _inner_horizon(time, event)
    if t is None:
        return
    y = make_outcome(time, event)
    g = fit_censoring(y).survival_at(time, left_limit=True, check_positive=False)
    res = time_dependent_auc(y, y, RiskScores(score), t)
    assert res.auc[0] == pytest.approx(_brute_auc(time, event, score, t, g), abs=1e-12)
    assert 0.0 <= res.auc[0] <= 1.0
    assert np.isfinite(res.std_err[0]) and res.std_err[0] >= 0


# ------------------------------------------------------------ invariances


TRANSFORMS = [
    lambda s: 2.0 * s + 7.0,
    lambda s: s**3 + s,
    lambda s: np.exp(s / 3.0) + s,
]


@SETTINGS
@given(cohorts(min_size=6), st.sampled_from(TRANSFORMS))
def test_increasing_transform_leaves_c_and_auc_unchanged(c, f):
    time, event, score = c
    if not _has_pairs(time, event):
        return
    y = make_outcome(time, event)
    a, b = RiskScores(score), RiskScores(f(score))
    assert harrell_c(y, a).c_index == pytest.approx(harrell_c(y, b).c_index, abs=1e-12)
    assert uno_c(y, y, a).c_index == pytest.approx(uno_c(y, y, b).c_index, abs=1e-12)
    t = _inner_horizon(time, event)
    if t is not None:
        assert time_dependent_auc(y, y, a, t).auc[0] == pytest.approx(
            time_dependent_auc(y, y, b, t).auc[0], abs=1e-12
        )


@SETTINGS
@given(cohorts(min_size=6), st.sampled_from([1 / 365.25, 12.0, 30.4375]))
def test_rescaling_time_leaves_c_and_auc_unchanged(c, factor):
    time, event, score = c
    if not _has_pairs(time, event):
        return
    y, ys = make_outcome(time, event), make_outcome(time * factor, event)
    r = RiskScores(score)
    assert harrell_c(y, r).c_index == pytest.approx(harrell_c(ys, r).c_index, abs=1e-12)
    tau = float(time.max()) + 1.0
    assert uno_c(y, y, r, tau=tau).c_index == pytest.approx(
        uno_c(ys, ys, r, tau=tau * factor).c_index, abs=1e-12
    )
    t = _inner_horizon(time, event)
    if t is not None:
        a, b = time_dependent_auc(y, y, r, t), time_dependent_auc(ys, ys, r, t * factor)
        assert a.auc[0] == pytest.approx(b.auc[0], abs=1e-12)
        assert a.std_err[0] == pytest.approx(b.std_err[0], abs=1e-12)


@SETTINGS
@given(st.lists(st.integers(1, 10_000), min_size=5, max_size=40, unique=True), st.data())
def test_perfect_and_reversed_ranking(times, data):
    # distinct times in steps of 0.01: scores that differ by less than the tie tolerance
    # (e.g. 0.1 and 0.1 + 2e-17) would count as tied risks, not as a perfect ranking
    time = np.array(times, dtype=float) / 100.0
    event = np.array(data.draw(st.lists(st.booleans(), min_size=time.size, max_size=time.size)))
    event[np.argmin(time)] = True  # guarantees a comparable pair
    y = make_outcome(time, event)
    assert harrell_c(y, RiskScores(-time)).c_index == 1.0
    assert harrell_c(y, RiskScores(time)).c_index == 0.0
    assert uno_c(y, y, RiskScores(-time)).c_index == pytest.approx(1.0, abs=1e-12)
    t = _inner_horizon(time, event)
    if t is not None:
        assert time_dependent_auc(y, y, RiskScores(-time), t).auc[0] == pytest.approx(1.0)
        assert time_dependent_auc(y, y, RiskScores(time), t).auc[0] == pytest.approx(0.0)


@SETTINGS
@given(cohorts(min_size=6))
def test_bounds_and_symmetry(c):
    time, event, score = c
    if not _has_pairs(time, event):
        return
    y = make_outcome(time, event)
    a, b = harrell_c(y, RiskScores(score)), harrell_c(y, RiskScores(-score))
    assert 0.0 <= a.c_index <= 1.0
    # Reversing the score swaps concordant and discordant pairs (definition).
    assert a.c_index + b.c_index == pytest.approx(1.0, abs=1e-12)
    assert (a.concordant, a.discordant) == (b.discordant, b.concordant)
    assert 0.0 <= a.ci_lower <= a.c_index <= a.ci_upper <= 1.0


# ------------------------------------------------------------ contracts


def test_raw_arrays_and_survival_curves_are_refused():
    y = make_outcome([1.0, 2.0, 3.0, 4.0], [1, 1, 0, 1])
    with pytest.raises(MetricError, match="RiskScores"):
        harrell_c(y, np.array([0.1, 0.2, 0.3, 0.4]))
    curves = SurvivalCurves([1.0, 2.0], np.full((4, 2), 0.5))
    with pytest.raises(MetricError, match="higher = better"):
        uno_c(y, y, curves)
    with pytest.raises(MetricError, match="RiskScores"):
        time_dependent_auc(y, y, curves, 2.0)
    with pytest.raises(MetricError, match="same patients"):
        harrell_c(y, RiskScores([0.1, 0.2]))


def test_horizon_outside_follow_up_is_explained():
    y = make_outcome([1.0, 2.0, 3.0, 4.0, 5.0], [1, 1, 0, 1, 0])
    r = RiskScores([5.0, 4.0, 3.0, 2.0, 1.0])
    with pytest.raises(MetricError, match="strictly inside"):
        time_dependent_auc(y, y, r, [2.0, 5.0])
    with pytest.raises(MetricError, match="strictly inside"):
        time_dependent_auc(y, y, r, 1.0)


def test_no_comparable_pairs():
    y = make_outcome([1.0, 2.0, 3.0], [0, 0, 0])
    with pytest.raises(MetricError, match="comparable"):
        harrell_c(y, RiskScores([1.0, 2.0, 3.0]))


# ------------------------------------------------------------ standard errors


def _simulate(rng, n):
    # Exponential event times with log-hazard 0.8 x, uniform censoring on (0, 3):
    # the score x is the true risk, so AUC(t) and C are well above 0.5.
    x = rng.normal(size=n)
    t = rng.exponential(1.0 / np.exp(0.8 * x))
    c = rng.uniform(0.0, 3.0, n)
    return make_outcome(np.minimum(t, c), t <= c), x


HORIZONS = [0.3, 1.0]


def test_auc_and_c_se_match_bootstrap_sd():
    # Apparent performance on one sample: the influence-function SE of AUC(t) and
    # the U-statistic SE of Harrell's C against the bootstrap SD (censoring
    # distribution re-estimated in every replicate). Tolerance 25% (common practice
    # for a seeded check with 200 replicates).
    rng = np.random.default_rng(20240601)
    y, x = _simulate(rng, 300)
    res = time_dependent_auc(y, y, RiskScores(x), HORIZONS)
    hc = harrell_c(y, RiskScores(x))
    boot_auc, boot_c = [], []
    for _ in range(200):
        i = rng.integers(0, y.size, y.size)
        yb, rb = y[i], RiskScores(x[i])
        boot_auc.append(time_dependent_auc(yb, yb, rb, HORIZONS).auc)
        boot_c.append(harrell_c(yb, rb).c_index)
    np.testing.assert_allclose(res.std_err, np.std(boot_auc, axis=0, ddof=1), rtol=0.25)
    assert hc.std_err == pytest.approx(np.std(boot_c, ddof=1), rel=0.25)


def test_auc_se_independent_samples_matches_monte_carlo():
    # Censoring weights from an independent training sample: the SE should match
    # the spread of AUC(t) over fresh (train, test) pairs from the same model.
    rng = np.random.default_rng(987)
    y_tr, _ = _simulate(rng, 300)
    y_te, x_te = _simulate(rng, 300)
    se = time_dependent_auc(y_tr, y_te, RiskScores(x_te), HORIZONS).std_err
    reps = []
    for _ in range(200):
        a, _ = _simulate(rng, 300)
        b, xb = _simulate(rng, 300)
        reps.append(time_dependent_auc(a, b, RiskScores(xb), HORIZONS).auc)
    np.testing.assert_allclose(se, np.std(reps, axis=0, ddof=1), rtol=0.25)


def test_auc_stays_in_range_on_a_rounding_case():
    # Found by hypothesis: many tied scores and one lower score gave 1.0000000000000002.
    time = np.array([1.0] * 11 + [2.0] + [1.0] * 6 + [2.0, 3.0])
    event = np.zeros(20, dtype=bool)
    event[[0, 11]] = True
    score = np.zeros(20)
    score[-1] = -1.0
    y = make_outcome(time, event)
    t = _inner_horizon(time, event)
    g = fit_censoring(y).survival_at(time, left_limit=True, check_positive=False)
    res = time_dependent_auc(y, y, RiskScores(score), t)
    assert res.auc[0] == pytest.approx(_brute_auc(time, event, score, t, g), abs=1e-12)
    assert 0.0 <= res.auc[0] <= 1.0
