"""Stability selection (complementary pairs) against the cross-validated lasso: false selections.

Seeded simulation (invented data): n patients, p standardised imaging features in blocks of
correlated features (within-block correlation ``--rho``), of which ``--signals`` (one per
block, in the first blocks) carry a log hazard ratio of ``--beta`` per SD; exponential
survival times with uniform censoring (about 35% censored). Per cohort we count the noise
features selected (V) and the true signals found by

* ``workbench.models.stability.stability_select`` (threshold 0.75, E[V] bound ``--max-false``);
* the cross-validated lasso of the signature (``fit_penalized_path``, rule "min" and "1se").

Reported: mean V with its Monte Carlo SE against the bound (the error-control claim:
mean V <= bound), the share of cohorts with any false selection, and the mean number of
true signals found.

Run: ``python bench/bench_stability.py --cohorts 100`` (about 8 minutes on 2 cores).
"""

from __future__ import annotations

import argparse
import time
import warnings

import numpy as np

from workbench.cohort import make_outcome
from workbench.models.penalized import fit_penalized_path
from workbench.models.stability import stability_select


def simulate(seed: int, n: int, p: int, signals: int, beta: float, rho: float, block: int = 5):
    rng = np.random.default_rng(seed)
    n_blocks = p // block
    shared = rng.standard_normal((n, n_blocks))
    X = np.sqrt(rho) * np.repeat(shared, block, axis=1) + np.sqrt(1 - rho) * rng.standard_normal((n, n_blocks * block))
    truth = np.arange(signals) * block  # the first feature of the first blocks
    lp = X[:, truth] @ np.full(signals, beta)
    t = rng.exponential(np.exp(-lp) * 24)
    c = rng.uniform(6, 60, n)
    return X, make_outcome(np.minimum(t, c), t <= c), truth


def main(argv=None) -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--cohorts", type=int, default=100)
    ap.add_argument("--n", type=int, default=300)
    ap.add_argument("--p", type=int, default=60)
    ap.add_argument("--signals", type=int, default=4)
    ap.add_argument("--beta", type=float, default=0.4)
    ap.add_argument("--rho", type=float, default=0.5)
    ap.add_argument("--pairs", type=int, default=50)
    ap.add_argument("--max-false", type=float, default=1.0)
    ap.add_argument("--seed", type=int, default=20261203)
    a = ap.parse_args(argv)
    t0 = time.time()
    rows = {"stability": [], "cv lasso (min)": [], "cv lasso (1se)": []}
    bound = None
    for c in range(a.cohorts):
        X, y, truth = simulate(a.seed + c, a.n, a.p, a.signals, a.beta, a.rho)
        noise = np.setdiff1d(np.arange(a.p), truth)
        r = stability_select(X, y, pairs=a.pairs, max_false=a.max_false, random_state=c)
        bound = r.bound
        picked = np.array([int(nm[1:]) for nm in r.selected], dtype=int)
        rows["stability"].append((np.isin(picked, noise).sum(), np.isin(picked, truth).sum()))
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            for rule in ("min", "1se"):
                path = fit_penalized_path(X, y, l1_ratio=1.0, rule=rule, random_state=c)
                nz = np.flatnonzero(path.coef != 0)
                rows[f"cv lasso ({rule})"].append((np.isin(nz, noise).sum(), np.isin(nz, truth).sum()))
    print(f"{a.cohorts} cohorts, n = {a.n}, p = {a.p}, {a.signals} signals (log HR {a.beta} per SD), "
          f"block correlation {a.rho}; stability: {a.pairs} pairs, threshold 0.75, bound on E[V] {bound:.3f}")
    print(f"{'method':<18}{'mean false (V)':>22}{'P(V >= 1)':>18}{'true found':>18}")
    for name, v in rows.items():
        v = np.asarray(v, dtype=float)
        fv, tv = v[:, 0], v[:, 1]
        any_f = (fv > 0).astype(float)
        print(f"{name:<18}{fv.mean():>12.3f} ({fv.std(ddof=1) / np.sqrt(fv.size):.3f})"
              f"{any_f.mean():>10.3f} ({any_f.std(ddof=1) / np.sqrt(fv.size):.3f})"
              f"{tv.mean():>10.2f} of {a.signals}")
    print(f"target: stability mean V <= {bound:.3f} (the bound); time {time.time() - t0:.0f} s")


if __name__ == "__main__":
    main()
