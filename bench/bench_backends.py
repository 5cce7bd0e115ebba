"""Throughput of the validation engine on local processes against a local Dask cluster, side by side.

The bench cohort of bench/bench_validation.py (seeded, invented: 500 patients x 1,000 correlated
imaging features, two clinical covariates, three scanners) is validated by the bootstrap with
both models (clinical Cox; clinical + imaging signature, the signature refitted in every
replicate) and compared (combined minus clinical), the same replicates on each backend:

1. ``backend="processes"`` (joblib's loky worker processes), ``--workers`` workers;
2. ``backend="dask"`` on a ``distributed.LocalCluster`` of ``--workers`` single-threaded worker
   processes, the cluster started before the clock (its start-up time is printed apart);
3. the same with ``--scale-workers`` workers (several worker processes standing in for the nodes
   of a cluster; on a machine with fewer cores than workers this shows the overhead of more
   workers, not a speed-up).

Printed per run: wall time, replicates per second and the ratio to the processes backend
(target for 2 workers: Dask at least 95% of the processes backend's throughput), and whether
every per-replicate value equals the processes run's to the last bit (the engine's tasks are
pure functions of their seeds, so they must).

Run: ``PYTHONPATH=. nice -n 5 .venv/bin/python bench/bench_backends.py [--replicates 40]
[--workers 2] [--scale-workers 4]`` (a few minutes on 2 cores). Timings are from one run on a
shared machine: report the load beside them.
"""

from __future__ import annotations

import argparse
import os
import sys
import time
import warnings
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).parent))
from bench_validation import HORIZONS, models, synthetic_cohort  # noqa: E402

from workbench.validation import compare_models, validate  # noqa: E402


def run(cohort, replicates: int, **backend):
    t0 = time.perf_counter()
    res = validate(models(), cohort, HORIZONS, replicates=replicates, random_state=1, **backend)
    cmp = compare_models(res, "combined", "clinical")
    return time.perf_counter() - t0, res, cmp


def same(a, b) -> bool:
    """Every per-replicate value of both models and of the pair equal (NaN equal to NaN)."""
    pairs = [(a.replicates[m], b.replicates[m]) for m in a.replicates]
    pairs += [(a.pair_replicates[k], b.pair_replicates[k]) for k in a.pair_replicates]
    for ra, rb in pairs:
        for arm in ("train", "test"):
            x, y = getattr(ra, arm), getattr(rb, arm)
            if (x is None) != (y is None) or (x is not None and not np.array_equal(x, y, equal_nan=True)):
                return False
    return True


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--replicates", type=int, default=40)
    ap.add_argument("--workers", type=int, default=2)
    ap.add_argument("--scale-workers", type=int, default=4)
    args = ap.parse_args(argv)
    warnings.simplefilter("ignore")
    from distributed import Client, LocalCluster

    cohort = synthetic_cohort()
    print(f"cohort: {cohort.n} patients x {cohort.features.shape[1]} features; {args.replicates} bootstrap "
          f"replicates, both models, then compare_models; {os.cpu_count()} cores", flush=True)
    run(cohort, 2, backend="processes", workers=args.workers)  # warm: worker start-up and compiled kernels
    t_proc, ref, ref_cmp = run(cohort, args.replicates, backend="processes", workers=args.workers)
    rows = [("processes", args.workers, t_proc, None, True, ref_cmp)]
    print(f"  processes x {args.workers}: {t_proc:.1f} s", flush=True)
    for n in (args.workers, args.scale_workers):
        t0 = time.perf_counter()
        cluster = LocalCluster(n_workers=n, threads_per_worker=1, processes=True, dashboard_address=None)
        client = Client(cluster)
        start = time.perf_counter() - t0
        try:
            run(cohort, 2, backend="dask", scheduler=client, workers=n)  # warm the workers too
            t, res, cmp = run(cohort, args.replicates, backend="dask", scheduler=client, workers=n)
        finally:
            client.close()
            cluster.close()
        rows.append(("dask local", n, t, start, same(ref, res), cmp))
        print(f"  dask x {n}: {t:.1f} s (cluster start {start:.1f} s)", flush=True)

    print(f"\n{'backend':12s} {'workers':>7s} {'wall s':>8s} {'rep/s':>7s} {'vs processes':>13s} "
          f"{'start s':>8s}  identical  C difference")
    for name, n, t, start, ident, cmp in rows:
        d = cmp.differences.get("harrell_c")
        c = d.estimate if d is not None else np.nan
        print(f"{name:12s} {n:7d} {t:8.1f} {args.replicates / t:7.3f} {t_proc / t:13.2f} "
              f"{'-' if start is None else f'{start:.1f}':>8s}  {'yes' if ident else 'NO':9s}  {c:.4f}")
    print(f"target: dask x {args.workers} at least 0.95 of the processes backend's throughput")
    print(f"load average at the end: {os.getloadavg()[0]:.2f} on {os.cpu_count()} cores")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
