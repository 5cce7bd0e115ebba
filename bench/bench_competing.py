"""Competing risks and conditional survival: coverage and bias by seeded simulation.

Four studies, each over ``--cohorts`` simulated cohorts (invented data), printed with
Monte Carlo SEs next to the nominal value:

1. Aalen-Johansen 95% interval (workbench.competing.cif): coverage of the true cumulative
   incidence of each cause at horizons 0.25, 0.5, 1, 2 under constant cause-specific
   hazards (0.4 and 0.25 per unit time; true F_k(t) = l_k / (l_1 + l_2) (1 - exp(-(l_1 + l_2) t)))
   and uniform(0, 4) censoring.
2. Fine-Gray coefficients (workbench.competing.regression.fit_fine_gray): bias when the data
   come from a true Fine-Gray model, the design of Fine & Gray (JASA 1999, section 5;
   parameter values recalled from memory): two independent covariates Z1, Z2 ~ N(0, 1) or
   Bernoulli(0.5); cause 1 with P(T <= t, cause 1 | Z) = 1 - (1 - p (1 - exp(-t)))^exp(b1'Z),
   p = 0.3, b1 = (0.5, 0.5); cause 2 with P(cause 2 | Z) = 1 - P(cause 1 | Z) and
   T | cause 2 ~ exponential with rate exp(b2'Z), b2 = (-0.5, 0.5); uniform(0, 3) censoring.
   Printed also: the mean robust (sandwich) SE that FineGrayFit reports and the coverage
   of its 95% Wald interval, and the model-based SE of the weighted Cox fit (not offered),
   against the empirical SD.
3. Conditional survival 95% intervals (workbench.competing.conditional): coverage of
   S(t | alive at s) for s = 0.5, 1.0 and t = s + 0.5, s + 1 under a Weibull proportional-
   hazards truth (shape 1.3, scale 0.3, log HR 0.7 for a binary group and 0.4 for a normal
   covariate), uniform(0.5, 4) censoring: the Cox route for two fixed patients and the
   Kaplan-Meier route per group; and the bootstrap route of the patient estimate
   (workbench.competing.conditional.refit_ratio_limits: percentiles of S_b(t) / S_b(s)
   over ``--boot`` Cox models refitted on bootstrap samples), for the same two patients.
4. Time-dependent AUC for cause 1 at t = 1 (workbench.competing.metrics.competing_auc,
   definition 2 of Blanche et al. 2013) of the marker b1'Z on the Fine-Gray cohorts (normal
   covariates): coverage of its 95% interval (influence-function SE) against the true AUC
   from 400,000 uncensored patients of the same generator.

Run: nice -n 19 .venv/bin/python bench/bench_competing.py [--cohorts 1000] [--n 200] [--quick]
"""

from __future__ import annotations

import argparse
import functools
import time

import numpy as np
import pandas as pd

from workbench.competing.cif import aalen_johansen, incidence_at
from workbench.competing.conditional import (
    conditional_survival_cox,
    conditional_survival_km,
    refit_ratio_limits,
)
from workbench.competing.metrics import competing_auc
from workbench.competing.outcome import make_competing_outcome
from workbench.competing.regression import fit_fine_gray
from workbench.predictions import RiskScores
from workbench.stats.coxph import fit_coxph

AJ_RATES = (0.4, 0.25)
AJ_HORIZONS = np.array([0.25, 0.5, 1.0, 2.0])
FG_P, FG_B1, FG_B2 = 0.3, np.array([0.5, 0.5]), np.array([-0.5, 0.5])
AUC_T0 = 1.0
CS_SHAPE, CS_SCALE, CS_BETA = 1.3, 0.3, np.array([0.7, 0.4])
CS_LANDMARKS = ((0.5, 1.0), (0.5, 1.5), (1.0, 1.5), (1.0, 2.0))
CS_PATIENTS = np.array([[0.0, 0.0], [1.0, 1.0]])


# ------------------------------------------------------------ generators


def true_incidence(t, cause):
    lam = sum(AJ_RATES)
    return AJ_RATES[cause - 1] / lam * (1 - np.exp(-lam * np.asarray(t)))


def simulate_two_causes(n, rng):
    t = rng.exponential(1 / sum(AJ_RATES), n)
    cause = np.where(rng.uniform(size=n) < AJ_RATES[0] / sum(AJ_RATES), 1, 2)
    c = rng.uniform(0, 4, n)
    return np.minimum(t, c), np.where(t <= c, cause, 0)


def simulate_fine_gray(n, rng, binary=False, censor=True):
    Z = rng.binomial(1, 0.5, (n, 2)).astype(float) if binary else rng.standard_normal((n, 2))
    e1 = np.exp(Z @ FG_B1)
    p1 = 1 - (1 - FG_P) ** e1  # P(cause 1 | Z)
    is1 = rng.uniform(size=n) < p1
    u = rng.uniform(size=n)
    # Invert F1(t | Z) / p1 = u for cause-1 times.
    inner = 1 - (1 - u * p1) ** (1 / e1)
    t1 = -np.log1p(-np.clip(inner / FG_P, 0, 1 - 1e-15))
    t2 = rng.exponential(1 / np.exp(Z @ FG_B2))
    t = np.where(is1, t1, t2)
    c = rng.uniform(0, 3, n) if censor else np.full(n, np.inf)
    return Z, np.minimum(t, c), np.where(t <= c, np.where(is1, 1, 2), 0)


def simulate_weibull(n, rng):
    X = np.column_stack([rng.binomial(1, 0.5, n), rng.standard_normal(n)]).astype(float)
    t = (rng.exponential(size=n) / (CS_SCALE * np.exp(X @ CS_BETA))) ** (1 / CS_SHAPE)
    c = rng.uniform(0.5, 4, n)
    return X, np.minimum(t, c), t <= c


def group_survival(t):
    """Marginal survival of each group (x1 = 0, 1) over x2 ~ N(0, 1), Gauss-Hermite quadrature.

    A group's Kaplan-Meier curve estimates this mixture, so its conditional truth is
    group_survival(t) / group_survival(s)."""
    nodes, weights = np.polynomial.hermite_e.hermegauss(40)
    weights = weights / weights.sum()
    return np.array([
        np.sum(weights * np.exp(-CS_SCALE * np.exp(g * CS_BETA[0] + CS_BETA[1] * nodes) * t**CS_SHAPE))
        for g in (0, 1)
    ])


@functools.lru_cache(maxsize=1)
def true_auc(t0=AUC_T0, n=400_000):
    """AUC of the marker b1'Z at t0 under definition 2, from a large uncensored sample."""
    Z, t, c = simulate_fine_gray(n, np.random.default_rng(99), censor=False)
    m = Z @ FG_B1
    case = (c == 1) & (t <= t0)
    ranks = np.argsort(np.argsort(m)) + 1.0  # continuous marker: no ties
    n_case, n_ctrl = case.sum(), (~case).sum()
    return float((ranks[case].sum() - n_case * (n_case + 1) / 2) / (n_case * n_ctrl))


def true_conditional(x, s, t):
    return np.exp(-CS_SCALE * np.exp(x @ CS_BETA) * (t**CS_SHAPE - s**CS_SHAPE))


# ------------------------------------------------------------ one cohort


def one_cohort(seed, n, boot=0):
    """All three studies on cohorts drawn from one seed; returns a dict of arrays."""
    rng = np.random.default_rng(seed)
    out = {}
    t, c = simulate_two_causes(n, rng)
    res = aalen_johansen(t, c)
    hits = []
    for k in (1, 2):
        _, lo, hi = incidence_at(res, AJ_HORIZONS, cause=k)
        truth = true_incidence(AJ_HORIZONS, k)
        hits.append((lo <= truth) & (truth <= hi))
    out["aj"] = np.array(hits)  # (2 causes, horizons)

    for binary in (False, True):
        Z, t, c = simulate_fine_gray(n, rng, binary)
        fit = fit_fine_gray(pd.DataFrame(Z, columns=["z1", "z2"]), make_competing_outcome(t, c), cause=1,
                            min_events_per_parameter=0)
        out[f"fg_coef_{int(binary)}"] = fit.coef
        out[f"fg_se_{int(binary)}"] = fit.cox.se
        out[f"fg_rse_{int(binary)}"] = fit.se
        out[f"fg_cover_{int(binary)}"] = (fit.ci_lower <= FG_B1) & (FG_B1 <= fit.ci_upper)
        out[f"fg_share_{int(binary)}"] = np.array([np.mean(c == 0), np.mean(c == 1), np.mean(c == 2)])
        if not binary:
            y = make_competing_outcome(t, c)
            r = competing_auc(y, y, RiskScores(Z @ FG_B1), AUC_T0, cause=1)
            out["auc"] = np.array([r.auc, r.std_err, r.ci_lower <= true_auc() <= r.ci_upper])

    X, t, e = simulate_weibull(n, rng)
    fit = fit_coxph(X, t, e, min_events_per_parameter=0)
    cox_hits, km_hits = [], []
    for s, u in CS_LANDMARKS:
        r = conditional_survival_cox(fit, CS_PATIENTS, [u], s)
        truth = true_conditional(CS_PATIENTS, s, u)
        cox_hits.append((r.lower[:, 0] <= truth) & (truth <= r.upper[:, 0]))
        k = conditional_survival_km(t, e, [u], s, groups=X[:, 0].astype(int))
        truth_g = group_survival(u) / group_survival(s)
        km_hits.append((k.lower[:, 0] <= truth_g) & (truth_g <= k.upper[:, 0]))
    out["cs_cox"] = np.array(cox_hits)  # (landmarks, patients)
    if boot:
        times = sorted({v for pair in CS_LANDMARKS for v in pair})
        draws = []  # (boot, patients, times): S_b(t) of each refitted model, from S(t | alive at 0)
        for _ in range(boot):
            i = rng.integers(0, n, n)
            fb = fit_coxph(X[i], t[i], e[i], min_events_per_parameter=0)
            draws.append(conditional_survival_cox(fb, CS_PATIENTS, times, 0.0).survival)
        draws = np.array(draws)
        boot_hits = []
        for s, u in CS_LANDMARKS:
            cols = [times.index(s), times.index(u)]
            lims = [refit_ratio_limits(draws[:, p, cols], 0.95) for p in range(len(CS_PATIENTS))]
            truth = true_conditional(CS_PATIENTS, s, u)
            boot_hits.append([(lo[0] <= truth[p]) & (truth[p] <= hi[0]) for p, (lo, hi) in enumerate(lims)])
        out["cs_boot"] = np.array(boot_hits)  # (landmarks, patients)
    out["cs_km"] = np.array(km_hits)  # (landmarks, groups)
    return out


def run(cohorts, n, seed=20261203, boot=0):
    seeds = np.random.SeedSequence(seed).generate_state(cohorts)
    return [one_cohort(int(s), n, boot) for s in seeds]


def _p(hits):
    p = float(np.mean(hits))
    return p, np.sqrt(p * (1 - p) / len(hits))


# --------------------------------------------------------------- report


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--cohorts", type=int, default=1000)
    ap.add_argument("--n", type=int, default=200)
    ap.add_argument("--quick", action="store_true", help="100 cohorts, for a quick look")
    ap.add_argument("--boot", type=int, default=200,
                    help="refits per cohort for the bootstrap route of study 3 (0 skips it)")
    args = ap.parse_args()
    cohorts = 100 if args.quick else args.cohorts
    t0 = time.perf_counter()
    rows = run(cohorts, args.n, boot=args.boot)
    print(f"{cohorts} cohorts of n = {args.n}; nominal coverage 0.95; MC SE of a proportion "
          "sqrt(p(1-p)/R), of a mean SD/sqrt(R)\n")

    print("1. Aalen-Johansen 95% interval (delta-method variance, log(-log F) limits)")
    print(f"   {'cause':<7}{'horizon':>8}{'true F':>8}{'coverage':>10}{'MC SE':>8}")
    aj = np.array([r["aj"] for r in rows])
    for k in (1, 2):
        for j, h in enumerate(AJ_HORIZONS):
            p, se = _p(aj[:, k - 1, j])
            print(f"   {k:<7}{h:>8.2f}{true_incidence(h, k):>8.3f}{p:>10.3f}{se:>8.3f}")

    print("\n2. Fine-Gray coefficients under a true Fine-Gray model (b1 = 0.5, 0.5)")
    print(f"   {'covariates':<11}{'coef':>5}{'mean':>8}{'bias':>9}{'MC SE':>8}{'emp SD':>8}{'robust SE':>10}"
          f"{'model SE':>9}{'coverage':>9}{'MC SE':>7}   censored / cause 1 / cause 2")
    for binary in (0, 1):
        coefs = np.array([r[f"fg_coef_{binary}"] for r in rows])
        ses = np.array([r[f"fg_se_{binary}"] for r in rows])
        rses = np.array([r[f"fg_rse_{binary}"] for r in rows])
        cover = np.array([r[f"fg_cover_{binary}"] for r in rows])
        share = np.mean([r[f"fg_share_{binary}"] for r in rows], axis=0)
        for j in range(2):
            sd = coefs[:, j].std(ddof=1)
            print(f"   {('binary' if binary else 'normal'):<11}{'b' + str(j + 1):>5}{coefs[:, j].mean():>8.3f}"
                  f"{coefs[:, j].mean() - FG_B1[j]:>+9.4f}{sd / np.sqrt(cohorts):>8.4f}{sd:>8.3f}"
                  f"{rses[:, j].mean():>10.3f}{ses[:, j].mean():>9.3f}{_p(cover[:, j])[0]:>9.3f}"
                  f"{_p(cover[:, j])[1]:>7.3f}   {share[0]:.2f} / {share[1]:.2f} / {share[2]:.2f}")

    print("\n3. Conditional survival S(t | alive at s), 95% interval")
    print(f"   {'route':<22}{'s':>5}{'t':>5}{'coverage':>10}{'MC SE':>8}")
    cox = np.array([r["cs_cox"] for r in rows])
    km = np.array([r["cs_km"] for r in rows])
    for i, (s, u) in enumerate(CS_LANDMARKS):
        for j, who in enumerate(("Cox, patient x=(0,0)", "Cox, patient x=(1,1)")):
            p, se = _p(cox[:, i, j])
            print(f"   {who:<22}{s:>5.1f}{u:>5.1f}{p:>10.3f}{se:>8.3f}")
        if args.boot:
            for j, who in enumerate(("bootstrap, x=(0,0)", "bootstrap, x=(1,1)")):
                p, se = _p(np.array([r["cs_boot"] for r in rows])[:, i, j])
                print(f"   {who:<22}{s:>5.1f}{u:>5.1f}{p:>10.3f}{se:>8.3f}")
        for g in (0, 1):
            p, se = _p(km[:, i, g])
            print(f"   {'KM, group ' + str(g):<22}{s:>5.1f}{u:>5.1f}{p:>10.3f}{se:>8.3f}")
    auc = np.array([r["auc"] for r in rows])
    p, se = _p(auc[:, 2])
    sd = auc[:, 0].std(ddof=1)
    print(f"\n4. AUC for cause 1 at t = {AUC_T0:g} (definition 2), marker b1'Z: true {true_auc():.4f}")
    print(f"   mean estimate {auc[:, 0].mean():.4f} (bias {auc[:, 0].mean() - true_auc():+.4f}, MC SE "
          f"{sd / np.sqrt(cohorts):.4f}); empirical SD {sd:.4f}, mean SE {auc[:, 1].mean():.4f}; "
          f"coverage {p:.3f} (MC SE {se:.3f})")

    print(f"\nwall time {time.perf_counter() - t0:.0f} s")


if __name__ == "__main__":
    main()
