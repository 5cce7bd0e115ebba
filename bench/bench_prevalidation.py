"""Pre-validated signature coefficient and validated C difference: cross-fit routes side by side.

Seeded simulation (invented data): cohorts of the demo generator
(``simulate_cohort``, imaging features tied to stage and scanner, the demo truth with an
imaging effect ``--effect``), through bench_added_value.py's ``sim_cohort``. On every cohort
the combined Cox model (clinical terms + imaging signature; ComBat protecting stage, lasso
with a 5-fold penalty choice) is built twice, the only difference being how its
pre-validated (out-of-fold) signature scores are made (``CombinedCox(cross_fit=...)``):

* ``refit``: the whole signature, with its own inner cross-validation, refitted without
  each of the 5 pre-validation folds (the older route, 6 signature fits per model fit);
* ``inner_folds``: the fold fits of the signature's own penalty choice at the penalty it
  chose (one signature fit per model fit; harmonisation, scaling and unsupervised filters
  learned once; a fold's outcomes reach its scores only through the one shared penalty).

Estimands and what is printed, per route, with Monte Carlo SE (mean: SD / sqrt(R);
proportion: sqrt(p (1 - p) / R)):

* the signature coefficient of the model fitted on the whole cohort (pre-validated)
  against its truth: the coefficient of that same signature score, next to the same
  clinical terms, fitted on a fresh sample of 20,000 patients from the generator (the
  signature is identical under both routes, only the coefficient differs); bias and SD;
* the validated Harrell C difference (combined minus clinical; repeated patient-grouped
  k-fold cross-validation, the engine's corrected t interval) against the conditional
  truth (both models fitted on the cohort, C on the fresh sample) and the expected truth
  (mean of the conditional truths): bias, coverage of the 95% interval, mean width;
* CPU seconds per cohort of each route (process time; both in this one process).

CPU budget: only Harrell's C is scored inside the replicates (bench_intervals.py's C-only
evaluation swapped into the engine, as in bench_cv_intervals.py).

Run: PYTHONPATH=. nice -n 19 python bench/bench_prevalidation.py [--cohorts 200] [--n 200]
     [--p 60] [--folds 5] [--repeats 2] [--first 0] [--out f.json] [--merge f1.json f2.json]

Measured 2026-12-03 (n = 200, p = 60, effect 1; 6 processes with --first/--out stopped at the
deadline and merged: 46 cohorts, 34 with ``--repeats 1`` (no interval: fewer fold values than
the engine's minimum) and 12 with ``--repeats 2``): pre-validated coefficient bias against the
fresh-sample coefficient (mean truth 0.887): refit -0.014 (MC SE 0.046), inner_folds +0.088
(0.039); paired difference inner_folds - refit +0.102 (MC SE 0.017): the shared penalty lets
each fold's scores profit from its own outcomes, about a tenth of the coefficient, so
inner_folds is not the default. C difference (cv): bias against the conditional truth -0.0027
(0.0028) refit, -0.0034 (0.0029) inner_folds; paired difference of the estimates +0.0024
(0.0005); coverage 12 of 12 intervals for both (too few cohorts to tell). CPU per cohort
2.8 s / 0.9 s.

References: Tibshirani RJ, Efron B. Stat Appl Genet Mol Biol 2002;1:Article 1 (pre-validation);
Nadeau C, Bengio Y. Mach Learn 2003;52:239-81 (corrected resampled t); Morris TP, White IR,
Crowther MJ. Stat Med 2019;38:2074-102 (simulation studies).
"""

from __future__ import annotations

import argparse
import json
import sys
import time
import warnings
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).parent))
from bench_added_value import DEMO, sim_cohort  # noqa: E402
from bench_intervals import c_only, no_pair  # noqa: E402

import workbench.validation.engine as engine  # noqa: E402
from workbench.metrics.concordance import harrell_c  # noqa: E402
from workbench.models.cox import ClinicalCox, CombinedCox  # noqa: E402
from workbench.models.signature import ImagingSignature  # noqa: E402
from workbench.stats.coxph import fit_coxph  # noqa: E402
from workbench.study import read_study  # noqa: E402
from workbench.validation import compare_models, validate  # noqa: E402

ROUTES = ("refit", "inner_folds")
HORIZONS = [12.0, 24.0, 36.0]
TRUTH_N = 20_000


def build(preds, route: str, seed: int) -> dict:
    sig = ImagingSignature(harmonize=True, unseen_batch="reference", n_alphas=25, n_folds=5, l1_ratio=1.0,
                           random_state=seed)
    return {"clinical": ClinicalCox(preds),
            "combined": CombinedCox(preds, signature=sig, protect=("stage",), cross_fit=route)}


def true_coef(fitted: CombinedCox, fresh) -> float:
    """The signature's coefficient next to the clinical terms, fitted on the fresh sample."""
    X = fitted._design(fresh)  # clinical terms (learned on the cohort) + the cohort's signature score
    return float(fit_coxph(X, fresh.time, fresh.event, names=fitted.fit_.names).coef[-1])


def one(cohort, fresh, preds, seed: int, folds: int, repeats: int) -> dict:
    out = {}
    for route in ROUTES:
        m = build(preds, route, seed)
        c0 = time.process_time()
        res = validate(m, cohort, HORIZONS, method="cv", folds=folds, repeats=repeats, calibration=False,
                       backend="serial", random_state=seed)
        d = compare_models(res, "combined", "clinical").differences["harrell_c"]
        cpu = time.process_time() - c0
        fc, fb = m["combined"].fit(cohort), m["clinical"].fit(cohort)
        rec = {"cpu": cpu, "est": d.estimate, "lo": d.ci_lower, "hi": d.ci_upper,
               "size": len(fc.selected_features_), "coef": float("nan"), "coef_true": float("nan")}
        rec["truth"] = (harrell_c(fresh.y, fc.predict_risk(fresh)).c_index
                        - harrell_c(fresh.y, fb.predict_risk(fresh)).c_index)
        if fc.selected_features_:
            rec["coef"], rec["coef_true"] = float(fc.fit_.coef[-1]), true_coef(fc, fresh)
        out[route] = rec
    return out


def report(rows: list) -> None:
    R = len(rows)
    print(f"\n{R} cohorts. Nominal coverage 0.95 (target 0.92-0.98).")
    print(f"{'route':<13}{'quantity':<34}{'estimand':<13}{'bias':>9}{'MC SE':>8}{'SD':>8}{'coverage':>10}"
          f"{'MC SE':>8}{'width':>8}{'CPU s':>8}")
    for route in ROUTES:
        r = [x[route] for x in rows]
        cpu = np.mean([x["cpu"] for x in r])
        coef = np.array([[x["coef"], x["coef_true"]] for x in r if np.isfinite(x["coef"])])
        if coef.size:
            err = coef[:, 0] - coef[:, 1]
            print(f"{route:<13}{'signature coefficient (prevalid.)':<34}{'fresh fit':<13}{err.mean():>+9.4f}"
                  f"{err.std(ddof=1) / np.sqrt(err.size):>8.4f}{coef[:, 0].std(ddof=1):>8.4f}{'':>10}{'':>8}{'':>8}"
                  f"{cpu:>8.1f}   ({err.size} cohorts with a signature; mean truth {coef[:, 1].mean():.3f})")
        a = np.array([[x["est"], x["lo"], x["hi"], x["truth"]] for x in r], dtype=float)
        est, lo, hi, cond = a.T
        ok = np.isfinite(lo) & np.isfinite(hi)
        for estimand, truth in (("conditional", cond), ("expected", np.full_like(cond, cond.mean()))):
            e = est - truth
            cov = float(np.mean((lo[ok] <= truth[ok]) & (truth[ok] <= hi[ok])))
            print(f"{route:<13}{'C difference (cv, corrected t)':<34}{estimand:<13}{e.mean():>+9.4f}"
                  f"{e.std(ddof=1) / np.sqrt(R):>8.4f}{est.std(ddof=1):>8.4f}{cov:>10.3f}"
                  f"{np.sqrt(cov * (1 - cov) / max(ok.sum(), 1)):>8.3f}{np.mean(hi[ok] - lo[ok]):>8.3f}{cpu:>8.1f}"
                  f"   ({int(ok.sum())} intervals)")
    b = np.array([x["inner_folds"]["coef"] - x["refit"]["coef"] for x in rows])
    b = b[np.isfinite(b)]
    if b.size > 1:
        print(f"paired difference of the pre-validated coefficients (inner_folds - refit): {b.mean():+.4f} "
              f"(MC SE {b.std(ddof=1) / np.sqrt(b.size):.4f}, {b.size} cohorts)")
    d = np.array([x["inner_folds"]["est"] - x["refit"]["est"] for x in rows])
    print(f"paired difference of the C-difference estimates (inner_folds - refit): {d.mean():+.4f} "
          f"(MC SE {d.std(ddof=1) / np.sqrt(R):.4f}); mean signature size "
          f"{np.mean([x['refit']['size'] for x in rows]):.1f}")


def main(argv=None) -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--cohorts", type=int, default=200)
    ap.add_argument("--n", type=int, default=200)
    ap.add_argument("--p", type=int, default=60)
    ap.add_argument("--effect", type=float, default=1.0, help="imaging effect of the generator (1 = demo truth)")
    ap.add_argument("--folds", type=int, default=5)
    ap.add_argument("--repeats", type=int, default=2)
    ap.add_argument("--first", type=int, default=0, help="index of the first cohort (to split a run)")
    ap.add_argument("--out", default=None, help="write every cohort's numbers to this JSON file")
    ap.add_argument("--merge", nargs="+", default=None, help="print the table of these --out files together")
    a = ap.parse_args(argv)
    if a.merge:
        report([x for f in a.merge for x in json.loads(Path(f).read_text())])
        return
    warnings.simplefilter("ignore")
    engine.evaluate_predictions = c_only
    engine.evaluate_pair = no_pair
    preds = tuple(read_study(DEMO).predictors)
    fresh = sim_cohort(TRUTH_N, a.p, 999_999, a.effect)
    print(f"scale: n = {a.n}, p = {a.p} imaging features, imaging effect {a.effect}, {a.cohorts} cohorts; "
          f"cv {a.folds}-fold x {a.repeats}; signature lasso, 25 penalties, 5-fold penalty choice, "
          f"5 pre-validation folds; truth from n = {TRUTH_N:,}; serial, one process", flush=True)
    rows = []
    t0 = time.time()
    for i in range(a.first, a.first + a.cohorts):
        rows.append(one(sim_cohort(a.n, a.p, 30_000 + i, a.effect), fresh, preds, i, a.folds, a.repeats))
        if a.out:  # after every cohort, so a run stopped early still leaves its cohorts
            Path(a.out).write_text(json.dumps(rows))
        if (i + 1 - a.first) % 25 == 0:
            print(f"  {i + 1 - a.first}/{a.cohorts} cohorts, {time.time() - t0:.0f} s", flush=True)
    if a.out:
        Path(a.out).write_text(json.dumps(rows))
    report(rows)


if __name__ == "__main__":
    main()
