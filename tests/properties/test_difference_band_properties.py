"""Properties of the paired difference bands, and a reduced bench/bench_difference_bands.py.

Seeded simulation from the known generator of bench/_sim.py (invented data with a known truth):
the band of an AUC difference does not move when both scores are transformed monotonically,
swapping the two models mirrors it, and over a few simulated external cohorts it holds the
true difference (20,000 uncensored patients) at about the nominal rate.
"""

from __future__ import annotations

import sys
from pathlib import Path

import numpy as np
from hypothesis import given, settings
from hypothesis import strategies as st

sys.path.insert(0, str(Path(__file__).parents[2] / "bench"))
from _sim import SmallCox, simulate  # noqa: E402
from bench_difference_bands import GRID, true_auc_diff  # noqa: E402

from workbench.predictions import RiskScores  # noqa: E402
from workbench.validation.difference_bands import external_auc_band  # noqa: E402

_DEV = simulate(300, 5)
_BASE = SmallCox(("x1", "x2"), "base").fit(_DEV)
_FULL = SmallCox(("x1", "x2", "x3"), "full").fit(_DEV)
_EXT = simulate(150, 6)
_TIMES = np.array([1.0, 2.0])


def _band(rm, rb, seed=3, reps=8):
    return external_auc_band(rm, rb, _EXT.y, None, "km", _TIMES, replicates=reps, random_state=seed)


@settings(max_examples=5, deadline=None)
@given(scale=st.floats(0.1, 10.0), shift=st.floats(-5.0, 5.0), use_exp=st.booleans())
def test_band_is_unchanged_by_monotone_transforms_of_both_scores(scale, shift, use_exp):
    rm, rb = _FULL.predict_risk(_EXT), _BASE.predict_risk(_EXT)
    f = (lambda v: np.exp(v * min(scale, 3.0))) if use_exp else (lambda v: scale * v + shift)
    a = _band(rm, rb)
    b = _band(RiskScores(f(rm.values), "m"), RiskScores(f(rb.values), "b"))
    np.testing.assert_allclose(b.estimate, a.estimate, atol=1e-12)
    np.testing.assert_allclose(b.lower, a.lower, atol=1e-12)
    np.testing.assert_allclose(b.upper, a.upper, atol=1e-12)


def test_swapping_the_models_mirrors_the_band():
    rm, rb = _FULL.predict_risk(_EXT), _BASE.predict_risk(_EXT)
    a, b = _band(rm, rb), _band(rb, rm)
    np.testing.assert_allclose(b.estimate, -a.estimate, atol=1e-12)
    np.testing.assert_allclose(b.lower, -a.upper, atol=1e-12)
    np.testing.assert_allclose(b.upper, -a.lower, atol=1e-12)


def test_reduced_coverage_of_the_external_auc_band():
    # 10 cohorts x 2 times: with nominal 0.95 about 19 of 20 points covered; 14 or fewer (a coverage
    # near 0.7) has probability below 0.001 under the nominal rate (binomial).
    fresh = simulate(20_000, 99, censor=False)
    k = [int(np.flatnonzero(np.isclose(GRID, t))[0]) for t in _TIMES]
    truth = true_auc_diff(_FULL, _BASE, fresh)[k]
    hits = 0
    for r in range(10):
        ext = simulate(150, 500 + r)
        b = external_auc_band(_FULL.predict_risk(ext), _BASE.predict_risk(ext), ext.y, None, "km", _TIMES,
                              replicates=20, random_state=r)
        hits += int(np.sum((b.lower <= truth) & (truth <= b.upper)))
    assert hits >= 15, hits
