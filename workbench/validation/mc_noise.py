"""Monte Carlo noise of the outer estimates of a two-stage bootstrap, estimated from the data's replicates.

Each outer estimate of the two-stage bootstrap (:mod:`.two_stage`) is itself a
Monte Carlo estimate: it averages only ``inner`` bootstrap replicates, or one
k-fold split, of its outer sample. Their spread is therefore the sampling
spread of the estimator plus that Monte Carlo noise, and an interval built on
it alone is too wide (bench/bench_intervals.py: outer SD of a cross-validated C
difference 0.027 against its sampling SD of 0.017 with one 5-fold split per
outer sample).

The noise of one outer estimate is measured on the estimate from the data,
which averages many replicates: its replicates are cut into consecutive groups
shaped like one outer estimate (``inner`` bootstrap replicates; one cv repeat),
the estimator is applied to each group alone, and the variance across groups
is the Monte Carlo variance of one outer estimate (``outer_noise``). The
estimate from the data carries the same noise divided by its number of groups
(``estimate_noise``). :func:`~.intervals.two_stage_interval` subtracts the first
from the variance of the outer estimates and adds the second.

Outer samples repeat patients, so their inner replicates are, if anything,
noisier than the data's: measured on the data, the noise is not overstated and
the correction does not make the interval narrower than it should be on that
account. Fewer than :data:`MIN_GROUPS` groups give no correction (NaN).
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass

import numpy as np

from workbench.validation.estimators_bootstrap import bootstrap_estimate
from workbench.validation.results import ReplicateMetrics

MIN_GROUPS = 3
"""Fewest groups of data replicates from which the Monte Carlo variance is estimated."""


@dataclass(frozen=True)
class Noise:
    """Monte Carlo variance of one outer estimate and of the estimate from the data (NaN: unknown)."""

    outer_noise: float = np.nan
    estimate_noise: float = np.nan
    groups: int = 0


def group_estimates(method: str, estimator: str, name: str, apparent: float, rm: ReplicateMetrics, j: int,
                    gamma: float, size: int) -> dict[int, float]:
    """The estimator applied to each group of data replicates shaped like one outer estimate.

    ``method`` "cv": one group per repeat (mean of its held-out folds); "bootstrap":
    consecutive runs of ``size`` replicates (the inner replicates of one outer sample),
    complete groups only. Keys are group numbers.
    """
    if method == "cv":
        if rm.test is None:
            return {}
        v, keep = rm.test[:, j], rm.ok & np.isfinite(rm.test[:, j])
        return {int(r): float(v[keep & (rm.replicate == r)].mean()) for r in np.unique(rm.replicate[keep])}
    if method != "bootstrap" or size < 1:
        return {}
    col = {a: (None if getattr(rm, a) is None else getattr(rm, a)[:, j]) for a in ("train", "test", "oob")}
    group = rm.replicate // size
    out = {}
    for g in np.unique(group[rm.ok]):
        rows = rm.ok & (group == g)
        if rows.sum() != size:
            continue
        pick = {a: None if v is None else v[rows] for a, v in col.items()}
        if estimator == "optimism" and (pick["train"] is None or pick["test"] is None):
            return {}
        if estimator != "optimism" and pick["oob"] is None:
            return {}
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", RuntimeWarning)
            est = bootstrap_estimate(estimator, name, apparent, pick["train"], pick["test"], pick["oob"],
                                     gamma, 0.95)[0]
        if np.isfinite(est):
            out[int(g)] = float(est)
    return out


def noise_from_groups(values) -> Noise:
    """Noise of one group (outer estimate) and of their mean (the estimate from the data)."""
    v = np.asarray(list(values), dtype=float)
    v = v[np.isfinite(v)]
    if v.size < MIN_GROUPS:
        return Noise(groups=int(v.size))
    var = float(np.var(v, ddof=1))
    return Noise(var, var / v.size, int(v.size))


def replicate_noise(method: str, estimator: str, name: str, apparent: float, rm: ReplicateMetrics, j: int,
                    gamma: float, size: int) -> Noise:
    """:func:`noise_from_groups` of :func:`group_estimates`."""
    return noise_from_groups(group_estimates(method, estimator, name, apparent, rm, j, gamma, size).values())


def difference_noise(a: dict[int, float], b: dict[int, float]) -> Noise:
    """Noise of a difference of two models' estimates, paired by group."""
    common = sorted(set(a) & set(b))
    return noise_from_groups(a[g] - b[g] for g in common)
