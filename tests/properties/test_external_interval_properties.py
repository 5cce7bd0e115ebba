"""Reduced, fast version of bench/bench_external_intervals.py (external-validation intervals).

Seeded simulation from the known generator of bench/_sim.py (invented data): two Cox models
fitted once on 400 development patients, applied unchanged to small external cohorts from the
same generator; the truth is the engine's own value on 20,000 external patients censored the
same way (the estimand of the estimator). The benchmark prints the coverage of every metric
with its Monte Carlo SE; this keeps its design at a scale the suite can afford and checks only
what a small run can show reliably.
"""

from __future__ import annotations

import sys
import warnings
from pathlib import Path

import numpy as np
import pytest
from scipy.stats import t as t_dist

sys.path.insert(0, str(Path(__file__).parents[2] / "bench"))
from _sim import HORIZONS, SmallCox, simulate  # noqa: E402

from workbench.validation.external import validate_external  # noqa: E402

pytestmark = pytest.mark.slow


def test_external_intervals_follow_the_normal_rule_and_cover_on_a_small_run():
    dev = simulate(400, 7)
    models = {"base": SmallCox(("x1", "x2"), "base").fit(dev), "full": SmallCox(("x1", "x2", "x3"), "full").fit(dev)}
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        big = validate_external(models, simulate(20_000, 8), HORIZONS, replicates=0, by_group=False,
                                calibration=False)
    names = ("harrell_c", f"brier@{HORIZONS[1]:g}")
    truth = {m: {nm: float(big.apparent[m].vector()[big.metric_names.index(nm)]) for nm in names} for m in models}
    hits, n = 0, 12
    for r in range(n):
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            res = validate_external(models, simulate(150, 60_000 + r), HORIZONS, replicates=20, random_state=r,
                                    by_group=False, calibration=False)
        for m in models:
            for nm in names:
                e = res.estimates[m][nm]
                v = res.replicates[m].train[:, res.metric_names.index(nm)]
                v = v[np.isfinite(v)]
                half = t_dist.ppf(0.975, v.size - 1) * np.std(v, ddof=1) * np.sqrt(1 + 1 / v.size)
                assert e.interval == "normal"
                assert (e.ci_lower, e.ci_upper) == pytest.approx((e.estimate - half, e.estimate + half))
                hits += e.ci_lower <= truth[m][nm] <= e.ci_upper
    # 48 intervals at nominal 0.95 (not independent: 4 per cohort); 40 or fewer hits would be
    # gross under-coverage (the percentile interval of the same resamples is what fell short)
    assert hits > 40, hits
