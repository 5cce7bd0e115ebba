"""Coverage of the intraclass-correlation intervals and error rates of the reproducibility filter.

Seeded simulation (invented data) of repeat measurements: y_ij = b_i + c_j + e_ij for
patient i and measurement j (k = 2), with b ~ N(0, 1), e ~ N(0, s_e^2) and, for the
agreement form, a measurement effect c_j ~ N(0, s_c^2) drawn afresh in every replicate.
True values: ICC(1,1) and ICC(3,1) = 1 / (1 + s_e^2) (no measurement effect for the
one-way form); ICC(2,1) = 1 / (1 + s_c^2 + s_e^2) with random measurement effects, and
1 / (1 + d^2 / 2 + s_e^2) with a fixed shift d of the second measurement (a rescan or a
second segmentation protocol: the question the agreement form usually answers). Printed: coverage of the 95% interval
(target 0.93-0.97) with its Monte Carlo SE, mean width, bias of the estimate; and, for the
filter at ICC >= 0.75, the share of features kept when the true ICC is 0.9 and when it is 0.5.

Run: .venv/bin/python bench/bench_icc.py [--reps 2000] (about a minute)
"""

from __future__ import annotations

import argparse
import time

import numpy as np

from workbench.preprocess.reproducibility import icc


def draw(rng, n, s_e, s_c=0.0, shift=0.0):
    b = rng.normal(0, 1, n)
    c = rng.normal(0, s_c, 2) if s_c > 0 else np.array([0.0, shift])
    return b[:, None] + c[None, :] + rng.normal(0, s_e, (n, 2))


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--reps", type=int, default=2000)
    args = ap.parse_args()
    rng = np.random.default_rng(20261203)
    t0 = time.perf_counter()
    print(f"{args.reps} replicates per row; MC SE of a coverage p: sqrt(p(1-p)/reps)\n")
    print(f"{'form':<10}{'n':>4}{'true ICC':>10}{'coverage':>10}{'MC SE':>8}{'width':>8}{'bias':>9}")
    rows = [(form, "", 0.0, 0.0) for form in ("ICC(1,1)", "ICC(3,1)")]
    rows += [("ICC(2,1)", "random c, s_c 0.5", 0.5, 0.0), ("ICC(2,1)", "fixed shift 0.5", 0.0, 0.5)]
    for form, label, s_c, shift in rows:
        for n in (20, 40):
            for s_e in (0.33, 1.0):
                truth = 1 / (1 + s_c**2 + shift**2 / 2 + s_e**2)
                hit, width, err = 0, [], []
                for _ in range(args.reps):
                    r = icc(draw(rng, n, s_e, s_c, shift), form, with_two_measure_interval=True)
                    hit += r.lower <= truth <= r.upper
                    width.append(r.upper - r.lower)
                    err.append(r.value - truth)
                p = hit / args.reps
                print(f"{form:<10}{n:>4}{truth:>10.3f}{p:>10.3f}{np.sqrt(p * (1 - p) / args.reps):>8.3f}"
                      f"{np.mean(width):>8.3f}{np.mean(err):>+9.4f}  {label}", flush=True)
    print("\nfilter ICC(3,1) >= 0.75, share of features kept:")
    for n in (20, 40):
        for truth in (0.9, 0.5):
            s_e = np.sqrt(1 / truth - 1)
            kept = np.mean([icc(draw(rng, n, s_e), "ICC(3,1)").value >= 0.75 for _ in range(args.reps)])
            print(f"  n = {n:>2}, true ICC {truth:.2f}: {kept:.3f} (MC SE {np.sqrt(kept * (1 - kept) / args.reps):.3f})")
    print(f"\nwall time {time.perf_counter() - t0:.0f} s")


if __name__ == "__main__":
    main()
