"""Stability selection of imaging features with error control (complementary pairs).

Instead of choosing one penalty by cross-validation and keeping whatever the lasso
keeps there, stability selection asks which features the lasso picks again and again
on random halves of the patients [1]_. For each of ``pairs`` random splits of the
patients into two disjoint halves (complementary pairs [2]_), the penalised Cox path is
fitted on each half and the first ``q`` features to enter it are recorded. A feature's
selection probability is the share of the ``2 * pairs`` halves that picked it; the
signature keeps the features whose probability reaches ``threshold``.

Error control: with ``q`` features picked per half out of ``p`` and a threshold
``pi`` in (0.5, 1], the expected number of falsely selected noise features is at most
``q**2 / ((2 * pi - 1) * p)`` [1]_ (under the exchangeability assumption of [1]_; [2]_
shows the complementary-pairs version keeps this bound without it for features whose
single-half selection probability is low). We set ``q`` from the bound the user asks
for (``max_false``, E[V]): ``q = floor(sqrt(max_false * (2 * pi - 1) * p))``, at least 1.

Halves are formed from patients, not rows: after bootstrap resampling, all copies of a
patient go to the same half (``groups``).

References
----------
.. [1] Meinshausen N, Buehlmann P. Stability selection. J R Stat Soc B 2010;72:417-73.
.. [2] Shah RD, Samworth RJ. Variable selection with error control: another look at
       stability selection. J R Stat Soc B 2013;75:55-80.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from workbench.errors import ModelError

DEFAULT_PAIRS = 50
DEFAULT_THRESHOLD = 0.75
DEFAULT_MAX_FALSE = 1.0


def q_for_bound(p: int, threshold: float, max_false: float) -> int:
    """Features picked per half so that q^2 / ((2 pi - 1) p) <= max_false."""
    if not 0.5 < threshold <= 1.0:
        raise ModelError(f"the stability threshold must lie in (0.5, 1], got {threshold}.")
    if max_false <= 0:
        raise ModelError(f"the bound on false selections must be positive, got {max_false}.")
    return max(1, int(np.floor(np.sqrt(max_false * (2 * threshold - 1) * p))))


def first_to_enter(X: np.ndarray, y, q: int, *, l1_ratio: float = 1.0,
                   ratios=((0.1, 50), (0.01, 100))) -> np.ndarray:
    """Indices of the first ``q`` features to enter the penalised Cox path of (X, y).

    Features entering at the same penalty are ordered by the size of their coefficient
    there. Only the top of the path is needed: it is fitted down to ``0.1 * alpha_max``
    (50 log-spaced penalties, about the spacing of 100 penalties to 0.01), and to ``0.01 *
    alpha_max`` only when fewer than ``q`` features have entered by then (the long, dense
    end of a path is what costs: on the demo this is 10 times faster). Fewer than ``q``
    are returned if the path ends first.
    """
    from workbench.cohort.outcome import split_outcome
    from workbench.models.coxpath import fit_cox_path

    time, event = split_outcome(y)
    for alpha_min_ratio, n_alphas in ratios:
        # the path ends early where the explained deviance flattens (stop_flat), as before
        coefs = fit_cox_path(X, time, event, n_alphas=n_alphas, alpha_min_ratio=alpha_min_ratio,
                             l1_ratio=l1_ratio, stop_flat=True).coefs
        if np.count_nonzero(coefs.any(axis=1)) >= q:
            break
    nz = coefs != 0
    entered = nz.any(axis=1)
    first = np.where(entered, nz.argmax(axis=1), coefs.shape[1])
    size = np.abs(coefs[np.arange(coefs.shape[0]), np.minimum(first, coefs.shape[1] - 1)])
    order = np.lexsort((-size, first))
    return order[entered[order]][:q]


@dataclass(frozen=True)
class StabilityResult:
    """Selection probabilities of complementary-pairs stability selection."""

    feature_names: tuple
    probability: np.ndarray  # share of the 2 * pairs halves that picked each feature
    selected: tuple  # features at or above the threshold, most stable first
    q: int
    threshold: float
    max_false: float
    pairs: int
    bound: float  # q^2 / ((2 threshold - 1) p): the bound on E[false selections]


def stability_select(X, y, *, feature_names=None, groups=None, pairs: int = DEFAULT_PAIRS,
                     threshold: float = DEFAULT_THRESHOLD, max_false: float = DEFAULT_MAX_FALSE,
                     l1_ratio: float = 1.0, random_state=None) -> StabilityResult:
    """Complementary-pairs stability selection with the lasso path of a Cox model.

    ``X`` is standardised (as the signature's path gets it). ``groups`` are patient ids
    (rows sharing one go to the same half). Returns :class:`StabilityResult`.
    """
    X = np.asarray(X, dtype=float)
    n, p = X.shape
    if p == 0:
        raise ModelError("stability selection received no features.")
    if int(pairs) < 1:
        raise ModelError(f"stability selection needs at least one pair of halves, got pairs={pairs}.")
    names = tuple(feature_names) if feature_names is not None else tuple(f"x{j}" for j in range(p))
    q = min(q_for_bound(p, threshold, max_false), p)
    ids = np.arange(n) if groups is None else np.unique(np.asarray(groups), return_inverse=True)[1]
    n_ids = int(ids.max()) + 1
    rng = np.random.default_rng(random_state)
    counts = np.zeros(p)
    halves = 0
    for _ in range(int(pairs)):
        perm = rng.permutation(n_ids)
        half = n_ids // 2
        for part in (perm[:half], perm[half:2 * half]):
            rows = np.isin(ids, part)
            if y["event"][rows].sum() < 2:
                continue  # a half without events selects nothing (counted as a half all the same)
            counts[first_to_enter(X[rows], y[rows], q, l1_ratio=l1_ratio)] += 1
            halves += 1
    halves = max(halves, 1)
    prob = counts / (2 * int(pairs))
    keep = np.flatnonzero(prob >= threshold)
    keep = keep[np.argsort(-prob[keep], kind="stable")]
    return StabilityResult(names, prob, tuple(names[j] for j in keep), int(q), float(threshold),
                           float(max_false), int(pairs), float(q * q / ((2 * threshold - 1) * p)))
