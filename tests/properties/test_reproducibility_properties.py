"""Reduced, fast version of bench/bench_icc.py (intraclass correlation intervals and the filter).

Seeded simulation (invented data) of a first and a repeat measurement, y_ij = b_i + e_ij with
b ~ N(0, 1) and e ~ N(0, s^2): the true ICC(1,1) = ICC(3,1) = 1 / (1 + s^2).
"""

from __future__ import annotations

import numpy as np

from workbench.preprocess.reproducibility import icc


def _draw(rng, n, truth):
    s = np.sqrt(1 / truth - 1)
    return rng.normal(0, 1, n)[:, None] + rng.normal(0, s, (n, 2))


def test_icc_intervals_cover_and_the_filter_separates_good_from_poor_features():
    rng = np.random.default_rng(11)
    reps = 400  # MC SE of a coverage near 0.95: 0.011
    for form in ("ICC(1,1)", "ICC(3,1)"):
        hits = sum(r.lower <= 0.8 <= r.upper for r in (icc(_draw(rng, 30, 0.8), form) for _ in range(reps)))
        assert 0.92 <= hits / reps <= 0.98, (form, hits / reps)
    # the 0.75 filter at 40 patients keeps a feature of true ICC 0.9 and drops one of 0.5 nearly always
    kept_good = np.mean([icc(_draw(rng, 40, 0.9)).value >= 0.75 for _ in range(200)])
    kept_poor = np.mean([icc(_draw(rng, 40, 0.5)).value >= 0.75 for _ in range(200)])
    assert kept_good > 0.97 and kept_poor < 0.03, (kept_good, kept_poor)
