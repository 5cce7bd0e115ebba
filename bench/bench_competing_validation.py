"""Bias and interval coverage of the competing-risks route's validated AUC and Brier score, by seeded simulation.

Generator (invented data): the demo cohort's model (workbench.simulate.simulate_cohort,
network hospitals, a reduced pool of imaging features) with the demo's death from other
causes (workbench.simulate_competing: Weibull hazard of age and ECOG only), censoring as
in the demo. Each simulated cohort of ``--n`` patients goes through
workbench.competing.analysis.validate_competing with the demo competing study's
predictors and imaging settings (demo_cohort/study_competing.toml) and ``--replicates``
bootstrap replicates, for the cause of interest (cancer death) only; every estimator
(Harrell's optimism correction, out-of-bootstrap, .632+) is formed from the SAME replicates.

Estimand: the performance of the models fitted on the whole simulated cohort (the apparent
fits), measured on a large independent cohort from the same generator with no censoring
(--truth-n patients; with every outcome observed, the IPCW estimators reduce to the plain
empirical AUC and Brier score). Printed: for the clinical and the clinical + signature
models by cause-specific Cox and their difference, at each horizon, the mean estimate of
every estimator, the mean truth, the bias (estimate minus truth) with its Monte Carlo SE
(SD of the differences / sqrt(cohorts)); then the coverage of 95% intervals with MC SE:
the route's rule (workbench.competing.estimates.oob_interval, "nb") around the .632+ and
the out-of-bootstrap estimates, and two rules side by side only ("plain": t sd(U_b)
sqrt(1 + 1/B); "fixed_se": 1.96 x the apparent fit's asymptotic AUC SE).

Before (Harrell's optimism correction only; --cohorts 60 --replicates 15): in-sample
signature coefficient, corrected AUC bias 0.005-0.006 (MC SE 0.004) clinical, 0.005 / 0.010
/ 0.013 at 12 / 24 / 36 months clinical + signature; cross-fitted coefficient (default):
clinical 0.005 / 0.006 / 0.006, clinical + signature 0.006 / 0.010 / 0.013 (0.003-0.004),
difference 0.001 / 0.004 / 0.006 (0.003); Brier -0.001 to -0.005 (0.002). No intervals.

After (--cohorts 200 --replicates 12 --n 300, truth 20,000; 4372 s on 2 workers on a
loaded machine). Bias, 12 / 24 / 36 months (MC SE 0.002-0.003 AUC, 0.001 Brier):
  AUC clinical      apparent +0.022 / +0.027 / +0.029; optimism +0.001 / +0.004 / +0.003;
                    oob -0.009 / -0.007 / -0.011; .632+ +0.001 / +0.004 / +0.002
  AUC clin + sig    apparent +0.023 / +0.031 / +0.036; optimism +0.001 / +0.007 / +0.008;
                    oob -0.020 / -0.016 / -0.018; .632+ -0.006 / -0.001 / -0.001
  AUC difference    optimism -0.001 / +0.003 / +0.006; oob -0.011 / -0.009 / -0.007;
                    .632+ -0.007 / -0.005 / -0.003
  Brier             .632+ within 0.003 everywhere; oob +0.004 to +0.010; optimism -0.003 to +0.000
Harrell's correction came within 0.01 in this run (at 12 replicates; +0.013 at 36 months in
the 60-cohort run above), the out-of-bootstrap estimate is pessimistic (each refit sees
~63% of the patients), .632+ is closest to the truth: the route's default.
Coverage of the 95% "nb" interval around .632+ (target 0.92-0.98, MC SE 0.010-0.017):
AUC clinical 0.965 / 0.950 / 0.955, clinical + signature 0.970 / 0.965 / 0.960, difference
0.935 / 0.970 / 0.980; Brier clinical 0.955 / 0.975 / 0.965, clinical + signature 0.970 /
0.975 / 0.970, difference 0.940 / 0.965 / 0.975 - all 18 cells in target. The same rule
around the biased out-of-bootstrap estimate: difference AUC 0.905 and Brier 0.890 at 12
months (out of target). Side by side: "plain" 0.955-0.995 (mostly over), "fixed_se"
0.82-0.91 (under: it ignores the refitting).

Second design, every model family and metric (--n 150 --replicates 12 --truth-n 10000
--arms cs,fg,all --all-metrics --workers 2; stopped after 48 cohorts, about 65 min at a load
of about 40 on 2 cores; 17 of 576 replicates failed; mean events 83.8 cancer, 21.3 other).
Coverage of the "nb" rule around .632+ per cell (model x horizon, MC SE 0.02-0.05), and
pooled over horizons (MC SE with the cohort as the unit, 0.015-0.044):
  cause-specific  AUC 0.854-0.979 (pooled clinical 0.889, combined 0.951, difference 0.896)
                  Brier 0.896-0.958 (0.924 / 0.931 / 0.938); IPA 0.896-0.979 (0.931 / 0.944 / 0.931)
                  ICI 0.875-0.979 (0.924 / 0.931 / 0.924)
  Fine-Gray       AUC 0.854-0.979 (0.910 / 0.951 / 0.868); Brier 0.896-0.979 (0.944 / 0.938 / 0.931)
                  IPA 0.896-0.979 (0.931 / 0.944 / 0.938); ICI 0.854-0.979 (0.924 / 0.938 / 0.903)
  all-cause Cox   AUC 0.917-0.979 (0.944 / 0.951 / 0.931); Brier 0.917-0.979 (0.951 / 0.951 / 0.938)
                  IPA 0.938-0.979 (0.965 / 0.958 / 0.951); ICI 0.854-0.938 (0.882 / 0.917 / 0.910)
Pooled .632+ bias at 150 (MC SE): AUC clinical -0.010 (0.009), combined -0.031 (0.007),
difference -0.021 (0.004); Brier +0.007 / +0.014 / +0.007 (0.001-0.003); IPA -0.042 / -0.070 /
-0.028 (0.007-0.014); ICI +0.027 / +0.027 / +0.001 (0.004-0.006) - similar for Fine-Gray;
all-cause AUC -0.014 / -0.024 / -0.010, IPA -0.047 / -0.064 / -0.017, ICI +0.039 / +0.036.
Per horizon, cause-specific combined (MC SE 0.004-0.018): Harrell's correction AUC -0.008 /
-0.000 / +0.006, IPA +0.002 / -0.001 / +0.010, ICI -0.017 / -0.013 / -0.009; out-of-bootstrap
AUC -0.057 to -0.059, IPA -0.109 to -0.133, ICI +0.034 to +0.054. At 150 patients .632+ is pessimistic beyond the 0.01 target and
Harrell's correction is closest; at 300 .632+ was closest. Interval widths at 150: AUC
0.24-0.33, Brier 0.09-0.12, IPA 0.38-0.66, ICI 0.15-0.18.

Third design, 300 patients, every family and metric (--n 300 --replicates 12 --truth-n 10000
--arms cs,fg,all --all-metrics --workers 1, three pieces --start 0 / 100 / 150 combined with
--rows; 96 cohorts, about 70 min at a load of 5-24 on 2 cores; 0 failed replicates; events
166.0 cancer (147-182), 44.2 other). The route's rule around .632+, per cell (model x
horizon, MC SE 0.010-0.034) and pooled over horizons:
  cause-specific  AUC 0.927-0.979 (pooled clinical 0.965, combined 0.965, difference 0.951)
                  Brier 0.938-0.969 (0.962 / 0.969 / 0.944); IPA 0.938-0.979 (0.979 / 0.965 / 0.948)
                  ICI 0.875-0.990 (0.969 / 0.979 / difference 0.906: 0.875 at 24 months)
  Fine-Gray       AUC 0.948-0.979 (0.962 / 0.962 / 0.962); Brier 0.938-0.969 (0.965 / 0.958 / 0.948)
                  IPA 0.927-0.979 (0.972 / 0.958 / 0.944); ICI 0.896-1.000 (0.976 / 0.979 / 0.917)
  all-cause Cox   AUC 0.958-1.000; Brier 0.938-0.990; IPA 0.927-1.000; ICI 0.927-0.990 (difference 0.938)
Mean width / (2 x 1.96 x SD(estimate - truth)) 1.02-1.42. Pooled .632+ bias: AUC -0.003 to
-0.010, Brier +0.002 to +0.005, IPA -0.010 to -0.025, ICI +0.001 to +0.018 (MC SE 0.002-0.005).

Fewer deaths from the cancer (--cancer-rate 0.15: its Weibull rate x 0.15, a third of the
demo's share; --n 300 --arms cs,fg --all-metrics, pieces --start 0 / 100; 74 cohorts; events
60.1 cancer (45-82), 71.9 other; 5 of 888 replicates failed). One model's AUC 0.93-1.00,
Brier 0.95-1.00, IPA 0.93-1.00; the differences short: cause-specific AUC 0.851-0.892 (pooled
0.878, MC SE 0.034), Brier 0.865-0.919 (0.887), IPA 0.892-0.946 (0.923), ICI 0.811-0.851;
Fine-Gray AUC 0.851-0.919 (0.892), Brier 0.892-0.919 (0.910), IPA 0.905-0.959, ICI 0.797-0.838.
Fewer still (--cancer-rate 0.06; 15 cohorts, stopped by a clinical fit error in the 16th,
events 28.9 (21-35); MC SE 0.06-0.12): difference AUC 0.857-0.929 per cell (pooled 0.844 /
0.867), IPA intervals 3.1-4.3 times the width above, Brier differences 2.6-3.0. At 150
patients (second design) the events were 74-99 cancer, 94-117 any death. Hence the event
floors of workbench.competing.estimates.INTERVAL_MIN_EVENTS.

Run: nice -n 19 .venv/bin/python bench/bench_competing_validation.py [--cohorts 100] [--n 300]
     [--replicates 20] [--quick] [--workers 2] [--save rows.pkl] [--arms cs,fg,all] [--all-metrics]
     [--start 0] [--cancer-rate 1] [--other-rate 1]; --rows a.pkl,b.pkl prints the tables of
     saved runs of one design (pieces with distinct --start) with the current code.
"""

from __future__ import annotations

import argparse
import os
import pickle
import time
import warnings
from dataclasses import replace
from pathlib import Path

import numpy as np
import pandas as pd
from joblib import Parallel, delayed

from workbench.cohort import Cohort, make_outcome
from workbench.competing.analysis import evaluate_arm, validate_competing
from workbench.competing.estimates import ESTIMATORS, oob_interval
from workbench.competing.fitting import target_outcome
from workbench.competing.metrics import competing_auc
from workbench.simulate import NETWORK_HOSPITALS, WEIBULL_SHAPE, simulate_cohort
from workbench.simulate_competing import OTHER_SHAPE, draw_other_death
from workbench.study import read_study
from workbench.validation.intervals import resample_interval

STUDY = Path(__file__).resolve().parents[1] / "demo_cohort" / "study_competing.toml"
N_FEATURES = 60
METRICS = ("auc", "brier")
ALL_METRICS = ("auc", "brier", "ipa", "ici")
MODELS = {"clinical": "clinical", "combined": "combined", "difference": "combined_minus_clinical"}
ARMS = {"cs": ("cause", "cause_specific"), "fg": ("cause", "fine_gray"), "all": ("all_cause", "cause_specific")}
"""Short name -> (target, method): the cause-specific Cox and Fine-Gray models of cancer death, all-cause Cox."""


def study(replicates_seed: int = 20261203, folds: int | None = None):
    """The demo competing study with the replicates' seed; ``folds``: the signature's penalty and
    cross-fitting folds (both; default the study's 5), a cheaper signature for the property test."""
    spec = read_study(STUDY)
    # the bench draws its own cohorts: only predictors, imaging settings and horizons are used
    spec = replace(spec, seed=replicates_seed)
    if folds is not None:
        im, models = spec.imaging, spec.models
        spec = replace(spec, imaging=replace(im, penalty=replace(im.penalty, folds=int(folds))),
                       models=replace(models, combined=replace(models.combined, prevalidation_folds=int(folds))))
    return spec


def simulate_competing_cohort(n: int, seed: int, *, censor: bool = True, cancer_rate: float = 1.0,
                              other_rate: float = 1.0, n_features: int = N_FEATURES) -> Cohort:
    """A cohort with cause 0/1/2 (censored, cancer death, other death); ``censor=False`` keeps every death.

    ``cancer_rate`` / ``other_rate``: multipliers of the Weibull rate of each cause's hazard
    (workbench.simulate.WEIBULL_RATE, workbench.simulate_competing.OTHER_RATE). A Weibull
    proportional-hazards time drawn with rate r is (-log U / (r exp(lp)))^(1/shape), so the
    time with rate k r is that time times k^(-1/shape): the same draws, the same
    covariates and effects, only the baseline hazard of that cause scaled by k.
    """
    sim = simulate_cohort(n, random_state=seed, hospitals=NETWORK_HOSPITALS, n_features=n_features)
    et = sim.event_times
    t_other = draw_other_death(et["age"].to_numpy(), et["ecog"].to_numpy(), random_state=[seed, 7])
    t_other = t_other * other_rate ** (-1.0 / OTHER_SHAPE)
    t_cancer = et["t_event"].to_numpy(float) * cancer_rate ** (-1.0 / WEIBULL_SHAPE)
    t_censor = et["t_censor"].to_numpy(float) if censor else np.full(n, np.inf)
    time_ = np.minimum.reduce([t_cancer, t_other, t_censor])
    cause = np.where(t_cancer <= np.minimum(t_other, t_censor), 1, np.where(t_other < t_censor, 2, 0))
    clinical = sim.clinical.drop(columns=["patient_id", "os_months", "status"]).reset_index(drop=True)
    feats = sim.imaging.drop(columns=["patient_id", "scanner"]).reset_index(drop=True)
    return Cohort(ids=sim.clinical["patient_id"].to_numpy(), y=make_outcome(time_, cause == 1), clinical=clinical,
                  features=feats, batch=sim.imaging["scanner"].to_numpy(), cause=cause)


def one_cohort(r: int, n: int, replicates: int, truth: Cohort, base_seed: int, *, arms=("cs",),
               metrics=METRICS, rates=(1.0, 1.0), folds: int | None = None) -> dict:
    """Every estimator (and the replicates' out-of-bootstrap values) from one run of the route on one cohort.

    Keys (arm, model, metric, kind): arm in :data:`ARMS`, model in :data:`MODELS`; kind "truth",
    "apparent", each estimator, and "u" (the out-of-bootstrap values, replicates x horizons).
    """
    spec = study(base_seed + r, folds)
    cohort = simulate_competing_cohort(n, base_seed + 1000 + r, cancer_rate=rates[0], other_rate=rates[1])
    h = spec.horizons
    targets = tuple(dict.fromkeys(ARMS[a][0] for a in arms))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        # workers=1: the cohorts run in parallel, their replicates in the cohort's own process
        v = validate_competing(cohort, spec, replicates=replicates, targets=targets, metrics=metrics, workers=1)
        tables = {e: v.table(e) for e in ESTIMATORS}
        true = {}
        for a in arms:
            target, method = ARMS[a]
            for model in ("clinical", "combined"):
                true[(a, model)] = evaluate_arm(v.arms[(target, model)], truth, target, method, h, metrics)
            true[(a, "difference")] = {m: true[(a, "combined")][m] - true[(a, "clinical")][m] for m in metrics}
    out = {"ratio": float(np.mean([x.n_out / x.n_in for x in v.rows]))}
    for a in arms:
        target, method = ARMS[a]
        for model, name in MODELS.items():
            key = (target, name, method)
            for m in metrics:
                out[(a, model, m, "truth")] = true[(a, model)][m]
                out[(a, model, m, "apparent")] = v.apparent[key][m]
                for e, tab in tables.items():
                    out[(a, model, m, e)] = tab.corrected[key][m]
                # the replicates' out-of-bootstrap values: coverage() forms the intervals from them
                out[(a, model, m, "u")] = np.array([x.oob[key][m] for x in v.rows if x.oob is not None])
    # side by side, not reported by the route: oob estimate -+ 1.96 x the asymptotic SE of the apparent fit's AUC
    # on all rows (fixed predictions; Blanche et al. 2013)
    if "cs" in arms:
        for model in ("clinical", "combined"):
            curves = v.arms[("cause", model)].predict(cohort, h, "cause_specific")
            y = target_outcome(cohort, "cause")
            se = np.array([competing_auc(y, y, curves, t).std_err for t in h])
            out[("cs", model, "auc", "fixed_se")] = se
    out["failed"] = v.failed
    out["n"], out["replicates"], out["truth_n"] = n, replicates, truth.n
    out["arms"], out["metrics"] = tuple(arms), tuple(metrics)
    out["events"] = (int(np.sum(cohort.cause == 1)), int(np.sum(cohort.cause == 2)))
    out["cohort"], out["rates"] = r, tuple(rates)
    return out


def _design(rows: list[dict]):
    return rows[0].get("arms", ("cs",)), rows[0].get("metrics", METRICS)


def _cells(rows: list[dict]):
    """(arm, model, metric, truth over cohorts x horizons) for every cell the rows hold."""
    arms, metrics = _design(rows)
    for a in arms:
        for model in MODELS:
            for m in metrics:
                yield a, model, m, np.array([r[(a, model, m, "truth")] for r in rows])


def summarise(rows: list[dict], horizons) -> pd.DataFrame:
    """Bias (estimate minus truth) of every estimator, with its MC SE."""
    lines = []
    for a, model, m, truth in _cells(rows):
        for kind in ("apparent", *ESTIMATORS):
            est = np.array([r[(a, model, m, kind)] for r in rows])
            d = est - truth
            ok = np.isfinite(d)
            for j, t in enumerate(horizons):
                dj = d[ok[:, j], j]
                lines.append({"arm": a, "model": model, "metric": m, "estimator": kind, "horizon": t,
                              "mean_est": np.nanmean(est[:, j]), "mean_truth": np.nanmean(truth[:, j]),
                              "bias": dj.mean(), "mc_se": dj.std(ddof=1) / np.sqrt(dj.size),
                              "sd_err": dj.std(ddof=1), "cohorts": dj.size})
    return pd.DataFrame(lines)


def _limits(r: dict, model: str, m: str, rule: str, horizons, estimator: str = "oob", arm: str = "cs"):
    """Interval limits of one cohort's ``estimator`` by ``rule`` (arrays over the horizons)."""
    est, u = r[(arm, model, m, estimator)], r[(arm, model, m, "u")]
    lo, hi = np.full(len(horizons), np.nan), np.full(len(horizons), np.nan)
    fixed = r.get((arm, model, m, "fixed_se"))
    for j in range(len(horizons)):
        if rule == "nb":  # the route's rule: Nadeau-Bengio variance of the U_b, around the estimate
            lo[j], hi[j], _ = oob_interval(m, u[:, j], est[j], r["ratio"], 0.95, model == "difference")
        elif rule == "plain":  # t sd(U_b) sqrt(1 + 1/B): no 1/B + n_out/n_in factor
            lo[j], hi[j] = resample_interval(u[:, j], est[j], 0.95)
        elif fixed is not None:  # 1.96 x the apparent fit's asymptotic AUC SE (fixed predictions)
            lo[j], hi[j] = est[j] - 1.96 * fixed[j], est[j] + 1.96 * fixed[j]
    return lo, hi


RULES = (("oob", "nb"), ("632plus", "nb"), ("oob", "plain"), ("oob", "fixed_se"))


def coverage(rows: list[dict], horizons) -> pd.DataFrame:
    """Coverage of the truth by 95% intervals around the oob and .632+ estimates, with MC SE."""
    lines = []
    for a, model, m, truth in _cells(rows):
        for estimator, rule in RULES:
            if rule == "fixed_se" and (a, model, m, "fixed_se") not in rows[0]:
                continue
            est = np.array([r[(a, model, m, estimator)] for r in rows])
            lims = [_limits(r, model, m, rule, horizons, estimator, a) for r in rows]
            lo, hi = np.array([x[0] for x in lims]), np.array([x[1] for x in lims])
            for j, t in enumerate(horizons):
                ok = np.isfinite(lo[:, j]) & np.isfinite(truth[:, j])
                hit = (lo[ok, j] <= truth[ok, j]) & (truth[ok, j] <= hi[ok, j])
                p = hit.mean() if hit.size else np.nan
                lines.append({"arm": a, "model": model, "metric": m, "estimator": estimator, "rule": rule,
                              "horizon": t, "coverage": p, "mc_se": np.sqrt(p * (1 - p) / max(hit.size, 1)),
                              "cohorts": int(hit.size), "mean_width": np.mean(hi[ok, j] - lo[ok, j]),
                              "sd_err": np.std(est[ok, j] - truth[ok, j], ddof=1),
                              "in_target": bool(0.92 <= p <= 0.98)})
    return pd.DataFrame(lines)


def pooled_coverage(rows: list[dict], horizons, estimator: str = "632plus") -> pd.DataFrame:
    """The route's rule around ``estimator`` pooled over the horizons, per arm, model and metric.

    MC SE with the cohort as the unit (the horizons of one cohort are correlated): SD over cohorts
    of the cohort's hit rate / sqrt(cohorts). Also the mean bias over horizons with its MC SE.
    """
    lines = []
    arms, metrics = _design(rows)
    for a in arms:
        for model in MODELS:
            for m in metrics:
                hits, errs = [], []
                for r in rows:
                    lo, hi = _limits(r, model, m, "nb", horizons, estimator, a)
                    t = r[(a, model, m, "truth")]
                    ok = np.isfinite(lo) & np.isfinite(t)
                    if ok.any():
                        hits.append(np.mean((lo[ok] <= t[ok]) & (t[ok] <= hi[ok])))
                    d = r[(a, model, m, estimator)] - t
                    if np.isfinite(d).any():
                        errs.append(np.nanmean(d))
                hits, errs = np.array(hits), np.array(errs)
                lines.append({"arm": a, "model": model, "metric": m, "coverage": hits.mean(),
                              "mc_se": hits.std(ddof=1) / np.sqrt(hits.size), "bias": errs.mean(),
                              "bias_mc_se": errs.std(ddof=1) / np.sqrt(errs.size), "cohorts": hits.size})
    return pd.DataFrame(lines)


def main(argv=None) -> pd.DataFrame:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--cohorts", type=int, default=100)
    ap.add_argument("--n", type=int, default=300)
    ap.add_argument("--replicates", type=int, default=20)
    ap.add_argument("--truth-n", type=int, default=20_000)
    ap.add_argument("--workers", type=int, default=2)
    ap.add_argument("--seed", type=int, default=5150)
    ap.add_argument("--save", default="", help="pickle the per-cohort rows here as they arrive")
    ap.add_argument("--rows", default="", help="summarise the rows saved by --save instead of running; several "
                    "comma-separated files (runs of one design with different --start) are combined")
    ap.add_argument("--start", type=int, default=0, help="first cohort index (seeds seed + index): a run continued "
                    "with --start equal to the cohorts done draws new cohorts, --rows a,b combines them")
    ap.add_argument("--cancer-rate", type=float, default=1.0, help="multiplier of the cancer death hazard's "
                    "Weibull rate (below 1: fewer events of the cause of interest)")
    ap.add_argument("--other-rate", type=float, default=1.0, help="multiplier of the other-cause death hazard's "
                    "Weibull rate")
    ap.add_argument("--quick", action="store_true", help="12 cohorts, 8 replicates, truth from 8,000 patients")
    ap.add_argument("--arms", default="cs", help="comma-separated of cs (cause-specific Cox), fg (Fine-Gray), "
                    "all (all-cause Cox); default cs")
    ap.add_argument("--all-metrics", action="store_true", help="also the IPA and ICI (default: AUC and Brier)")
    a = ap.parse_args(argv)
    if a.quick:
        a.cohorts, a.replicates, a.truth_n = 12, 8, 8_000
    start = time.time()
    if a.rows:  # print the tables of a saved run (same cohorts, the current code's intervals)
        rows = combine_rows(a.rows.split(","))
        a.cohorts, a.n, a.replicates, a.truth_n = len(rows), rows[0]["n"], rows[0]["replicates"], rows[0]["truth_n"]
        return _print(rows, a, start)
    rates = (a.cancer_rate, a.other_rate)
    truth = simulate_competing_cohort(a.truth_n, a.seed - 1, censor=False, cancer_rate=rates[0], other_rate=rates[1])
    rows = []
    for row in Parallel(n_jobs=a.workers, return_as="generator")(
            delayed(one_cohort)(r, a.n, a.replicates, truth, a.seed, arms=tuple(a.arms.split(",")),
                                metrics=ALL_METRICS if a.all_metrics else METRICS, rates=rates)
            for r in range(a.start, a.start + a.cohorts)):
        rows.append(row)
        if a.save:  # the rows so far, so that a long run can be read before it ends
            with open(a.save + ".part", "wb") as fh:
                pickle.dump(rows, fh)
            os.replace(a.save + ".part", a.save)
    return _print(rows, a, start)


def combine_rows(paths) -> list[dict]:
    """The rows of several saved runs of one design, each cohort once (checked: same design, no index twice)."""
    rows, seen = [], set()
    for p in paths:
        with open(p, "rb") as fh:
            part = pickle.load(fh)
        for r in part:
            key = r.get("cohort")
            if key is not None and key in seen:
                raise SystemExit(f"{p}: cohort {key} is already in an earlier file; give runs with distinct --start.")
            seen.add(key)
            rows.append(r)
    design = {(r["n"], r["replicates"], r["truth_n"], r.get("arms"), r.get("metrics"), r.get("rates", (1.0, 1.0)))
              for r in rows}
    if len(design) > 1:
        raise SystemExit(f"the files hold different designs {sorted(map(str, design))}; combine one design only.")
    return rows


def _print(rows: list[dict], a, start: float) -> pd.DataFrame:
    horizons = study().horizons
    table = summarise(rows, horizons)
    cov = coverage(rows, horizons)
    print(f"Competing-risks route, bootstrap validation: {a.cohorts} cohorts of {a.n} patients, "
          f"{N_FEATURES} imaging features, {a.replicates} replicates each; truth from {a.truth_n} uncensored "
          f"patients. Failed replicates in all: {sum(r['failed'] for r in rows)}; mean n_out/n_in "
          f"{np.mean([r['ratio'] for r in rows]):.3f}; mean events (cancer, other) "
          f"{np.mean([r.get('events', (np.nan, np.nan)) for r in rows], axis=0).round(1)} (min cancer "
          f"{min(r.get('events', (np.nan,))[0] for r in rows)}); hazard rate multipliers (cancer, other) "
          f"{rows[0].get('rates', (1.0, 1.0))}. Nominal bias 0 (target |bias| <= 0.01); "
          "model 'difference' = combined minus clinical.")
    with pd.option_context("display.width", 180, "display.max_rows", 2000):
        print(table.round(4).to_string(index=False))
        print("\nCoverage of 95% intervals (target 0.92-0.98; MC SE sqrt(p(1-p)/cohorts)). Rules: 'nb' the route's "
              "(workbench.competing.estimates.oob_interval: Nadeau-Bengio variance of the out-of-bootstrap values) "
              "around the estimator's estimate; side by side only: 'plain' t sd(U_b) sqrt(1 + 1/B), 'fixed_se' "
              "1.96 x the apparent fit's asymptotic AUC SE")
        print(cov.round(4).to_string(index=False))
        print("\nThe route's rule around .632+, pooled over the horizons (MC SE: cohort as the unit):")
        print(pooled_coverage(rows, horizons).round(4).to_string(index=False))
    print(f"wall time {time.time() - start:.0f} s with {a.workers} workers")
    return table


if __name__ == "__main__":
    main()
