"""Time the whole imaging-signature pipeline against one bare penalised Cox path.

Synthetic cohort generated here (seeded): 500 patients x 1000 correlated features
built from 25 latent factors with loadings between 0.5 and 0.98 (so some pairs
exceed |r| = 0.9, as radiomic features do), 5 true signals, three scanners.

Prints, in one run:
* seconds to fit ImagingSignature (ComBat, filters, early-stopped path, 5-fold
  patient-grouped CV, refit) against one CoxnetSurvivalAnalysis fit of the full
  default path on the same standardised matrix (the kernel floor), and the ratio
  (target: within 2x);
* in one bootstrap sample, the penalty chosen with patient-grouped folds and with
  naive row folds (as a fraction of alpha_max) and the features kept by each.

Run: .venv/bin/python bench/bench_signature.py [--repeats 3]
"""

from __future__ import annotations

import argparse
import time
import warnings

import numpy as np
import pandas as pd
from sksurv.linear_model import CoxnetSurvivalAnalysis

from workbench.cohort.outcome import make_outcome
from workbench.models.penalized import fit_penalized_path
from workbench.models.signature import ImagingSignature


def synthetic_cohort(n=500, p=1000, n_true=5, n_factors=25, seed=2024):
    rng = np.random.default_rng(seed)
    F = rng.standard_normal((n, n_factors))
    factor = rng.integers(0, n_factors, p)
    load = rng.uniform(0.5, 0.98, p)
    X = load * F[:, factor] + np.sqrt(1 - load**2) * rng.standard_normal((n, p))
    true = rng.choice(p, n_true, replace=False)
    eta = X[:, true] @ rng.choice([-0.5, 0.5], n_true)
    t = rng.exponential(np.exp(-eta))
    c = rng.exponential(2 * np.median(t), n)
    batch = rng.choice(np.array(["scanner A", "scanner B", "scanner C"]), n)
    X = X + pd.Series({"scanner A": 0.0, "scanner B": 0.5, "scanner C": -0.3})[batch].to_numpy()[:, None]
    cols = [f"feat_{j:04d}" for j in range(p)]
    return pd.DataFrame(X, columns=cols), make_outcome(np.minimum(t, c), t <= c), batch, [cols[j] for j in true]


def best_of(fn, repeats):
    times, out = [], None
    for _ in range(repeats):
        t0 = time.perf_counter()
        out = fn()
        times.append(time.perf_counter() - t0)
    return min(times), out


def main(repeats: int) -> None:
    X, y, batch, true = synthetic_cohort()
    Z = ((X - X.mean()) / X.std(ddof=0)).to_numpy()
    warnings.simplefilter("ignore")

    t_sig, sig = best_of(lambda: ImagingSignature(random_state=0).fit(X, y, batch=batch), repeats)
    t_net, net = best_of(lambda: CoxnetSurvivalAnalysis(l1_ratio=0.9).fit(Z, y), repeats)
    print(f"cohort: {X.shape[0]} patients x {X.shape[1]} features, {int(y['event'].sum())} events, "
          f"best of {repeats}")
    print(f"{'step':<28}{'features in':>12}{'out':>6}")
    for s in sig.steps_:
        print(f"{s.step:<28}{s.n_in:>12}{s.n_out:>6}")
    r = sig.path_
    print(f"true signals selected: {len(set(true) & set(sig.selected_features_))} of {len(true)}; "
          f"chosen alpha {r.alpha / r.alpha_max:.3f} x alpha_max, path stops at "
          f"{r.alphas[-1] / r.alpha_max:.3f} x alpha_max, extensions {r.n_extensions}")
    print(f"{'whole signature pipeline':<34}{t_sig:8.3f} s")
    print(f"{'bare Coxnet full path (' + str(net.alphas_.size) + ' alphas)':<34}{t_net:8.3f} s")
    print(f"{'ratio pipeline / bare path':<34}{t_sig / t_net:8.2f}   (target <= 2)")

    ids = np.random.default_rng(7).integers(0, X.shape[0], X.shape[0])
    Xb = X.to_numpy()[ids]
    Zb = (Xb - Xb.mean(0)) / Xb.std(0)
    grouped = fit_penalized_path(Zb, y[ids], groups=ids, random_state=0)
    naive = fit_penalized_path(Zb, y[ids], random_state=0)
    print("bootstrap sample, inner 5-fold CV on all 1000 standardised features:")
    for name, res in (("grouped by patient", grouped), ("naive by row", naive)):
        print(f"  {name:<20} alpha {res.alpha / res.alpha_max:.3f} x alpha_max, "
              f"{int(res.n_nonzero[res.index]):4d} features kept, extensions {res.n_extensions}")


if __name__ == "__main__":
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--repeats", type=int, default=3)
    main(ap.parse_args().repeats)
