"""Censoring weights of external validation: bias of the Brier score and IPA against the truth.

Seeded simulation (Morris, White & Crowther 2019 design). The predictions are the
TRUE survival probabilities S(t | x, centre) of an exponential model, so the
estimand is the expected Brier score of those predictions in the external
population, computed from a large uncensored sample (n = 200,000) of it; IPA uses
the population's marginal survival as the null model.

Scenario "short follow-up": the external hospital follows its patients for less
time (uniform censoring on 0-40 months) than the development cohort (0-150).
Weights from the development cohort (the old `run` route) against weights from
the external cohort itself (the one route now).

Scenario "centre censoring": an external cohort of two hospitals whose risk and
follow-up both differ (censoring uniform on 0-30 vs 0-120 months). Pooled
Kaplan-Meier weights against weights stratified by centre.

Prints per method: mean estimate, bias, its Monte Carlo SE, and the truth.
Usage: nice -n 10 python bench/bench_external_weights.py [replicates] [n]
Full strength: 1000 replicates of n = 600 (about a minute).
"""

from __future__ import annotations

import sys
import time

import numpy as np

from workbench.cohort import make_outcome
from workbench.metrics.brier import brier_score
from workbench.metrics.censoring import row_censoring
from workbench.predictions import SurvivalCurves

HORIZON = 24.0
BETA, CENTRE_EFFECT, RATE = 0.7, 0.8, 0.03


def _draw(rng, n, centre_share=0.5):
    x = rng.standard_normal(n)
    c = (rng.random(n) < centre_share).astype(int)
    rate = RATE * np.exp(BETA * x + CENTRE_EFFECT * c)
    return x, c, rng.exponential(1.0 / rate), rate


def truth(seed: int = 99, n: int = 200_000) -> tuple[float, float]:
    """Expected Brier score at HORIZON of the true predictions, and the IPA, in the external population."""
    rng = np.random.default_rng(seed)
    _, _, t, rate = _draw(rng, n)
    s = np.exp(-rate * HORIZON)
    alive = (t > HORIZON).astype(float)
    bs = float(np.mean((alive - s) ** 2))
    p = float(np.mean(s))
    return bs, 1.0 - bs / (p * (1.0 - p))


def one_replicate(rng, n: int, scenario: str) -> dict:
    """Brier score and IPA at HORIZON under each weighting for one simulated external cohort."""
    _, c, t, rate = _draw(rng, n)
    if scenario == "short follow-up":
        cens = rng.uniform(0, 40, n)
    else:
        cens = np.where(c == 1, rng.uniform(0, 30, n), rng.uniform(0, 120, n))
    time_obs, event = np.minimum(t, cens), t <= cens
    y = make_outcome(time_obs, event)
    curves = SurvivalCurves(np.array([HORIZON]), np.exp(-rate * HORIZON)[:, None])
    out = {}
    if scenario == "short follow-up":
        _, c_d, t_d, _ = _draw(rng, n)
        cens_d = rng.uniform(0, 150, n)
        y_dev = make_outcome(np.minimum(t_d, cens_d), t_d <= cens_d)
        # old route: weights and null model from the development cohort
        r = brier_score(y_dev, y, curves, [HORIZON])
        out["development weights"] = (float(r.brier[0]), float(r.ipa[0]))
        r = brier_score(y, y, curves, [HORIZON])
        out["external weights"] = (float(r.brier[0]), float(r.ipa[0]))
    else:
        r = brier_score(y, y, curves, [HORIZON])
        out["pooled KM weights"] = (float(r.brier[0]), float(r.ipa[0]))
        rc = row_censoring(y, "km_by_centre", strata=c)
        r = brier_score(y, y, curves, [HORIZON], censoring=rc)
        out["KM by centre"] = (float(r.brier[0]), float(r.ipa[0]))
    return out


def run(replicates: int, n: int, seed: int = 2026) -> dict:
    """scenario -> method -> (values of shape (R, 2))."""
    res = {}
    for k, scenario in enumerate(("short follow-up", "centre censoring")):
        rng = np.random.default_rng([seed, k])
        reps = [one_replicate(rng, n, scenario) for _ in range(replicates)]
        res[scenario] = {m: np.array([r[m] for r in reps]) for m in reps[0]}
    return res


def main() -> None:
    replicates = int(sys.argv[1]) if len(sys.argv) > 1 else 1000
    n = int(sys.argv[2]) if len(sys.argv) > 2 else 600
    t0 = time.time()
    bs_true, ipa_true = truth()
    res = run(replicates, n)
    print(f"External censoring weights: {replicates} replicates of n = {n}; truth from n = 200,000 uncensored")
    print(f"Truth at {HORIZON:g} months: Brier {bs_true:.4f}, IPA {ipa_true:.4f}\n")
    print(f"{'scenario':<18s}{'weights':<22s}{'Brier':>8s}{'bias':>9s}{'MC SE':>8s}{'IPA':>8s}{'bias':>9s}{'MC SE':>8s}")
    for scenario, by in res.items():
        for m, v in by.items():
            mean, sd = v.mean(axis=0), v.std(axis=0, ddof=1) / np.sqrt(len(v))
            print(f"{scenario:<18s}{m:<22s}{mean[0]:8.4f}{mean[0] - bs_true:+9.4f}{sd[0]:8.4f}"
                  f"{mean[1]:8.4f}{mean[1] - ipa_true:+9.4f}{sd[1]:8.4f}")
    print(f"\nwall time {time.time() - t0:.1f} s (serial)")


if __name__ == "__main__":
    main()
