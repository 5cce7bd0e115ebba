"""Seeds and resampling plans: bootstrap indices, patient-grouped cross-validation folds.

All randomness comes from ``numpy.random.SeedSequence``; a plan is a pure function
of the cohort and the seed, so replicate ``b`` does not depend on how many are run.
"""

from __future__ import annotations

import warnings

import numpy as np
from sklearn.model_selection import StratifiedGroupKFold

from workbench.cohort.core import Cohort
from workbench.errors import SpecError

__all__ = ["cv_splits"]


def _seed_int(ss: np.random.SeedSequence) -> int:
    return int(ss.generate_state(1, np.uint32)[0])


def _root(random_state) -> np.random.SeedSequence:
    if isinstance(random_state, np.random.SeedSequence):
        return random_state
    if random_state is not None and (int(random_state) != random_state or random_state < 0):
        raise SpecError(f"random_state must be a non-negative whole number or None, got {random_state!r}.")
    return np.random.SeedSequence(None if random_state is None else int(random_state))


def _copy_seed(ss: np.random.SeedSequence) -> np.random.SeedSequence:
    # spawn() advances a SeedSequence; work on a copy so a caller's object can be reused.
    return np.random.SeedSequence(ss.entropy, spawn_key=ss.spawn_key, pool_size=ss.pool_size)


# ----------------------------------------------------------------- the plans


def _bootstrap_plan(n: int, replicates: int, rep_root) -> list[tuple[np.ndarray, int]]:
    plan = []
    for child in rep_root.spawn(int(replicates)):
        idx_ss, model_ss = child.spawn(2)
        plan.append((np.random.default_rng(idx_ss).integers(0, n, n), _seed_int(model_ss)))
    return plan


def _oob_rows(ids: np.ndarray, idx: np.ndarray) -> np.ndarray:
    """Rows whose PATIENT was not drawn into the bootstrap sample ``idx``.

    Grouped by patient id: a patient with several rows (or a patient repeated in
    an outer bootstrap sample) is out of bootstrap only if none of its rows was drawn.
    """
    return np.flatnonzero(~np.isin(ids, np.unique(ids[idx])))


def _cv_plan(cohort: Cohort, folds: int, repeats: int, rep_root) -> list[tuple[int, int, np.ndarray, np.ndarray, int]]:
    n_patients = np.unique(cohort.ids).size
    if n_patients < folds:
        raise SpecError(
            f"{folds}-fold cross-validation needs at least {folds} patients; the cohort has {n_patients}."
        )
    plan = []
    for r, child in enumerate(rep_root.spawn(int(repeats))):
        fold_ss, model_ss = child.spawn(2)
        splitter = StratifiedGroupKFold(n_splits=int(folds), shuffle=True, random_state=_seed_int(fold_ss))
        seeds = [_seed_int(s) for s in model_ss.spawn(int(folds))]
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", UserWarning)  # fewer events than folds in a class
            splits = splitter.split(np.zeros(cohort.n), cohort.event, cohort.ids)
            for f, (tr, te) in enumerate(splits):
                plan.append((r, f, tr, te, seeds[f]))
    return plan


def cv_splits(cohort: Cohort, *, folds: int = 5, repeats: int = 10, random_state=None) -> list:
    """The cross-validation splits :func:`validate` uses for ``method="cv"``.

    Folds are formed from patient ids (every row of a patient in one fold) and
    balanced for events; each repeat reshuffles.

    Returns
    -------
    list of (repeat, fold, train_idx, test_idx)
    """
    rep_root = _root(random_state).spawn(2)[1]
    return [(r, f, tr, te) for r, f, tr, te, _ in _cv_plan(cohort, folds, repeats, rep_root)]
