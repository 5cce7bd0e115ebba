"""Coverage of the two-stage bootstrap intervals for validated C and for a C difference.

Seeded simulation (bench/_sim.py): cohorts of n patients from a known proportional-
hazards generator; two small Cox models (clinical: x1 + x2; combined: x1 + x2 + x3). For
every cohort, ``validate`` runs the bootstrap (optimism estimator, the default for Cox
models) and repeated cross-validation, each with the two-stage interval, and
``compare_models`` gives the combined-minus-clinical difference in Harrell's C.

Estimands (both reported):
* conditional: the true C of the models fitted on THIS cohort, computed on one fresh
  sample of 20,000 patients from the same generator (Err_XY);
* expected: the mean of the conditional truths over all simulated cohorts (Err, the
  expected performance of the modelling process at this n). The intervals are designed
  for this one (see workbench/validation/two_stage.py).

Printed: coverage (nominal 0.95, target 0.92-0.98) with its Monte Carlo SE, mean width,
bias of the estimate against both truths, and wall time per cohort.

Cross-validation here runs the two-stage route (``cv_interval="two-stage"``), which the
engine no longer uses by default for cv: its corrected resampled t interval is measured
beside the two-stage one in bench/bench_cv_intervals.py.

CPU budget: only Harrell's C is scored inside the replicates (the engine's
``evaluate_predictions`` is swapped for a C-only version in this process); the
estimators, the two-stage plan and the interval code are the engine's own.

Run: nice -n 10 .venv/bin/python bench/bench_intervals.py [--cohorts 200] [--n 150]
     [--replicates 30] [--outer 40] [--inner 3] [--folds 5] [--repeats 3]
"""

from __future__ import annotations

import argparse
import itertools
import sys
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).parent))
from _sim import HORIZONS, TRUTH_N, SmallCox, mc_se_prop, simulate, true_c  # noqa: E402

import workbench.validation.engine as engine  # noqa: E402
from workbench.metrics.concordance import harrell_c  # noqa: E402
from workbench.validation import compare_models, validate  # noqa: E402
from workbench.validation.evaluate import ModelPerformance, PairPerformance  # noqa: E402
from workbench.validation.intervals import bias_corrected_normal, bias_corrected_percentiles  # noqa: E402

RULES = {"engine": None, "BC normal": bias_corrected_normal, "BC percentile": bias_corrected_percentiles}
"""Interval rules compared on the same outer samples (intervals.py). "engine": the interval the
engine reports, read from its results (so a change of rule in the engine is measured here
directly); the others recomputed from the outer estimates for comparison."""
RAW_FIELDS = ("outer_combined", "outer_clinical", "estimate_combined", "estimate_difference", "truth_combined",
              "truth_clinical")


def c_only(risk, curves, y_train, y_eval, horizons, **kw) -> ModelPerformance:
    """Harrell's C alone, every other field NaN (for the CPU budget of the benchmark)."""
    h = np.asarray(horizons, dtype=float)
    k, nan = h.size, np.full(h.size, np.nan)
    c = harrell_c(y_eval, risk).c_index
    return ModelPerformance(
        model=kw.get("model", ""), n=len(y_eval), n_events=int(y_eval["event"].sum()), horizons=h,
        harrell_c=c, harrell_c_se=np.nan, uno_c=np.nan, tau=float(h[-1]), auc=nan, mean_auc=np.nan,
        brier=nan, null_brier=nan, ipa=nan, ibs=np.nan, null_ibs=np.nan, ipa_integrated=np.nan,
        ibs_range=(np.nan, np.nan), ici=nan, e50=nan, e90=nan, cal_slope=nan, oe_ratio=nan,
        thresholds=np.array([0.5]), net_benefit=np.full((k, 1), np.nan), treat_all=np.full((k, 1), np.nan))


def no_pair(new, base, y, horizons, **kw) -> PairPerformance:
    h = np.asarray(horizons, dtype=float)
    nan = np.full(h.size, np.nan)
    return PairPerformance("", "", h, nan, nan, nan, nan, nan, nan)


def run(args) -> dict:
    engine.evaluate_predictions = c_only
    engine.evaluate_pair = no_pair
    fresh = simulate(TRUTH_N, 999_999)
    models = {"clinical": SmallCox(("x1", "x2"), "clinical"), "combined": SmallCox(("x1", "x2", "x3"), "combined")}
    rows = {m: [] for m in ("bootstrap", "cv")}
    t_method = dict.fromkeys(rows, 0.0)
    raw = {m: [] for m in rows}  # outer estimates, for trying other interval rules offline (--save)
    for i in range(args.cohorts):
        cohort = simulate(args.n, 1000 + i)
        truth = {nm: true_c(type(m)(m.columns, nm).fit(cohort), fresh) for nm, m in models.items()}
        for method in rows:
            t0 = time.perf_counter()
            res = validate(models, cohort, HORIZONS, method=method, replicates=args.replicates, folds=args.folds,
                           repeats=args.repeats, interval="two-stage", outer_replicates=args.outer,
                           inner_replicates=args.inner, calibration=False, backend="serial", random_state=i,
                           cv_interval="two-stage")
            d = compare_models(res, "combined", "clinical").differences["harrell_c"]
            e = res.estimates["combined"]["harrell_c"]
            t_method[method] += time.perf_counter() - t0
            # both interval rules from the same outer samples (the engine reports one of them)
            j = res.metric_names.index("harrell_c")
            oc, ob = res.outer_estimates["combined"][:, j], res.outer_estimates["clinical"][:, j]
            row = []
            for rule in RULES.values():
                ce = (e.ci_lower, e.ci_upper) if rule is None else rule(oc, e.estimate, 0.95)
                cd = (d.ci_lower, d.ci_upper) if rule is None else rule(oc - ob, d.estimate, 0.95)
                row += [e.estimate, *ce, truth["combined"], d.estimate, *cd, truth["combined"] - truth["clinical"]]
            rows[method].append(row)
            raw[method].append((oc, ob, e.estimate, d.estimate, truth["combined"], truth["clinical"]))
        if (i + 1) % 25 == 0 and i + 1 < args.cohorts:
            print(f"\n--- interim, {i + 1} cohorts ---")
            report({m: np.array(r) for m, r in rows.items()}, t_method, args, i + 1)
    if args.save:
        np.savez_compressed(args.save, **{f"{m}_{name}": np.array([r[i] for r in raw[m]])
                                          for m in raw for i, name in enumerate(RAW_FIELDS)})
    return {m: np.array(r) for m, r in rows.items()}, t_method


def report(rows: dict, t_method: dict, args, done: int | None = None) -> None:
    print(f"\nScale: {done or args.cohorts} cohorts of n = {args.n} (about 50% events); truth from n = {TRUTH_N:,}; "
          f"bootstrap {args.replicates} replicates, cv {args.folds}-fold x {args.repeats}; two-stage interval "
          f"{args.outer} outer x {args.inner} inner (cv: one {args.folds}-fold split per outer sample).")
    print("Nominal 0.95, target 0.92-0.98. MC SE = sqrt(p(1-p)/R); 'missing' = interval not computable.\n")
    print(f"{'method':<10}{'rule':<14}{'quantity':<16}{'estimand':<13}{'coverage':>9}{'MC SE':>8}{'missing':>9}"
          f"{'width':>8}{'bias':>9}{'s/cohort':>10}")
    for method, a in rows.items():
        quantities = (("C (combined)", (0, 1, 2, 3)), ("C difference", (4, 5, 6, 7)))
        for (r, rule), (label, cols) in itertools.product(enumerate(RULES), quantities):
            est, lo, hi, cond = (a[:, 8 * r + c] for c in cols)
            ok = np.isfinite(lo) & np.isfinite(hi)
            for estimand, truth in (("conditional", cond), ("expected", np.full_like(cond, cond.mean()))):
                cov = float(np.mean((lo[ok] <= truth[ok]) & (truth[ok] <= hi[ok]))) if ok.any() else np.nan
                print(f"{method:<10}{rule:<14}{label:<16}{estimand:<13}{cov:>9.3f}{mc_se_prop(cov, ok.sum()):>8.3f}"
                      f"{int((~ok).sum()):>9d}{np.mean(hi[ok] - lo[ok]):>8.3f}{np.mean(est - truth):>+9.4f}"
                      f"{t_method[method] / len(a):>10.2f}", flush=True)
    print("\nbias = mean(estimate - truth); its MC SE is about SD/sqrt(R).")


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--cohorts", type=int, default=200)
    ap.add_argument("--n", type=int, default=150)
    ap.add_argument("--replicates", type=int, default=30)
    ap.add_argument("--outer", type=int, default=40)
    ap.add_argument("--inner", type=int, default=3)
    ap.add_argument("--folds", type=int, default=5)
    ap.add_argument("--repeats", type=int, default=3)
    ap.add_argument("--save", default="", help="write the outer estimates and truths to this .npz file")
    args = ap.parse_args()
    t = time.perf_counter()
    rows, t_method = run(args)
    report(rows, t_method, args)
    print(f"wall time {time.perf_counter() - t:.0f} s")


if __name__ == "__main__":
    main()
