"""A patient's absolute risk of each cause: coverage of its 95% limits by seeded simulation.

Estimand: the true cumulative incidence F_k(t | x) of a fixed covariate pattern x (and the
event-free survival), at horizons t = 0.5, 1, 2, for two patterns x = (0, 0) and (1, 1).
The truth is computed in closed form from the generator, not by the method under test.
Invented data only.

1. Fine-Gray route (workbench.competing.absolute_risk.fine_gray_risk): cohorts from a true
   Fine-Gray model, the design of bench/bench_competing.py study 2 (Fine & Gray, JASA 1999,
   section 5; normal covariates, b1 = (0.5, 0.5), p = 0.3, uniform(0, 3) censoring):
   F_1(t | x) = 1 - (1 - p (1 - exp(-t)))^exp(b1'x).
2. Cause-specific route (workbench.competing.absolute_risk.cause_specific_risks): cohorts
   with constant cause-specific hazards l_k exp(b_k'Z), l = (0.4, 0.25),
   b_1 = (0.5, 0.5), b_2 = (-0.5, 0.5), Z ~ N(0, I_2), uniform(0, 4) censoring:
   F_k(t | x) = a_k / A (1 - exp(-A t)) with a_k = l_k exp(b_k'x), A = a_1 + a_2,
   event-free survival exp(-A t).

For each cell: the true value, bias of the estimate (MC SE), coverage of the 95% interval
(MC SE sqrt(p(1-p)/R)), and the coverage the same standard error would give with half and
with double the interval width (z = 0.98 and 3.92), which the reduced property test
(tests/properties/test_competing_patient_simulation.py) must tell apart.

Run: PYTHONPATH=. nice -n 19 .venv/bin/python bench/bench_competing_patient.py [--cohorts 1000] [--n 200]

Measured on this machine (seed 20261203, nice -n 19 on 2 shared cores):

* 2000 cohorts of n = 200 (367 s): every cell's coverage in 0.937-0.963, MC SE 0.004-0.005.
  Fine-Gray route 0.937-0.950 (6 cells); cause-specific route 0.942-0.963 (18 cells: both
  causes and the event-free survival). Half width: 0.640-0.683; double width: 1.000.
  Bias of the point estimate: Fine-Gray -0.003 to -0.005 (MC SE 0.0005-0.0017; the small-
  sample bias of n = 200), cause-specific within +-0.004 (incidences) and +0.004 (event-free,
  pattern (0, 0)).
* 1000 cohorts of n = 100 (135 s): coverage 0.922-0.962 (MC SE 0.006-0.008); lowest at the
  pattern (1, 1) (cause 1 0.927-0.937, event-free 0.922-0.936, Fine-Gray 0.933-0.941), where
  few patients lie near the pattern. Half width: 0.627-0.681; double width: 0.997-1.000.
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).parent))
from bench_competing import FG_B1, FG_P, simulate_fine_gray  # noqa: E402

from workbench.competing.absolute_risk import cause_specific_risks, fine_gray_risk  # noqa: E402
from workbench.competing.outcome import make_competing_outcome  # noqa: E402
from workbench.competing.regression import fit_cause_specific, fit_fine_gray  # noqa: E402

HORIZONS = np.array([0.5, 1.0, 2.0])
PATIENTS = np.array([[0.0, 0.0], [1.0, 1.0]])
CS_RATES = np.array([0.4, 0.25])
CS_BETA = np.array([[0.5, 0.5], [-0.5, 0.5]])
Z95 = 1.959963984540054


def true_fine_gray(x, t):
    return 1 - (1 - FG_P * (1 - np.exp(-np.asarray(t)))) ** np.exp(x @ FG_B1)


def true_cause_specific(x, t):
    """(F_1, F_2, event-free) at times t for pattern x."""
    a = CS_RATES * np.exp(CS_BETA @ x)
    A = a.sum()
    t = np.asarray(t, dtype=float)
    return np.vstack([a[0] / A * -np.expm1(-A * t), a[1] / A * -np.expm1(-A * t), np.exp(-A * t)])


def simulate_cause_specific(n, rng):
    Z = rng.standard_normal((n, 2))
    rates = CS_RATES[None, :] * np.exp(Z @ CS_BETA.T)
    t = rng.exponential(1 / rates.sum(axis=1))
    cause = np.where(rng.uniform(size=n) < rates[:, 0] / rates.sum(axis=1), 1, 2)
    c = rng.uniform(0, 4, n)
    return Z, np.minimum(t, c), np.where(t <= c, cause, 0)


def _z(est, truth, sd_prob, survival=False):
    """Standardised error on the scale of the limits: log(-log(1 - F)), or log(-log S)."""
    p = np.asarray(est, dtype=float)
    q = 1 - p if not survival else p
    q_true = 1 - np.asarray(truth) if not survival else np.asarray(truth)
    se = sd_prob / (q * -np.log(q))
    return (np.log(-np.log(q)) - np.log(-np.log(q_true))) / se


def one_cohort(seed: int, n: int) -> dict:
    rng = np.random.default_rng(seed)
    out = {}
    Z, t, c = simulate_fine_gray(n, rng)
    y = make_competing_outcome(t, c)
    fg = fit_fine_gray(Z, y, cause=1, min_events_per_parameter=0)
    fg_rows = []
    for x in PATIENTS:
        r = fine_gray_risk(fg, Z, y, x[None, :], HORIZONS)
        truth = true_fine_gray(x, HORIZONS)
        fg_rows.append(np.vstack([r.risk[0] - truth, _z(r.risk[0], truth, r.se[0])]))
    out["fg"] = np.array(fg_rows)  # (patient, [bias, z], horizon)
    Z, t, c = simulate_cause_specific(n, rng)
    y = make_competing_outcome(t, c)
    cs = fit_cause_specific(Z, y, min_events_per_parameter=0)
    cs_rows = []
    for x in PATIENTS:
        r = cause_specific_risks(cs, Z, y, x[None, :], HORIZONS)
        truth = true_cause_specific(x, HORIZONS)
        cells = []
        for k in range(2):
            cells.append(np.vstack([r.risk[k] - truth[k], _z(r.risk[k], truth[k], r.se[k])]))
        z_free = _z(r.event_free, truth[2], r.event_free_se, survival=True)
        cells.append(np.vstack([r.event_free - truth[2], z_free]))
        cs_rows.append(np.array(cells))
    out["cs"] = np.array(cs_rows)  # (patient, [cause 1, cause 2, event-free], [bias, z], horizon)
    return out


def run(cohorts: int, n: int, seed: int = 20261203) -> list[dict]:
    seeds = np.random.SeedSequence(seed).generate_state(cohorts)
    return [one_cohort(int(s), n) for s in seeds]


def coverage(z, zcrit=Z95):
    hits = np.abs(np.asarray(z)) <= zcrit
    p = float(np.mean(hits))
    return p, float(np.sqrt(p * (1 - p) / hits.size))


def print_row(lab: str, what: str, h: float, truth: float, b, z) -> None:
    """One cell: bias with its MC SE, coverage with its MC SE, and the half- and double-width contrasts."""
    p, se = coverage(z)
    print(f"   {lab:<9}{what:<11}{h:>5.1f}{truth:>8.3f}{b.mean():>+9.4f}{b.std(ddof=1) / np.sqrt(b.size):>8.4f}"
          f"{p:>10.3f}{se:>7.3f}{coverage(z, Z95 / 2)[0]:>7.3f}{coverage(z, 2 * Z95)[0]:>8.3f}")


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--cohorts", type=int, default=1000)
    ap.add_argument("--n", type=int, default=200)
    ap.add_argument("--seed", type=int, default=20261203)
    args = ap.parse_args()
    t0 = time.perf_counter()
    rows = run(args.cohorts, args.n, args.seed)
    R = args.cohorts
    print(f"{R} cohorts of n = {args.n} (seed {args.seed}); nominal coverage 0.95; MC SE of a proportion "
          "sqrt(p(1-p)/R), of a mean SD/sqrt(R)\n")
    head = (f"   {'patient':<9}{'what':<11}{'t':>5}{'true':>8}{'bias':>9}{'MC SE':>8}{'coverage':>10}{'MC SE':>7}"
            f"{'half':>7}{'double':>8}")
    print("1. Fine-Gray route, true Fine-Gray model: risk of cause 1")
    print(head)
    fg = np.array([r["fg"] for r in rows])
    for i, x in enumerate(PATIENTS):
        lab = ",".join(str(int(v)) for v in x)
        truth = true_fine_gray(x, HORIZONS)
        for j, h in enumerate(HORIZONS):
            print_row(lab, "cause 1", h, truth[j], fg[:, i, 0, j], fg[:, i, 1, j])
    print("\n2. Cause-specific route, true cause-specific proportional hazards")
    print(head)
    cs = np.array([r["cs"] for r in rows])
    for i, x in enumerate(PATIENTS):
        lab = ",".join(str(int(v)) for v in x)
        truth = true_cause_specific(x, HORIZONS)
        for k, what in enumerate(("cause 1", "cause 2", "event-free")):
            for j, h in enumerate(HORIZONS):
                print_row(lab, what, h, truth[k, j], cs[:, i, k, 0, j], cs[:, i, k, 1, j])
    print(f"\nwall time {time.perf_counter() - t0:.1f} s (one process)")


if __name__ == "__main__":
    main()
