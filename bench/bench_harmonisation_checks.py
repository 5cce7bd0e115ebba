"""Harmonisation diagnostics: error rates on scanner-free data, detection of an injected effect.

Seeded simulation (invented data) with the generator of bench_new_scanner.py's training
part: three scanners (60, 50, 70 patients), 40 correlated features depending on a
protected covariate (age). Per cohort, workbench.preprocess.harmonisation_checks:

* with no scanner effect at all: the per-feature location and scale tests (BH at FDR
  0.05) should flag no feature in at least 95% of cohorts (under the global null the
  BH procedure controls the family-wise error at 0.05); the cross-validated scanner
  classifier AUC should be about 0.5; no confounding flag;
* with a planted location and scale effect: the share of features flagged before
  harmonisation (power) and after ComBat (should fall to about 0), the classifier AUC
  before and after (fold-wise harmonisation);
* with stage confounded with scanner (one scanner mostly late stage): the confounding
  flag rate.

Prints each rate with its Monte Carlo SE. Run:
``python bench/bench_harmonisation_checks.py --cohorts 200`` (about 3 minutes).
"""

from __future__ import annotations

import argparse
import time

import numpy as np
import pandas as pd

from workbench.preprocess.harmonisation_checks import check_features, combat_refit, confounding

SIZES = {"A": 60, "B": 50, "C": 70}


def simulate(seed: int, p: int = 40, effect: bool = False, confounded: bool = False):
    rng = np.random.default_rng(seed)
    batch = np.repeat(list(SIZES), list(SIZES.values()))
    n = batch.size
    age = rng.normal(63, 9, n)
    if confounded:  # scanner C is used mostly for stage III-IV
        late = np.where(batch == "C", rng.random(n) < 0.85, rng.random(n) < 0.30)
    else:
        late = rng.random(n) < 0.45
    stage = np.where(late, np.where(rng.random(n) < 0.5, "III", "IV"), np.where(rng.random(n) < 0.5, "I", "II"))
    load = rng.uniform(0.3, 0.8, p)
    bio = rng.standard_normal(n)[:, None] * load[None, :] + rng.standard_normal((n, p)) * np.sqrt(1 - load**2)
    X = 10 + 0.04 * (age[:, None] - 63) + 0.5 * late[:, None] + bio
    if effect:
        loc = pd.Series({"A": 0.0, "B": 0.6, "C": -0.4})[batch].to_numpy()
        sc = pd.Series({"A": 1.0, "B": 1.4, "C": 0.8})[batch].to_numpy()
        X = 10 + 0.04 * (age[:, None] - 63) + 0.5 * late[:, None] + loc[:, None] + sc[:, None] * bio
    time_ = rng.exponential(30 * np.exp(-0.7 * late))
    event = rng.random(n) < 0.7
    clinical = pd.DataFrame({"age": age.round(0).astype(int).astype(str), "stage": stage})
    C = np.column_stack([age, late.astype(float)])
    return X, batch, C, clinical, time_, event


def rate(x) -> tuple[float, float]:
    x = np.asarray(x, dtype=float)
    return float(x.mean()), float(x.std(ddof=1) / np.sqrt(x.size))


def main(argv=None) -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--cohorts", type=int, default=200)
    ap.add_argument("--seed", type=int, default=20261203)
    a = ap.parse_args(argv)
    t0 = time.time()
    cols = {"age": [0], "stage": [1]}
    kinds = {"age": "continuous", "stage": "categorical"}
    null_any, null_scale_any, null_auc, null_flag = [], [], [], []
    pow_loc, pow_scale, post_loc, auc_before, auc_after, stage_kept = [], [], [], [], [], []
    conf_flag = []
    for c in range(a.cohorts):
        X, b, C, clin, t, e = simulate(a.seed + c)
        chk = check_features(X, b, C, cols, random_state=c)
        null_any.append(chk.location_share > 0)
        null_scale_any.append(chk.scale_share > 0)
        null_auc.append(chk.classifier_auc)
        null_flag.append(any(f.flagged for f in confounding(b, clin, time=t, event=e, kinds=kinds)
                             if f.variable != "outcome"))
        X, b, C, clin, t, e = simulate(a.seed + 10_000 + c, effect=True)
        before = check_features(X, b, C, cols, random_state=c)
        after = check_features(X, b, C, cols, harmonise=combat_refit(), random_state=c)
        pow_loc.append(before.location_share)
        pow_scale.append(before.scale_share)
        post_loc.append(after.location_share)
        auc_before.append(before.classifier_auc)
        auc_after.append(after.classifier_auc)
        stage_kept.append(after.covariate_share["stage"] - before.covariate_share["stage"])
        X, b, C, clin, t, e = simulate(a.seed + 20_000 + c, confounded=True)
        conf_flag.append(any(f.flagged and f.variable == "stage"
                             for f in confounding(b, clin, time=t, event=e, kinds=kinds)))
    print(f"{a.cohorts} cohorts; mean (Monte Carlo SE)")
    rows = [
        ("no scanner effect: any feature flagged, location (target <= 0.05)", null_any),
        ("no scanner effect: any feature flagged, scale (target <= 0.05)", null_scale_any),
        ("no scanner effect: classifier AUC (target 0.5)", null_auc),
        ("no scanner effect: confounding flag on a clinical column (target about 0)", null_flag),
        ("planted effect: share of features flagged, location (power)", pow_loc),
        ("planted effect: share of features flagged, scale (power)", pow_scale),
        ("planted effect, after ComBat: share flagged, location (target about 0)", post_loc),
        ("planted effect: classifier AUC before", auc_before),
        ("planted effect: classifier AUC after, each fold part harmonised on its own (target 0.5)", auc_after),
        ("planted effect: change in share of features associated with stage (target about 0)", stage_kept),
        ("stage confounded with scanner: flag rate (power)", conf_flag),
    ]
    for label, v in rows:
        m, se = rate(v)
        print(f"  {label:<86} {m:6.3f} ({se:.3f})")
    print(f"time {time.time() - t0:.0f} s")


if __name__ == "__main__":
    main()
