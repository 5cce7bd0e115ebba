"""Coverage of prediction-interval variants for a new hospital (diagnostic, same design as bench_meta_coverage).

Same seeded simulation as bench/bench_meta_coverage.py (k hospitals, beta_c ~
N(0.7, 0.2^2), n patients each, Harrell's C pooled on the logit scale). For
each replicate the hospitals are pooled once by DerSimonian-Laird and once by
REML, and every variant of the 95% prediction interval mu +- t_df sqrt(tau^2 + V)
is checked against a new hospital's true logit C:

- ``normal V, k-2``: V = 1 / sum w* (Higgins, Thompson & Spiegelhalter 2009;
  Riley, Higgins & Deeks 2011) - what meta.py reported before (``prediction="t"``);
- ``normal V, k-1``;
- ``HK V, k-2`` and ``HK V, k-1``: V = the Hartung-Knapp variance
  q / sum w* in place of 1 / sum w* (variants of the kind compared by
  Partlett & Riley, Stat Med 2017 - recalled from memory);
- ``max V, k-2``: V = max(HK, normal) variance;
- ``Q-profile CD``: a sampling construction that carries the uncertainty of
  tau^2: tau^2_b drawn from the Q-profile confidence distribution (solve the
  generalised Q statistic sum w_i(tau^2) (y_i - mu(tau^2))^2 = u_b, u_b ~
  chi^2_{k-1}, Viechtbauer 2007; 0 when u_b exceeds Q at tau^2 = 0),
  mu_b ~ N(mu(tau^2_b), 1 / sum w(tau^2_b)), new_b = mu_b + tau_b z_b; the
  interval is the 2.5% and 97.5% quantiles of new_b (1000 draws). In the
  spirit of the confidence-distribution interval of Nagashima, Noma &
  Furukawa (Stat Methods Med Res 2019), which uses the distribution of the
  DerSimonian-Laird Q instead - recalled from memory, not checked;
- ``Bayes HN 0.5`` (what meta.py reports, ``prediction="bayes"``), ``Bayes HN 0.25`` and
  ``Bayes HN 1.0``: posterior predictive interval with a flat prior on mu and a
  half-normal prior on tau of that scale (meta.predictive_interval), the last two as
  a sensitivity check of the prior;
- ``oracle``: the true tau^2 with the normal V and the z quantile - not an
  estimator, it separates the loss from estimating tau^2 from any defect of
  the simulation.

Prints coverage with its Monte Carlo SE next to the nominal 0.95.
Usage: nice -n 10 python bench/bench_meta_pi_variants.py [replicates] [k] [n]
"""

from __future__ import annotations

import importlib.util
import sys
import time
from pathlib import Path

import numpy as np
from scipy import stats

from workbench.cohort import make_outcome
from workbench.metrics.concordance import harrell_c
from workbench.predictions import RiskScores
from workbench.validation.meta import predictive_interval, random_effects

_spec = importlib.util.spec_from_file_location("bench_meta_coverage", Path(__file__).with_name("bench_meta_coverage.py"))
_sim = importlib.util.module_from_spec(_spec)
_spec.loader.exec_module(_sim)
BETA, TAU_BETA = _sim.BETA, _sim.TAU_BETA
VARIANTS = ("normal V, k-2", "normal V, k-1", "HK V, k-2", "HK V, k-1", "max V, k-2", "Q-profile CD",
            "Bayes HN 0.25", "Bayes HN 0.5", "Bayes HN 1.0", "oracle")
BAYES = {"Bayes HN 0.25": 0.25, "Bayes HN 0.5": 0.5, "Bayes HN 1.0": 1.0}


def cd_interval(y, v, rng, draws: int = 1000, level: float = 0.95):
    """Prediction interval from draws of (tau^2, mu, new) - the Q-profile confidence-distribution variant."""
    k = y.size
    span = float(np.var(y, ddof=1)) * 20 + 1e-8
    grid = np.concatenate([[0.0], np.geomspace(span * 1e-6, span, 400)])
    w = 1.0 / (v[None, :] + grid[:, None])
    mu = (w * y).sum(1) / w.sum(1)
    q_gen = (w * (y[None, :] - mu[:, None]) ** 2).sum(1)  # decreasing in tau^2
    u = rng.chisquare(k - 1, draws)
    tau2 = np.where(u >= q_gen[0], 0.0, np.interp(-u, -q_gen, grid))
    wb = 1.0 / (v[None, :] + tau2[:, None])
    mub = (wb * y).sum(1) / wb.sum(1) + rng.standard_normal(draws) / np.sqrt(wb.sum(1))
    new = mub + np.sqrt(tau2) * rng.standard_normal(draws)
    return np.quantile(new, [(1 - level) / 2, (1 + level) / 2])


def run(replicates: int, k: int, n: int, seed: int = 7):
    grid = np.linspace(BETA - 5 * TAU_BETA, BETA + 5 * TAU_BETA, 81)
    cgrid = _sim.c_of_beta(grid)

    def logit(c):
        return np.log(c / (1 - c))

    pop = logit(np.interp(np.random.default_rng(99).normal(BETA, TAU_BETA, 100_000), grid, cgrid))
    tau2_true = float(np.var(pop))
    rng = np.random.default_rng(seed)  # same draws, in the same order, as bench_meta_coverage.run
    rng_cd = np.random.default_rng(seed + 1000)
    hits = {(m, v): 0 for m in ("dl", "reml") for v in VARIANTS if v != "Q-profile CD" and v not in BAYES}
    widths = dict.fromkeys(BAYES, 0.0)
    for _ in range(replicates):
        betas = rng.normal(BETA, TAU_BETA, k)
        cs, ses = [], []
        for b in betas:
            x = rng.standard_normal(n)
            t = rng.exponential(1.0 / np.exp(b * x))
            r = harrell_c(make_outcome(t, np.ones(n, bool)), RiskScores(x))
            cs.append(r.c_index)
            ses.append(r.std_err / (r.c_index * (1 - r.c_index)))
        new = float(logit(np.interp(rng.normal(BETA, TAU_BETA), grid, cgrid)))
        y, v = logit(np.array(cs)), np.array(ses) ** 2
        lo, hi = cd_interval(y, v, rng_cd)
        hits[("-", "Q-profile CD")] = hits.get(("-", "Q-profile CD"), 0) + int(lo <= new <= hi)
        for name, scale in BAYES.items():  # does not depend on the tau^2 estimator
            lo, hi = predictive_interval(y, v, scale)
            hits[("-", name)] = hits.get(("-", name), 0) + int(lo <= new <= hi)
            widths[name] += (hi - lo) / replicates
        for m in ("dl", "reml"):
            res = random_effects(np.array(cs), np.array(ses), scale="logit", method=m)
            ws = 1.0 / (v + res.tau2)
            v_norm = 1.0 / np.sum(ws)
            v_hk = float(np.sum(ws * (y - res.mu) ** 2) / (k - 1)) * v_norm
            spec = {"normal V, k-2": (k - 2, res.tau2, v_norm), "normal V, k-1": (k - 1, res.tau2, v_norm),
                    "HK V, k-2": (k - 2, res.tau2, v_hk), "HK V, k-1": (k - 1, res.tau2, v_hk),
                    "max V, k-2": (k - 2, res.tau2, max(v_hk, v_norm)),
                    "oracle": (np.inf, tau2_true, v_norm)}
            for name, (df, tau2, var) in spec.items():
                half = stats.t.ppf(0.975, df) * np.sqrt(tau2 + var)
                hits[(m, name)] += int(abs(new - res.mu) <= half)
    return {key: h / replicates for key, h in hits.items()}, tau2_true, widths


def main() -> None:
    replicates = int(sys.argv[1]) if len(sys.argv) > 1 else 1000
    ks = [int(sys.argv[2])] if len(sys.argv) > 2 else [5, 10]
    n = int(sys.argv[3]) if len(sys.argv) > 3 else 200
    t0 = time.time()
    for k in ks:
        res, tau2_true, widths = run(replicates, k, n)
        print(f"k = {k}, {replicates} replicates, n = {n}; true tau^2 (logit C) = {tau2_true:.4f}")
        print(f"  {'tau2':<5s} {'prediction interval':<16s} {'coverage':>9s} {'MC SE':>7s} (nominal 0.95)")
        for (m, name), p in res.items():
            width = f"   mean width (logit) {widths[name]:.3f}" if name in widths else ""
            print(f"  {m:<5s} {name:<16s} {p:9.3f} {np.sqrt(p * (1 - p) / replicates):7.3f}{width}")
    print(f"\nwall time {time.time() - t0:.1f} s (serial)")


if __name__ == "__main__":
    main()
