"""Coverage of the cross-validation intervals for validated C and for a C difference, side by side.

Seeded simulation (bench/_sim.py, the design of bench/bench_intervals.py): cohorts of n
patients from a known proportional-hazards generator; two small Cox models (clinical:
x1 + x2; combined: x1 + x2 + x3). Every cohort is validated by repeated k-fold
cross-validation; ``compare_models`` gives the combined-minus-clinical difference in
Harrell's C. Three intervals from the same cohorts:

* corrected t (what the engine reports for cv, ``intervals.cv_interval``): the corrected
  resampled t interval of Nadeau & Bengio (2003), variance (1/J + n_test/n_train) s^2 of
  the J = k x r held-out fold values (paired per-fold differences for the difference),
  t on J - 1 df; read from the engine's results;
* two-stage (``cv_interval="two-stage"``, what the engine reported before): outer
  bootstrap samples, one k-fold split in each, bias-corrected normal interval; read from
  the engine's results of a second run with the same seed (same estimate);
* naive t (a deliberately broken rule, for contrast): the same fold values without the
  n_test/n_train term, variance s^2 / J, as if the fold values were independent.

Estimands (both reported): conditional - the true C of the models fitted on THIS cohort,
on one fresh sample of 20,000 patients from the same generator; expected - the mean of
the conditional truths over all simulated cohorts.

Printed: coverage (nominal 0.95, target 0.92-0.98) with its Monte Carlo SE, intervals
missing, mean width, mean reported SE (half-width / t quantile) beside the SD of the
estimate across cohorts, bias, and CPU seconds per cohort of each route (process time, so the cost ratio holds on a
shared machine).

CPU budget: only Harrell's C is scored inside the replicates (as in bench_intervals.py).

Measured with 400 cohorts (--outer 0, 5-fold x 10 repeats; expected / conditional estimand):
n = 120, C 0.940 / 0.940, C difference 0.970 / 0.988 (MC SE 0.006-0.012); n = 300, C 0.960 /
0.963, C difference 0.975 / 0.983 (MC SE 0.007-0.010); naive rule 0.44-0.52 at n = 120.
The other metrics: bench/bench_cv_metrics.py.

Run (from the repository root): PYTHONPATH=. nice -n 19 .venv/bin/python bench/bench_cv_intervals.py [--cohorts 200] [--n 120]
     [--folds 5] [--repeats 10] [--outer 30]   (--outer 0 skips the two-stage route)
"""

from __future__ import annotations

import argparse
import sys
import time
import warnings
from pathlib import Path

import numpy as np
from scipy.stats import t as t_dist

sys.path.insert(0, str(Path(__file__).parent))
from _sim import HORIZONS, TRUTH_N, SmallCox, mc_se_prop, simulate, true_c  # noqa: E402
from bench_intervals import c_only, no_pair  # noqa: E402

import workbench.validation.engine as engine  # noqa: E402
from workbench.validation import compare_models, validate  # noqa: E402

QUANTITIES = ("C (combined)", "C difference")


def naive_t(v: np.ndarray, estimate: float, conf_level: float = 0.95) -> tuple[float, float]:
    """The broken contrast: fold values treated as independent (no n_test/n_train term)."""
    v = v[np.isfinite(v)]
    half = float(t_dist.ppf(0.5 + conf_level / 2, v.size - 1)) * np.sqrt(np.var(v, ddof=1) / v.size)
    return estimate - half, estimate + half


def run(args):
    warnings.filterwarnings("ignore", "Mean of empty slice", RuntimeWarning)  # net benefit is not scored here
    engine.evaluate_predictions = c_only
    engine.evaluate_pair = no_pair
    fresh = simulate(TRUTH_N, 999_999)
    models = {"clinical": SmallCox(("x1", "x2"), "clinical"), "combined": SmallCox(("x1", "x2", "x3"), "combined")}
    rules = ["corrected t", "naive t"] + (["two-stage"] if args.outer else [])
    # rows[rule][quantity]: (estimate, lower, upper, conditional truth) per cohort
    rows = {r: {q: [] for q in QUANTITIES} for r in rules}
    secs = dict.fromkeys(("corrected t", "two-stage"), 0.0)
    kw = dict(method="cv", folds=args.folds, repeats=args.repeats, calibration=False, backend="serial")
    for i in range(args.cohorts):
        cohort = simulate(args.n, 1000 + i)
        truth = {nm: true_c(type(m)(m.columns, nm).fit(cohort), fresh) for nm, m in models.items()}
        tc = (truth["combined"], truth["combined"] - truth["clinical"])
        t0 = time.process_time()
        res = validate(models, cohort, HORIZONS, random_state=i, interval="two-stage", **kw)
        e = res.estimates["combined"]["harrell_c"]
        d = compare_models(res, "combined", "clinical").differences["harrell_c"]
        secs["corrected t"] += time.process_time() - t0
        assert e.interval == d.interval == "corrected-t", (e, d)
        j = res.metric_names.index("harrell_c")
        vc, vb = res.replicates["combined"].test[:, j], res.replicates["clinical"].test[:, j]
        for q, x, v, truth_q in ((QUANTITIES[0], e, vc, tc[0]), (QUANTITIES[1], d, vc - vb, tc[1])):
            rows["corrected t"][q].append((x.estimate, x.ci_lower, x.ci_upper, truth_q))
            rows["naive t"][q].append((x.estimate, *naive_t(v, x.estimate), truth_q))
        if args.outer:
            t0 = time.process_time()
            old = validate(models, cohort, HORIZONS, random_state=i, interval="two-stage", cv_interval="two-stage",
                           outer_replicates=args.outer, **kw)
            e2 = old.estimates["combined"]["harrell_c"]
            d2 = compare_models(old, "combined", "clinical").differences["harrell_c"]
            secs["two-stage"] += time.process_time() - t0
            assert e2.estimate == e.estimate  # the same cross-validation, only the interval differs
            for q, x, truth_q in ((QUANTITIES[0], e2, tc[0]), (QUANTITIES[1], d2, tc[1])):
                rows["two-stage"][q].append((x.estimate, x.ci_lower, x.ci_upper, truth_q))
        if (i + 1) % 50 == 0 and i + 1 < args.cohorts:
            print(f"\n--- interim, {i + 1} cohorts ---")
            report(rows, secs, args, i + 1)
    return rows, secs


def report(rows: dict, secs: dict, args, done: int | None = None) -> None:
    r_done = done or args.cohorts
    j = args.folds * args.repeats
    print(f"\nScale: {r_done} cohorts of n = {args.n} (about 50% events); truth from n = {TRUTH_N:,}; cv "
          f"{args.folds}-fold x {args.repeats} repeats (J = {j} fold values, n_test/n_train = 1/{args.folds - 1}); "
          f"two-stage: {args.outer} outer samples x one {args.folds}-fold split.")
    print("Nominal 0.95, target 0.92-0.98. MC SE = sqrt(p(1-p)/R); 'missing' = interval not computable; "
          "'SE' = mean half-width / t quantile; 'SD est' = SD of the estimate across cohorts.\n")
    print(f"{'rule':<13}{'quantity':<15}{'estimand':<13}{'coverage':>9}{'MC SE':>8}{'missing':>9}{'width':>8}"
          f"{'SE':>8}{'SD est':>8}{'bias':>9}{'CPU s':>10}")
    q975 = float(t_dist.ppf(0.975, j - 1))
    for rule, by_q in rows.items():
        for q, vals in by_q.items():
            a = np.array(vals, dtype=float)
            est, lo, hi, cond = a.T
            ok = np.isfinite(lo) & np.isfinite(hi)
            for estimand, truth in (("conditional", cond), ("expected", np.full_like(cond, cond.mean()))):
                cov = float(np.mean((lo[ok] <= truth[ok]) & (truth[ok] <= hi[ok])))
                width = float(np.mean(hi[ok] - lo[ok]))
                se = width / 2 / q975 if rule != "two-stage" else np.nan
                cost = secs.get(rule, secs["corrected t"]) / r_done
                print(f"{rule:<13}{q:<15}{estimand:<13}{cov:>9.3f}{mc_se_prop(cov, ok.sum()):>8.3f}"
                      f"{int((~ok).sum()):>9d}{width:>8.3f}{se:>8.4f}{np.std(est, ddof=1):>8.4f}"
                      f"{np.mean(est - truth):>+9.4f}{cost:>10.2f}", flush=True)
    if secs["two-stage"]:
        print(f"\ncost: two-stage / corrected t CPU time = {secs['two-stage'] / secs['corrected t']:.1f}x "
              "(same cohorts, serial, one process; the naive rule reuses the corrected run)")
    print("bias = mean(estimate - truth); its MC SE is about SD/sqrt(R). Clipped intervals (C in [0, 1]) "
          "would make 'SE' smaller than the rule's; none were clipped at this scale.")


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--cohorts", type=int, default=200)
    ap.add_argument("--n", type=int, default=120)
    ap.add_argument("--folds", type=int, default=5)
    ap.add_argument("--repeats", type=int, default=10)
    ap.add_argument("--outer", type=int, default=30)
    args = ap.parse_args()
    t = time.perf_counter()
    rows, secs = run(args)
    report(rows, secs, args)
    print(f"wall time {time.perf_counter() - t:.0f} s")


if __name__ == "__main__":
    main()
