"""Monte Carlo noise correction of two-stage intervals (validation/mc_noise.py, intervals.two_stage_interval).

Hand-computed group estimates, the interval formula written out, and a property
check of the rule under a normal model in which every variance is known: the
outer estimates are the estimate plus sampling noise plus the Monte Carlo noise
of a few inner replicates. Engine run: outcomes of the German Breast Cancer Study
Group 2 trial (Schumacher et al., J Clin Oncol 1994; `sksurv.datasets.load_gbsg2`),
through the `small` fixture of test_estimators.py.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy.stats import t as t_dist
from test_estimators import small  # noqa: F401 - fixture (same folder, rootdir-relative import)
from test_resample import ColumnsCox, H

from workbench.validation import compare_models, validate
from workbench.validation.intervals import MIN_SHARE, bias_corrected_normal, two_stage_interval
from workbench.validation.mc_noise import (
    MIN_GROUPS,
    difference_noise,
    group_estimates,
    noise_from_groups,
)
from workbench.validation.results import ReplicateMetrics


def _rm(train=None, test=None, oob=None, replicate=None, ok=None):
    n = len(replicate)

    def col(v):
        return None if v is None else np.asarray(v, dtype=float).reshape(n, 1)

    return ReplicateMetrics(names=("harrell_c",), train=col(train), test=col(test), nb_train=None, nb_test=None,
                            replicate=np.asarray(replicate), fold=None,
                            ok=np.ones(n, bool) if ok is None else np.asarray(ok), events=np.ones(n, int),
                            oob=col(oob))


def test_optimism_groups_are_the_estimator_on_consecutive_runs_of_inner_replicates():
    train, test = [0.80, 0.78, 0.82, 0.79, 0.81, 0.77, 0.9], [0.70, 0.71, 0.69, 0.72, 0.70, 0.68, 0.5]
    rm = _rm(train=train, test=test, replicate=range(7))
    g = group_estimates("bootstrap", "optimism", "harrell_c", 0.75, rm, 0, np.nan, 2)
    # groups {0,1}, {2,3}, {4,5}; replicate 6 alone is an incomplete group and left out
    assert sorted(g) == [0, 1, 2]
    assert g[0] == pytest.approx(0.75 - np.mean([0.80 - 0.70, 0.78 - 0.71]))
    assert g[2] == pytest.approx(0.75 - np.mean([0.81 - 0.70, 0.77 - 0.68]))
    # a failed replicate makes its group incomplete
    rm_failed = _rm(train=train, test=test, replicate=range(7), ok=[True, False, True, True, True, True, True])
    assert sorted(group_estimates("bootstrap", "optimism", "harrell_c", 0.75, rm_failed, 0, np.nan, 2)) == [1, 2]


def test_out_of_bootstrap_and_cv_groups():
    oob = [0.70, 0.72, 0.68, 0.66, 0.71, 0.69]
    g = group_estimates("bootstrap", "oob", "harrell_c", 0.75, _rm(oob=oob, replicate=range(6)), 0, np.nan, 3)
    assert g == {0: pytest.approx(0.70), 1: pytest.approx(np.mean([0.66, 0.71, 0.69]))}
    # cv: one group per repeat, the mean of its held-out folds
    test = [0.6, 0.7, 0.8, 0.5, 0.6, 0.7, 0.65, 0.65, np.nan]
    g = group_estimates("cv", "optimism", "harrell_c", 0.75, _rm(test=test, replicate=[0, 0, 0, 1, 1, 1, 2, 2, 2]),
                        0, np.nan, 1)
    assert g == {0: pytest.approx(0.7), 1: pytest.approx(0.6), 2: pytest.approx(0.65)}


def test_noise_needs_enough_groups_and_pairs_by_group():
    assert np.isnan(noise_from_groups([0.7] * (MIN_GROUPS - 1)).outer_noise)
    v = [0.70, 0.74, 0.66, 0.72]
    nz = noise_from_groups(v)
    assert nz.outer_noise == pytest.approx(np.var(v, ddof=1)) and nz.estimate_noise == pytest.approx(nz.outer_noise / 4)
    d = difference_noise({0: 0.7, 1: 0.8, 2: 0.75, 5: 0.9}, {0: 0.6, 1: 0.65, 2: 0.7, 3: 0.1})
    assert d.groups == 3 and d.outer_noise == pytest.approx(np.var([0.1, 0.15, 0.05], ddof=1))


def test_interval_formula_and_its_limits():
    rng = np.random.default_rng(1)
    v = 0.70 + rng.normal(0, 0.03, 30)
    b, var = v.size, np.var(v, ddof=1)
    # without noise terms: the plain bias-corrected normal interval
    assert two_stage_interval(v, 0.71, 0.95) == pytest.approx(bias_corrected_normal(v, 0.71, 0.95))
    lo, hi = two_stage_interval(v, 0.71, 0.95, outer_noise=0.4 * var, estimate_noise=0.02 * var)
    half = t_dist.ppf(0.975, b - 1) * np.sqrt(0.6 * var + 0.02 * var + var / b)
    centre = 2 * 0.71 - v.mean()
    assert (lo, hi) == pytest.approx((centre - half, centre + half))
    # the correction never takes more than (1 - MIN_SHARE) of the outer variance away
    lo, hi = two_stage_interval(v, 0.71, 0.95, outer_noise=10 * var, estimate_noise=0.0)
    assert hi - lo == pytest.approx(2 * t_dist.ppf(0.975, b - 1) * np.sqrt(MIN_SHARE * var + var / b))
    assert np.isnan(two_stage_interval(v[:9], 0.71, 0.95, 0.0, 0.0)[0])


def test_corrected_interval_covers_where_the_uncorrected_one_is_too_wide():
    # Normal model with known variances: estimate = theta + sampling + mean of R replicate noises; each
    # outer estimate = estimate + sampling + mean of m noises; the data's R replicates cut into R/m
    # groups give the noise estimate. Noise per outer estimate 1.5x the sampling variance (as with
    # one k-fold split per outer sample). Coverage of theta, 4000 draws: MC SE about 0.0035.
    rng = np.random.default_rng(20261203)
    sims, outer, m, r, sd, noise_sd = 4000, 30, 2, 20, 1.0, np.sqrt(3.0)
    hit_corrected = hit_plain = 0
    for _ in range(sims):
        reps = rng.normal(0, noise_sd, r)
        est = rng.normal(0, sd) + reps.mean()
        v = est + rng.normal(0, sd, outer) + rng.normal(0, noise_sd, (outer, m)).mean(axis=1)
        nz = noise_from_groups(reps.reshape(-1, m).mean(axis=1))
        lo, hi = two_stage_interval(v, est, 0.95, nz.outer_noise, nz.estimate_noise)
        hit_corrected += lo <= 0 <= hi
        lo, hi = two_stage_interval(v, est, 0.95)
        hit_plain += lo <= 0 <= hi
    assert 0.93 <= hit_corrected / sims <= 0.97, hit_corrected / sims
    assert hit_plain / sims > 0.98, hit_plain / sims


def test_engine_intervals_use_the_correction(small):  # noqa: F811 - fixture
    models = {"a": ColumnsCox(("age", "tsize")), "b": ColumnsCox(("age", "tsize", "pnodes"))}
    res = validate(models, small, H, replicates=12, random_state=5, backend="serial", calibration=False,
                   interval="two-stage", outer_replicates=12, inner_replicates=2)
    j = res.metric_names.index("harrell_c")
    groups = res.noise_groups["a"]["harrell_c"]
    assert sorted(groups) == list(range(6))  # 12 replicates in groups of 2 inner replicates
    e = res.estimates["a"]["harrell_c"]
    nz = noise_from_groups(groups.values())
    assert (e.ci_lower, e.ci_upper) == pytest.approx(
        two_stage_interval(res.outer_estimates["a"][:, j], e.estimate, 0.95, nz.outer_noise, nz.estimate_noise))
    d = compare_models(res, "b", "a").differences["harrell_c"]
    assert d.ci_lower <= d.estimate <= d.ci_upper and d.interval == "two-stage"
