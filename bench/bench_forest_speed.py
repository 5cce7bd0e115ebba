"""Speed and peak memory: our histogram forest against scikit-survival's forest, side by side.

Each arm runs in its own Python subprocess so that its peak resident memory
(``ru_maxrss``) is its own. An arm grows the forest on synthetic patients
(``bench_forest.make_data``: correlated Gaussian predictors, exponential event
times driven by five of them, uniform censoring, whole days; seeded) and then
predicts survival curves and risk scores for the same patients.

    python bench/bench_forest_speed.py                 # 2,000 and 5,000 both arms, 50,000 ours only
    python bench/bench_forest_speed.py --sizes 2000 --large 0

Targets: ours >= 10x faster than the library (fit + curves, wall time) at 5,000
patients on 2 cores, with peak memory within 2,048 MB; 50,000 patients' curves
and risks in seconds. The compile cost of the numba builder is measured in a
child with an empty numba cache ("compile" row); the "first call" column of the
"ours" rows is the cost of the first tiny fit in a fresh process, which loads
the compiled code from the on-disk cache. Wall times depend on what else runs
on the machine; CPU seconds (all threads) are steadier.
"""

from __future__ import annotations

import argparse
import json
import os
import resource
import subprocess
import sys
import tempfile
import time

from bench_forest import make_data

ARMS = ("library", "ours")


def run_arm(arm: str, n: int, p: int, trees: int, leaf: int, n_jobs: int, seed: int) -> dict:
    import numpy as np

    from workbench.cohort.outcome import make_outcome
    from workbench.models.forest import SurvivalForest

    if arm == "library":  # imported in its own arm only, so that its memory is not counted for ours
        from sksurv.ensemble import RandomSurvivalForest
    X, t, e = make_data(n, p, seed)
    y = make_outcome(t, e)
    settings = dict(n_estimators=trees, min_samples_leaf=leaf, n_jobs=n_jobs, random_state=seed)
    first = float("nan")
    if arm in ("ours", "compile"):
        # first call in this process: loads (or, with an empty cache, compiles) the builder
        Xs, ts, es = make_data(60, p, seed + 1)
        t0 = time.perf_counter()
        small = SurvivalForest(2, min_samples_leaf=3, random_state=0).fit(Xs, make_outcome(ts, es))
        small.predict_survival(Xs)
        small.predict_risk(Xs)
        first = time.perf_counter() - t0
        if arm == "compile":
            return {"arm": arm, "n": 60, "first_call_s": first}
    start = resource.getrusage(resource.RUSAGE_SELF)
    cpu0 = start.ru_utime + start.ru_stime
    t0, c0 = time.perf_counter(), time.process_time()
    if arm == "library":
        model = RandomSurvivalForest(**settings).fit(X, y)
        t1, c1 = time.perf_counter(), time.process_time()
        probs = model.predict_survival_function(X, return_array=True)
        t2, c2 = time.perf_counter(), time.process_time()
        risk = model.predict(X)
    else:
        model = SurvivalForest(**settings).fit(X, y)
        t1, c1 = time.perf_counter(), time.process_time()
        probs = model.predict_survival(X)
        t2, c2 = time.perf_counter(), time.process_time()
        risk = model.predict_risk(X)
    t3, c3 = time.perf_counter(), time.process_time()
    usage = resource.getrusage(resource.RUSAGE_SELF)
    return {
        "arm": arm, "n": n, "fit_s": t1 - t0, "curves_s": t2 - t1, "risk_s": t3 - t2,
        "cpu_s": usage.ru_utime + usage.ru_stime - cpu0, "peak_mb": usage.ru_maxrss / 1024,
        "cpu_fit_s": c1 - c0, "cpu_curves_s": c2 - c1, "cpu_risk_s": c3 - c2,
        "first_call_s": first, "curve_times": int(probs.shape[1]), "risk_mean": float(np.mean(risk)),
    }


def spawn(arm: str, n: int, args, env_extra=None) -> dict:
    cmd = [sys.executable, os.path.abspath(__file__), "--child", arm, "--sizes", str(n),
           "--features", str(args.features), "--trees", str(args.trees),
           "--min-samples-leaf", str(args.min_samples_leaf), "--n-jobs", str(args.n_jobs), "--seed", str(args.seed)]
    env = dict(os.environ, **(env_extra or {}))
    root = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
    env["PYTHONPATH"] = root + os.pathsep + env.get("PYTHONPATH", "")
    out = subprocess.run(cmd, capture_output=True, text=True, env=env, check=False)
    if out.returncode != 0:
        return {"arm": arm, "n": n, "error": out.stderr.strip().splitlines()[-1:]}
    return json.loads(out.stdout.strip().splitlines()[-1])


def show(r: dict) -> None:
    if "error" in r:
        print(f"{r['n']:>8} {r['arm']:>8}  failed: {r['error']}", flush=True)
        return
    first = "" if r["first_call_s"] != r["first_call_s"] else f"{r['first_call_s']:.2f}"
    cpu = f"{r['cpu_fit_s']:.1f}/{r['cpu_curves_s']:.2f}/{r['cpu_risk_s']:.2f}"
    print(f"{r['n']:>8} {r['arm']:>8} {r['fit_s']:>8.2f} {r['curves_s']:>9.2f} {r['risk_s']:>8.2f} "
          f"{cpu:>21} {r['peak_mb']:>8.0f} {first:>10} {r['curve_times']:>7d}", flush=True)


def main(argv=None) -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--sizes", default="2000,5000", help="patients, both arms side by side")
    ap.add_argument("--large", type=int, default=50000, help="patients for ours alone (0: skip)")
    ap.add_argument("--features", type=int, default=20)
    ap.add_argument("--trees", type=int, default=200)
    ap.add_argument("--min-samples-leaf", type=int, default=3, help="3 is the library default")
    ap.add_argument("--n-jobs", type=int, default=2)
    ap.add_argument("--seed", type=int, default=0)
    ap.add_argument("--child", choices=(*ARMS, "compile"), help=argparse.SUPPRESS)
    args = ap.parse_args(argv)
    sizes = [int(s) for s in args.sizes.split(",") if s]

    if args.child:
        print(json.dumps(run_arm(args.child, sizes[0], args.features, args.trees, args.min_samples_leaf,
                                 args.n_jobs, args.seed)))
        return

    print(f"{args.trees} trees, min_samples_leaf={args.min_samples_leaf}, {args.features} predictors, "
          f"n_jobs={args.n_jobs}, seed={args.seed}; curves and risks predicted for the training patients")
    with tempfile.TemporaryDirectory() as cache:
        cold = spawn("compile", 60, args, {"NUMBA_CACHE_DIR": cache})
    if "error" in cold:
        print(f"compile: failed {cold['error']}")
    else:
        print(f"compile (empty numba cache, first tiny fit + predict in a fresh process): {cold['first_call_s']:.1f} s")
    print(f"{'patients':>8} {'arm':>8} {'fit s':>8} {'curves s':>9} {'risk s':>8} {'cpu s fit/curves/risk':>21} {'peak MB':>8} "
          f"{'first call':>10} {'times':>7}")
    for n in sizes:
        rows = {arm: spawn(arm, n, args) for arm in ARMS}
        for r in rows.values():
            show(r)
        lib, ours = rows["library"], rows["ours"]
        if "error" not in lib and "error" not in ours:
            wall = (lib["fit_s"] + lib["curves_s"]) / (ours["fit_s"] + ours["curves_s"])
            print(f"{n:>8} {'ratio':>8}  library/ours: fit + curves wall x{wall:.1f}, fit wall "
                  f"x{lib['fit_s'] / ours['fit_s']:.1f}, cpu (all stages) x{lib['cpu_s'] / ours['cpu_s']:.1f}, "
                  f"peak memory x{lib['peak_mb'] / ours['peak_mb']:.1f}", flush=True)
    if args.large:
        show(spawn("ours", args.large, args))
    print("targets: fit + curves >= 10x faster than the library at 5,000 patients; ours within 2,048 MB peak")


if __name__ == "__main__":
    main()
