"""Peak memory and time: scikit-survival's forest with curves against SurvivalForest.

Each arm runs in its own Python subprocess so that its peak resident memory
(``ru_maxrss``) is its own. An arm grows the forest on synthetic patients and
predicts survival curves for the same patients.

    python bench/bench_forest.py                      # 2,000 both arms, 5,000 ours only
    python bench/bench_forest.py --library-at-largest # also the library at 5,000 (slow, ~8 GB)

Wall times depend on what else runs on the machine; CPU seconds (fit + predict,
both threads) are steadier. Synthetic data only (seeded): correlated Gaussian predictors, exponential event
times driven by five of them, uniform censoring, times rounded to whole days.
"""

from __future__ import annotations

import argparse
import json
import os
import resource
import subprocess
import sys
import time

import numpy as np

ARMS = ("library", "ours")


def make_data(n: int, p: int, seed: int):
    rng = np.random.default_rng(seed)
    shared = rng.standard_normal((n, 1))
    X = 0.5 * shared + rng.standard_normal((n, p))
    beta = np.zeros(p)
    beta[:5] = [0.8, -0.6, 0.5, 0.4, -0.3]
    event_time = rng.exponential(1500.0 * np.exp(-X @ beta))
    censor_time = rng.uniform(200.0, 4000.0, n)
    t = np.maximum(np.round(np.minimum(event_time, censor_time)), 1.0)
    return X, t, event_time <= censor_time


def run_arm(arm: str, n: int, p: int, trees: int, leaf: int, n_jobs: int, seed: int) -> dict:
    from sksurv.ensemble import RandomSurvivalForest

    from workbench.cohort.outcome import make_outcome
    from workbench.models.forest import SurvivalForest

    X, t, e = make_data(n, p, seed)
    y = make_outcome(t, e)
    start = resource.getrusage(resource.RUSAGE_SELF)
    base_kb, cpu0 = start.ru_maxrss, start.ru_utime + start.ru_stime
    settings = dict(n_estimators=trees, min_samples_leaf=leaf, n_jobs=n_jobs, random_state=seed)
    t0 = time.perf_counter()
    if arm == "library":
        model = RandomSurvivalForest(**settings).fit(X, y)
        t1 = time.perf_counter()
        probs = model.predict_survival_function(X, return_array=True)
        n_grid = probs.shape[1]
    else:
        model = SurvivalForest(**settings).fit(X, y)
        t1 = time.perf_counter()
        probs = model.predict_survival(X)
        n_grid = model.time_grid_.size
    t2 = time.perf_counter()
    usage = resource.getrusage(resource.RUSAGE_SELF)
    return {
        "arm": arm,
        "n": n,
        "fit_s": t1 - t0,
        "predict_s": t2 - t1,
        "cpu_s": usage.ru_utime + usage.ru_stime - cpu0,
        "peak_mb": usage.ru_maxrss / 1024,
        "before_fit_mb": base_kb / 1024,
        "curve_times": int(n_grid),
        "unique_event_times": int(np.unique(t[e]).size),
    }


def spawn(arm: str, n: int, args) -> dict:
    cmd = [
        sys.executable, os.path.abspath(__file__), "--child", arm, "--sizes", str(n),
        "--features", str(args.features), "--trees", str(args.trees),
        "--min-samples-leaf", str(args.min_samples_leaf), "--n-jobs", str(args.n_jobs),
        "--seed", str(args.seed),
    ]
    env = dict(os.environ)
    root = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
    env["PYTHONPATH"] = root + os.pathsep + env.get("PYTHONPATH", "")
    out = subprocess.run(cmd, capture_output=True, text=True, env=env, check=False)
    if out.returncode != 0:
        return {"arm": arm, "n": n, "error": out.stderr.strip().splitlines()[-1:]}
    return json.loads(out.stdout.strip().splitlines()[-1])


def main(argv=None) -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--sizes", default="2000,5000", help="comma-separated numbers of patients")
    ap.add_argument("--features", type=int, default=20)
    ap.add_argument("--trees", type=int, default=200)
    ap.add_argument("--min-samples-leaf", type=int, default=3, help="3 is the library default")
    ap.add_argument("--n-jobs", type=int, default=2)
    ap.add_argument("--seed", type=int, default=0)
    ap.add_argument("--library-at-largest", action="store_true",
                    help="also run the library arm at the largest size (minutes, many GB)")
    ap.add_argument("--child", choices=ARMS, help=argparse.SUPPRESS)
    args = ap.parse_args(argv)
    sizes = [int(s) for s in args.sizes.split(",")]

    if args.child:
        res = run_arm(args.child, sizes[0], args.features, args.trees, args.min_samples_leaf,
                      args.n_jobs, args.seed)
        print(json.dumps(res))
        return

    print(f"{args.trees} trees, min_samples_leaf={args.min_samples_leaf}, {args.features} predictors, "
          f"n_jobs={args.n_jobs}, seed={args.seed}")
    header = (f"{'patients':>8} {'arm':>8} {'fit s':>8} {'predict s':>10} {'cpu s':>8} {'peak MB':>9} "
              f"{'pre-fit MB':>11} {'curve times':>12}")
    print(header)
    largest = max(sizes)
    for n in sizes:
        rows = {}
        for arm in ARMS:
            if arm == "library" and n == largest and len(sizes) > 1 and not args.library_at_largest:
                continue
            rows[arm] = r = spawn(arm, n, args)
            if "error" in r:
                print(f"{n:>8} {arm:>8}  failed: {r['error']}")
                continue
            print(f"{n:>8} {arm:>8} {r['fit_s']:>8.1f} {r['predict_s']:>10.2f} {r['cpu_s']:>8.1f} {r['peak_mb']:>9.0f} "
                  f"{r['before_fit_mb']:>11.0f} {r['curve_times']:>12d}", flush=True)
        lib, ours = rows.get("library"), rows.get("ours")
        if lib and ours and "error" not in lib and "error" not in ours:
            total = (lib["fit_s"] + lib["predict_s"]) / (ours["fit_s"] + ours["predict_s"])
            print(f"{n:>8} {'ratio':>8}  library/ours: wall time x{total:.1f}, cpu time "
                  f"x{lib['cpu_s'] / ours['cpu_s']:.1f}, peak memory x{lib['peak_mb'] / ours['peak_mb']:.1f}")
    print("target: ours predicts curves for 5,000 patients within 2,048 MB peak")


if __name__ == "__main__":
    main()
