"""Leakage guard: a fitted model never looks at evaluation rows.

Fit on training rows; predict the training rows alone and together with held-out rows
whose values were changed: the training rows' predictions must not move, and predicting
must not change the fitted state. Uses the demo generator (invented data) because the
check needs batches, a detection-limit marker and imaging features at once.
"""

from __future__ import annotations

import pickle
from dataclasses import replace

import numpy as np
import pytest

from workbench.cohort import Cohort
from workbench.models.cox import ClinicalCox, CombinedCox
from workbench.models.signature import ImagingSignature
from workbench.models.wide import ForestModel, PenalisedAllCox


def _models(preds):
    sig = ImagingSignature(n_alphas=30, random_state=0)
    return {
        "clinical": ClinicalCox(preds),
        "combined": CombinedCox(preds, signature=sig, protect=("age",)),
        "penalised_all": PenalisedAllCox(preds, n_alphas=30, random_state=0),
        "forest": ForestModel(preds, n_estimators=20, random_state=0),
    }


def _concat(a: Cohort, b: Cohort) -> Cohort:
    import pandas as pd

    return Cohort(
        ids=np.concatenate([a.ids, b.ids]),
        y=np.concatenate([a.y, b.y]),
        clinical=pd.concat([a.clinical, b.clinical], ignore_index=True),
        features=pd.concat([a.features, b.features], ignore_index=True),
        time_unit=a.time_unit,
        centre=np.concatenate([a.centre, b.centre]),
        batch=np.concatenate([a.batch, b.batch]),
    )


@pytest.mark.parametrize("name", ["clinical", "combined", "penalised_all", "forest"])
def test_predictions_for_training_rows_ignore_other_rows(simulated_cohort, demo_predictors, name):
    cohort, _ = simulated_cohort
    train, held = cohort.take(np.arange(200)), cohort.take(np.arange(200, 300))
    model = _models(demo_predictors)[name].fit(train)
    state = pickle.dumps(model)
    base_risk = model.predict_risk(train).values
    base_surv = model.predict_survival(train, [12, 24]).probs

    feats = held.features * 3.0 + 7.0  # wildly different imaging values
    clin = held.clinical.copy()
    clin["age"] = 95.0
    mutated = replace(held, features=feats, clinical=clin, y=held.y[::-1].copy())
    both = _concat(train, mutated)
    np.testing.assert_array_equal(model.predict_risk(both).values[:200], base_risk)
    np.testing.assert_array_equal(model.predict_survival(both, [12, 24]).probs[:200], base_surv)
    assert pickle.dumps(model) == state, "predicting changed the fitted state"


def test_refit_on_same_rows_is_identical(simulated_cohort, demo_predictors):
    cohort, _ = simulated_cohort
    train = cohort.take(np.arange(200))
    a = _models(demo_predictors)["combined"].fit(train)
    b = _models(demo_predictors)["combined"].fit(train)
    np.testing.assert_array_equal(a.predict_risk(cohort).values, b.predict_risk(cohort).values)
    assert a.selected_features_ == b.selected_features_
