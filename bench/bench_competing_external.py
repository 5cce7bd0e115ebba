"""Coverage of the competing-risks external-validation intervals, by seeded simulation.

What is measured: workbench.competing.external.external_block, the interval the
competing route gives the metrics of fixed predictions on an external cohort (normal
interval from resampling the external patients; intervals.resample_interval, clipped by
intervals.guard), for the competing AUC (definition 2), the IPCW Brier score, IPA and ICI
of the cause of interest at two horizons, and the combined-minus-clinical AUC difference.

Generator (invented data): the Fine-Gray design of bench/bench_competing.py (two normal
covariates; cause 1 with a Fine-Gray model, p = 0.3, log subdistribution HRs 0.5, 0.5;
cause 2 exponential; uniform(0, 3) censoring). Per simulated cohort: a development sample
of ``--n-dev`` patients fits two cause-specific Cox models (clinical: Z1; combined: Z1 + Z2);
an external sample of ``--n`` patients is judged with ``--replicates`` resamples.

Estimand: the metric of the same fixed predictions in the external population, computed
on ``--truth-n`` uncensored patients of the generator without the method under test:
AUC from ranks (cases: cause 1 by t; controls: everyone else), Brier as the mean squared
difference, IPA against the population incidence, ICI as the mean absolute difference
between the prediction and the observed share among patients with similar predictions
(200 quantile bins of the prediction).

Printed: coverage (nominal 0.95, target 0.92-0.98) with its Monte Carlo SE, mean width,
bias of the point estimate against the truth, wall time.

Run: nice -n 19 .venv/bin/python bench/bench_competing_external.py [--cohorts 200] [--n 200]
     [--replicates 50] [--quick]
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

import numpy as np
from joblib import Parallel, delayed

sys.path.insert(0, str(Path(__file__).parent))
from bench_competing import simulate_fine_gray  # noqa: E402

from workbench.competing.external import DIFFERENCE, external_block  # noqa: E402
from workbench.competing.outcome import make_competing_outcome  # noqa: E402
from workbench.competing.regression import fit_cause_specific, predict_incidence_cause_specific  # noqa: E402

HORIZONS = np.array([0.5, 1.0])
DESIGNS = {"clinical": [0], "combined": [0, 1]}
METRICS = ("auc", "brier", "ipa", "ici")


def _truth_metrics(risk, t, c, t0) -> dict:
    case = (c == 1) & (t <= t0)
    ranks = np.argsort(np.argsort(risk)) + 1.0  # continuous predictions: no ties
    n1, n0 = case.sum(), (~case).sum()
    auc = (ranks[case].sum() - n1 * (n1 + 1) / 2) / (n1 * n0)
    brier = np.mean((case - risk) ** 2)
    p = case.mean()
    edges = np.quantile(risk, np.linspace(0, 1, 201))
    b = np.clip(np.searchsorted(edges, risk, side="right") - 1, 0, 199)
    obs = np.bincount(b, weights=case, minlength=200) / np.maximum(np.bincount(b, minlength=200), 1)
    ici = np.mean(np.abs(risk - obs[b]))
    return {"auc": auc, "brier": brier, "ipa": 1 - brier / (p * (1 - p)), "ici": ici}


def one_cohort(seed: int, n_dev: int, n: int, replicates: int, truth_n: int) -> dict:
    rng = np.random.default_rng(seed)
    Z, t, c = simulate_fine_gray(n_dev, rng)
    fits = {m: fit_cause_specific(Z[:, cols], make_competing_outcome(t, c), min_events_per_parameter=0)
            for m, cols in DESIGNS.items()}
    Ze, te, ce = simulate_fine_gray(n, rng)
    curves = {("cause", m, "cause_specific"): predict_incidence_cause_specific(f, Ze[:, DESIGNS[m]], HORIZONS)
              for m, f in fits.items()}
    block = external_block(curves, {"cause": make_competing_outcome(te, ce)}, HORIZONS, replicates=replicates,
                           seed=seed + 1)
    Zt, tt, ct = simulate_fine_gray(truth_n, rng, censor=False)
    truth = {}
    for m, f in fits.items():
        risk = predict_incidence_cause_specific(f, Zt[:, DESIGNS[m]], HORIZONS).risks
        truth[m] = {k: np.array([_truth_metrics(risk[:, j], tt, ct, t0)[k] for j, t0 in enumerate(HORIZONS)])
                    for k in METRICS}
    truth[DIFFERENCE] = {k: truth["combined"][k] - truth["clinical"][k] for k in METRICS}
    out = {}
    for m in ("clinical", "combined", DIFFERENCE):
        for k in METRICS if m != DIFFERENCE else ("auc",):
            v = block[("cause", m, "cause_specific")][k]
            out[(m, k)] = (v["estimate"], v["lower"], v["upper"], truth[m][k])
    return out


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--cohorts", type=int, default=200)
    ap.add_argument("--n-dev", type=int, default=300)
    ap.add_argument("--n", type=int, default=200)
    ap.add_argument("--replicates", type=int, default=50)
    ap.add_argument("--truth-n", type=int, default=100_000)
    ap.add_argument("--workers", type=int, default=2)
    ap.add_argument("--seed", type=int, default=20261203)
    ap.add_argument("--quick", action="store_true", help="40 cohorts, truth from 40,000 patients")
    a = ap.parse_args()
    cohorts, truth_n = (40, 40_000) if a.quick else (a.cohorts, a.truth_n)
    seeds = np.random.SeedSequence(a.seed).generate_state(cohorts)
    t0 = time.perf_counter()
    rows = Parallel(n_jobs=a.workers)(delayed(one_cohort)(int(s), a.n_dev, a.n, a.replicates, truth_n)
                                      for s in seeds)
    wall = time.perf_counter() - t0
    print(f"{cohorts} cohorts; development n = {a.n_dev}, external n = {a.n}, {a.replicates} resamples; "
          f"truth from {truth_n:,} uncensored patients; nominal 0.95 (target 0.92-0.98)\n")
    print(f"{'model':<26}{'metric':<7}{'t':>5}{'coverage':>10}{'MC SE':>7}{'width':>8}{'bias':>9}{'MC SE':>8}"
          f"{'no CI':>7}")
    for key in rows[0]:
        for j, h in enumerate(HORIZONS):
            est = np.array([r[key][0][j] for r in rows])
            lo = np.array([r[key][1][j] for r in rows])
            hi = np.array([r[key][2][j] for r in rows])
            tr = np.array([r[key][3][j] for r in rows])
            ok = np.isfinite(lo)
            hit = (lo[ok] <= tr[ok]) & (tr[ok] <= hi[ok])
            p = float(hit.mean()) if ok.any() else np.nan
            se = np.sqrt(p * (1 - p) / ok.sum()) if ok.any() else np.nan
            d = est - tr
            print(f"{key[0]:<26}{key[1]:<7}{h:>5.1f}{p:>10.3f}{se:>7.3f}{np.mean(hi[ok] - lo[ok]):>8.3f}"
                  f"{np.nanmean(d):>+9.4f}{np.nanstd(d, ddof=1) / np.sqrt(np.isfinite(d).sum()):>8.4f}"
                  f"{int((~ok).sum()):>7}")
    print(f"\nwall time {wall:.0f} s ({wall / cohorts:.1f} s per cohort on {a.workers} workers)")


if __name__ == "__main__":
    main()
