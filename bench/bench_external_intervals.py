"""Coverage of the external-validation intervals (metrics and model differences), three rules side by side.

Seeded simulation with a known truth (bench/_sim.py: proportional hazards in x1, x2, x3;
invented data). Two Cox models are fitted once on a development cohort of 400 patients
(baseline: x1 + x2; full: x1 + x2 + x3) and applied unchanged to ``--cohorts`` external
cohorts of ``--n`` patients from the same generator, with censoring. Each external cohort
goes through the engine's ``validate_external`` (``--replicates`` resamples of the
external patients, predictions fixed, censoring weights re-estimated in each).

Estimand: the value the same estimator converges to in the external population under
the same censoring, computed once by the engine on ``TRUTH_N`` external patients
(Harrell's C depends on the censoring, so the truth sample is censored like the cohorts;
IPCW measures are consistent for their censoring-free values).

Rules, from the same resamples (B values v of one metric, estimate e on the cohort):
* percentile: the (a/2, 1 - a/2) quantiles of v (what the engine reported so far);
* normal: e -+ t_{B-1} sd(v) sqrt(1 + 1/B);
* BC normal: the same around 2e - mean(v) (bootstrap bias correction).

Printed: coverage (nominal 0.95, target 0.92-0.98) with its Monte Carlo SE, mean width,
bias of the estimate; for each metric at the middle horizon and for the full-minus-baseline
differences of C and of the Brier score.

Run: nice -n 10 .venv/bin/python bench/bench_external_intervals.py [--cohorts 200] [--n 200] [--replicates 50]
"""

from __future__ import annotations

import argparse
import sys
import time
import warnings
from pathlib import Path

import numpy as np
from scipy.stats import t as t_dist

sys.path.insert(0, str(Path(__file__).resolve().parent))
from _sim import HORIZONS, TRUTH_N, SmallCox, mc_se_prop, simulate  # noqa: E402

from workbench.validation.external import validate_external  # noqa: E402
from workbench.validation.intervals import percentiles  # noqa: E402

H = HORIZONS[1]
METRICS = ("harrell_c", "uno_c", "mean_auc", f"auc@{H:g}", f"brier@{H:g}", f"ipa@{H:g}", f"oe_ratio@{H:g}",
           f"cal_slope@{H:g}", f"ici@{H:g}")
DIFFERENCES = ("harrell_c", f"brier@{H:g}")


def normal(v, e, level):
    b = v.size
    half = t_dist.ppf(0.5 + level / 2, b - 1) * np.std(v, ddof=1) * np.sqrt(1 + 1 / b)
    return e - half, e + half


def bc_normal(v, e, level):
    return normal(v, 2 * e - np.mean(v), level)


RULES = {"percentile": lambda v, e, level: percentiles(v, level), "normal": normal, "BC normal": bc_normal}


def _values(res, model, names):
    rm = res.replicates[model]
    return rm.train, rm.ok, [res.metric_names.index(nm) for nm in names]


def run(args):
    dev = simulate(400, 7)
    models = {"base": SmallCox(("x1", "x2"), "base").fit(dev), "full": SmallCox(("x1", "x2", "x3"), "full").fit(dev)}
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        big = validate_external(models, simulate(TRUTH_N, 8), HORIZONS, replicates=0, by_group=False)
    truth = {m: {nm: float(big.apparent[m].vector()[big.metric_names.index(nm)]) for nm in METRICS} for m in models}
    tdiff = {nm: truth["full"][nm] - truth["base"][nm] for nm in DIFFERENCES}
    rows = []  # (quantity, rule, estimate, lo, hi, truth)
    t0 = time.perf_counter()
    for r in range(args.cohorts):
        ext = simulate(args.n, 50_000 + r)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            res = validate_external(models, ext, HORIZONS, replicates=args.replicates, random_state=r,
                                    by_group=False)
        for m in models:
            vals, ok, cols = _values(res, m, METRICS)
            for nm, j in zip(METRICS, cols, strict=True):
                e = res.estimates[m][nm].estimate
                v = vals[ok, j]
                v = v[np.isfinite(v)]
                for rule, f in RULES.items():
                    lo, hi = f(v, e, 0.95) if v.size >= 10 and np.isfinite(e) else (np.nan, np.nan)
                    rows.append((f"{m}: {nm}", rule, e, lo, hi, truth[m][nm]))
        fv, fok, fcols = _values(res, "full", DIFFERENCES)
        bv, bok, _ = _values(res, "base", DIFFERENCES)
        both = fok & bok
        for nm, j in zip(DIFFERENCES, fcols, strict=True):
            e = res.estimates["full"][nm].estimate - res.estimates["base"][nm].estimate
            v = fv[both, j] - bv[both, j]
            v = v[np.isfinite(v)]
            for rule, f in RULES.items():
                lo, hi = f(v, e, 0.95) if v.size >= 10 else (np.nan, np.nan)
                rows.append((f"difference: {nm}", rule, e, lo, hi, tdiff[nm]))
        if (r + 1) % 50 == 0 and r + 1 < args.cohorts:
            print(f"\n--- interim, {r + 1} cohorts ---")
            report(rows, args, r + 1, time.perf_counter() - t0)
    report(rows, args, args.cohorts, time.perf_counter() - t0)


def report(rows, args, done, seconds):
    print(f"\nScale: {done} external cohorts of n = {args.n}; models fitted once on 400 development patients; "
          f"{args.replicates} resamples each; truth from the engine on {TRUTH_N:,} censored external patients; "
          f"{seconds / done:.1f} s per cohort.")
    print("Nominal 0.95, target 0.92-0.98; MC SE = sqrt(p(1-p)/R).\n")
    print(f"{'quantity':<30}{'rule':<12}{'coverage':>9}{'MC SE':>8}{'missing':>9}{'width':>9}{'bias':>10}")
    keys = list(dict.fromkeys((q, ru) for q, ru, *_ in rows))
    for q, ru in keys:
        a = np.array([x[2:] for x in rows if x[0] == q and x[1] == ru], dtype=float)
        est, lo, hi, tr = a.T
        ok = np.isfinite(lo) & np.isfinite(hi)
        cov = float(np.mean((lo[ok] <= tr[ok]) & (tr[ok] <= hi[ok]))) if ok.any() else np.nan
        print(f"{q:<30}{ru:<12}{cov:>9.3f}{mc_se_prop(cov, max(int(ok.sum()), 1)):>8.3f}{int((~ok).sum()):>9d}"
              f"{np.mean(hi[ok] - lo[ok]):>9.4f}{np.nanmean(est - tr):>+10.4f}", flush=True)


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--cohorts", type=int, default=200)
    ap.add_argument("--n", type=int, default=200)
    ap.add_argument("--replicates", type=int, default=50)
    args = ap.parse_args()
    t = time.perf_counter()
    run(args)
    print(f"wall time {time.perf_counter() - t:.0f} s")


if __name__ == "__main__":
    main()
