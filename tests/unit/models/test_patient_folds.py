"""Inner cross-validation folds: by patient, balanced for events and size, reproducible."""

from __future__ import annotations

import numpy as np
import pandas as pd

from workbench.models.penalized import patient_folds


def _bootstrap_ids(seed=0, n=400):
    rng = np.random.default_rng(seed)
    ids = rng.integers(0, n, n)  # a bootstrap sample: repeated patients
    event_of_patient = rng.random(n) < 0.6
    return ids, event_of_patient[ids]


def test_no_patient_is_split_and_folds_are_balanced():
    ids, ev = _bootstrap_ids()
    f = patient_folds(ids, ev, 5, random_state=3)
    assert pd.Series(f).groupby(ids).nunique().max() == 1
    rows, events = np.bincount(f, minlength=5), np.bincount(f, weights=ev, minlength=5)
    assert rows.max() - rows.min() <= 0.1 * rows.mean()
    assert events.max() - events.min() <= 0.1 * events.mean()


def test_same_seed_same_folds_other_seed_other_folds():
    ids, ev = _bootstrap_ids(1)
    a = patient_folds(ids, ev, 5, random_state=7)
    assert np.array_equal(a, patient_folds(ids, ev, 5, random_state=7))
    assert not np.array_equal(a, patient_folds(ids, ev, 5, random_state=8))
