"""Validated C of a random survival forest against its true C: optimism vs out-of-bootstrap vs .632+.

Seeded simulation (bench/_sim.py, with a nonlinear term so that a forest has something
to find): for each cohort a forest is fitted on all n patients; its true C is Harrell's
C on one fresh sample of 20,000 patients from the same generator (the conditional
estimand: performance of THIS fitted forest). ``validate`` then estimates it with
Harrell's optimism bootstrap (known to fail for forests, which nearly interpolate their
training rows), the out-of-bootstrap estimate and the .632+ rule.

Printed per estimator: mean (estimate - true C) with its MC SE (target |bias| <= 0.01),
the SD of the error, and the mean estimate next to the mean truth; also the apparent C.

CPU budget: only Harrell's C is scored inside the replicates (see bench_intervals.py).

Run: nice -n 10 .venv/bin/python bench/bench_forest_validation.py [--cohorts 30] [--n 300]
     [--replicates 25] [--trees 100] [--min-leaf 5]
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).parent))
from _sim import HORIZONS, TRUTH_N, SmallForest, simulate, true_c  # noqa: E402
from bench_intervals import c_only, no_pair  # noqa: E402

import workbench.validation.engine as engine  # noqa: E402
from workbench.validation import validate  # noqa: E402

NONLINEAR = 0.3


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--cohorts", type=int, default=30)
    ap.add_argument("--n", type=int, default=300)
    ap.add_argument("--replicates", type=int, default=25)
    ap.add_argument("--trees", type=int, default=100)
    ap.add_argument("--min-leaf", type=int, default=5)
    args = ap.parse_args()
    engine.evaluate_predictions = c_only
    engine.evaluate_pair = no_pair
    t = time.perf_counter()
    fresh = simulate(TRUTH_N, 999_999, nonlinear=NONLINEAR)
    ests = ("optimism", "oob", "632plus")
    err = {e: [] for e in ests}
    est_vals = {e: [] for e in ests}
    truths, apparents = [], []
    for i in range(args.cohorts):
        cohort = simulate(args.n, 2000 + i, nonlinear=NONLINEAR)
        model = SmallForest(args.trees, args.min_leaf, random_state=i)
        truth = true_c(SmallForest(args.trees, args.min_leaf, random_state=i).fit(cohort), fresh)
        truths.append(truth)
        res_opt = validate({"forest": model}, cohort, HORIZONS, replicates=args.replicates, estimator="optimism",
                           calibration=False, backend="serial", random_state=i)
        res_oob = validate({"forest": model}, cohort, HORIZONS, replicates=args.replicates, estimator="632plus",
                           calibration=False, backend="serial", random_state=i)
        apparents.append(res_opt.estimates["forest"]["harrell_c"].apparent)
        rm = res_oob.replicates["forest"]
        j = rm.names.index("harrell_c")
        vals = {"optimism": res_opt.estimates["forest"]["harrell_c"].estimate,
                "oob": float(np.nanmean(rm.oob[rm.ok, j])),
                "632plus": res_oob.estimates["forest"]["harrell_c"].estimate}
        for e in ests:
            err[e].append(vals[e] - truth)
            est_vals[e].append(vals[e])
        if (i + 1) % 5 == 0 and i + 1 < args.cohorts:
            print(f"\n--- interim, {i + 1} cohorts ---")
            _report(i + 1, args, truths, apparents, err, est_vals, ests)
    _report(args.cohorts, args, truths, apparents, err, est_vals, ests)
    print(f"\nwall time {time.perf_counter() - t:.0f} s")


def _report(r, args, truths, apparents, err, est_vals, ests) -> None:
    print(f"\nScale: {r} cohorts of n = {args.n}, forest {args.trees} trees, min leaf {args.min_leaf}; "
          f"{args.replicates} bootstrap replicates; truth: Harrell C of the fitted forest on n = {TRUTH_N:,} "
          "fresh patients (conditional estimand).")
    print(f"mean true C {np.mean(truths):.4f}; mean apparent C {np.mean(apparents):.4f}\n")
    print(f"{'estimator':<12}{'mean est':>10}{'bias':>10}{'MC SE':>9}{'SD err':>9}{'|bias|<=0.01':>14}")
    for e in ests:
        a = np.array(err[e])
        se = a.std(ddof=1) / np.sqrt(r)
        print(f"{e:<12}{np.mean(est_vals[e]):>10.4f}{a.mean():>+10.4f}{se:>9.4f}{a.std(ddof=1):>9.4f}"
              f"{'yes' if abs(a.mean()) <= 0.01 else 'NO':>14}", flush=True)


if __name__ == "__main__":
    main()
