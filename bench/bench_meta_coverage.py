"""Coverage of the pooled-C confidence interval and of the prediction interval for a new hospital.

Seeded simulation (Morris, White & Crowther 2019 design). k hospitals; in each,
the prognostic effect differs (beta_c ~ N(0.7, 0.2^2)), so the true C differs
between hospitals. Each hospital contributes n patients (uncensored, so
Harrell's C estimates the concordance probability of its own beta_c); its C and
asymptotic SE are transformed to the logit scale and pooled by
:func:`workbench.validation.meta.random_effects`.

Estimands: the mean over hospitals of logit(true C) (for the confidence
interval) and a new hospital's true C (for the 95% prediction interval), with
true C(beta) from a large sample (n = 200,000) per beta on a grid.

Prints coverage with its Monte Carlo SE next to the nominal 0.95, for
DerSimonian-Laird and REML. Known from the literature: with few hospitals the
normal-based CI of DL under-covers (Higgins, Thompson & Spiegelhalter 2009);
that is reported here, not hidden.
Usage: nice -n 10 python bench/bench_meta_coverage.py [replicates] [k] [n]
Full strength: 1000 replicates, k = 5 and k = 10, n = 200.
"""

from __future__ import annotations

import sys
import time

import numpy as np

from workbench.cohort import make_outcome
from workbench.metrics.concordance import harrell_c
from workbench.predictions import RiskScores
from workbench.validation.meta import random_effects

BETA, TAU_BETA = 0.7, 0.2


def c_of_beta(betas, n=200_000, seed=5):
    """True concordance probability of the score x for exponential times with log-hazard beta * x."""
    rng = np.random.default_rng(seed)
    x1, x2 = rng.standard_normal(n), rng.standard_normal(n)
    out = []
    for b in np.atleast_1d(betas):
        # P(T1 < T2 and x1 > x2 or T2 < T1 and x2 > x1) for exponential T: hazard ratio form
        h1, h2 = np.exp(b * x1), np.exp(b * x2)
        p_first = h1 / (h1 + h2)
        out.append(float(np.mean(np.where(x1 > x2, p_first, 1 - p_first))))
    return np.array(out)


def run(replicates: int, k: int, n: int, seed: int = 7):
    grid = np.linspace(BETA - 5 * TAU_BETA, BETA + 5 * TAU_BETA, 81)
    cgrid = c_of_beta(grid)

    def true_c(b):
        return np.interp(b, grid, cgrid)

    logit = lambda c: np.log(c / (1 - c))  # noqa: E731
    pop = np.random.default_rng(99).normal(BETA, TAU_BETA, 100_000)
    mu_true = float(np.mean(logit(true_c(pop))))
    rng = np.random.default_rng(seed)
    hits = {(m, c): {"ci": 0, "pi": 0} for m in ("dl", "reml") for c in ("hksj", "normal")}
    for _ in range(replicates):
        betas = rng.normal(BETA, TAU_BETA, k)
        cs, ses = [], []
        for b in betas:
            x = rng.standard_normal(n)
            t = rng.exponential(1.0 / np.exp(b * x))
            r = harrell_c(make_outcome(t, np.ones(n, bool)), RiskScores(x))
            cs.append(r.c_index)
            ses.append(r.std_err / (r.c_index * (1 - r.c_index)))
        new_c = float(true_c(rng.normal(BETA, TAU_BETA)))
        for m, c in hits:
            res = random_effects(np.array(cs), np.array(ses), scale="logit", method=m, ci=c)
            hits[(m, c)]["ci"] += int(logit(res.ci_lower) <= mu_true <= logit(res.ci_upper))
            hits[(m, c)]["pi"] += int(res.pi_lower <= new_c <= res.pi_upper)
    return {m: {key: v / replicates for key, v in h.items()} for m, h in hits.items()}


def main() -> None:
    replicates = int(sys.argv[1]) if len(sys.argv) > 1 else 1000
    ks = [int(sys.argv[2])] if len(sys.argv) > 2 else [5, 10]
    n = int(sys.argv[3]) if len(sys.argv) > 3 else 200
    t0 = time.time()
    print(f"Random-effects pooling of C: {replicates} replicates, n = {n} per hospital, "
          f"beta_c ~ N({BETA}, {TAU_BETA}^2)")
    print(f"{'k':>4s} {'method':<12s} {'CI coverage':>12s} {'MC SE':>7s} {'PI coverage':>12s} {'MC SE':>7s} (nominal 0.95)")
    for k in ks:
        res = run(replicates, k, n)
        for m, r in res.items():
            se = lambda p: np.sqrt(p * (1 - p) / replicates)  # noqa: E731
            print(f"{k:4d} {m[0] + '+' + m[1]:<12s} {r['ci']:12.3f} {se(r['ci']):7.3f} {r['pi']:12.3f} {se(r['pi']):7.3f}")
    print(f"\nwall time {time.time() - t0:.1f} s (serial)")


if __name__ == "__main__":
    main()
