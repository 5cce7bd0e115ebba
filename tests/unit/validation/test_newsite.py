"""Sample size for validating a model at a new site (Riley et al., Stat Med 2022;41:1280-95).

Checks:
* O/E criterion without censoring before the horizon equals the closed form of the
  binary-outcome paper, SE(ln O/E) = sqrt((1 - phi) / (n phi)) with phi the risk at
  the horizon (Riley et al., Stat Med 2021;40:4230-51; formula recalled from memory),
  within the Monte Carlo error of the simulated cohort.
* The slope and C criteria deliver what they promise: in validation cohorts of the
  computed size drawn from the same model, the empirical SD of the slope and of C
  is close to the target SE (seeded simulation, reduced).
The worked example of the 2022 paper could not be checked: its numbers are not
available offline and are not recalled reliably.
"""

from __future__ import annotations

import numpy as np
import pytest

from workbench.cohort import make_outcome
from workbench.metrics.concordance import harrell_c
from workbench.predictions import RiskScores, SurvivalCurves
from workbench.stats.coxph import fit_coxph
from workbench.validation.newsite import new_site_sample_size

RATE, H = 0.02, 24.0
GRID = np.linspace(0.25, 60.0, 240)


def _model(n=3000, sd=0.8, seed=0):
    lp = np.random.default_rng(seed).normal(0.0, sd, n)
    curves = SurvivalCurves(GRID, np.exp(-RATE * GRID[None, :] * np.exp(lp)[:, None]))
    y = make_outcome(np.full(n, 60.0), np.zeros(n, bool))
    return lp, curves, y


def test_oe_criterion_matches_the_closed_form_without_censoring():
    lp, curves, y = _model()
    res = new_site_sample_size(curves, lp, y, H, n_sim=40000, random_state=1)  # everyone followed to 60
    phi = 1.0 - float(np.mean(curves.probs[:, np.searchsorted(GRID, H, side="right") - 1]))
    closed = (1 - phi) / (phi * res.se_targets["ln_oe"] ** 2)
    assert res.censored_before_horizon == 0.0
    assert res.n_oe == pytest.approx(closed, rel=0.03)
    assert res.n_required == max(res.n_oe, res.n_slope, res.n_c)


def test_slope_and_c_sizes_give_the_target_precision():
    lp, curves, y = _model()
    res = new_site_sample_size(curves, lp, y, H, follow_up=48.0, n_sim=20000, random_state=2)
    rng = np.random.default_rng(3)
    slopes, cs = [], []
    for _ in range(60):
        n = res.n_slope
        pick = rng.integers(0, lp.size, n)
        t = rng.exponential(1.0 / (RATE * np.exp(lp[pick])))
        c = rng.uniform(0, 48.0, n)
        yy = make_outcome(np.minimum(t, c), t <= c)
        slopes.append(fit_coxph(lp[pick][:, None], yy["time"], yy["event"], ties="breslow",
                                min_events_per_parameter=0).coef[0])
        cs.append(harrell_c(yy, RiskScores(lp[pick])).c_index)
    sd_slope = np.std(slopes, ddof=1)
    # SD of an SD over 60 draws: relative MC error about 1/sqrt(2 * 59) = 9%; allow 3 of them
    assert sd_slope == pytest.approx(res.se_targets["slope"], rel=0.27)
    # at n_slope the C is estimated at least as precisely as its own target requires when n_c <= n_slope
    sd_c_expected = res.se_targets["c"] * np.sqrt(res.n_c / res.n_slope)
    assert np.std(cs, ddof=1) == pytest.approx(sd_c_expected, rel=0.27)
