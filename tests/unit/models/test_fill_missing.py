"""Missing imaging values are filled with medians learned on the training rows only."""

from __future__ import annotations

from dataclasses import replace

import numpy as np
import pandas as pd

from workbench.models.cox import CombinedCox, fill_missing
from workbench.models.signature import ImagingSignature


def test_fill_uses_given_medians_and_copies_only_when_needed():
    f = pd.DataFrame({"a": [1.0, np.nan, 3.0], "b": [4.0, 5.0, 6.0]})
    out = fill_missing(f, {"a": 10.0, "b": 0.0})
    assert out["a"].tolist() == [1.0, 10.0, 3.0] and out["b"].tolist() == [4.0, 5.0, 6.0]
    assert f["a"].isna().sum() == 1  # input untouched
    full = pd.DataFrame({"a": [1.0], "b": [2.0]})
    assert fill_missing(full, {"a": 0.0, "b": 0.0}) is not None


def test_combined_model_imputes_held_out_gaps_with_training_medians(simulated_cohort, demo_predictors):
    cohort, _ = simulated_cohort
    train, held = cohort.take(np.arange(200)), cohort.take(np.arange(200, 300))
    m = CombinedCox(demo_predictors, signature=ImagingSignature(n_alphas=20, random_state=0)).fit(train)
    col = m.selected_features_[0]
    gappy = held.features.copy()
    gappy.loc[:4, col] = np.nan
    filled = held.features.copy()
    filled.loc[:4, col] = train.features[col].median()
    a = m.predict_risk(replace(held, features=gappy)).values
    b = m.predict_risk(replace(held, features=filled)).values
    np.testing.assert_allclose(a, b, rtol=0, atol=1e-12)


def test_combined_model_without_any_kept_feature_is_the_clinical_model(simulated_cohort, demo_predictors):
    from workbench.models.cox import ClinicalCox

    cohort, _ = simulated_cohort
    # imaging columns of pure noise (seeded), screened at a false discovery rate of 1%
    rng = np.random.default_rng(0)
    noise = pd.DataFrame(rng.normal(size=(cohort.n, 30)), columns=[f"stat_noise_{i}" for i in range(30)])
    cohort = replace(cohort, features=noise)
    sig = ImagingSignature(n_alphas=20, screen_fdr=0.01, random_state=0)
    m = CombinedCox(demo_predictors, signature=sig).fit(cohort)
    assert m.selected_features_ == ()
    c = ClinicalCox(demo_predictors).fit(cohort)
    np.testing.assert_allclose(m.predict_risk(cohort).values, c.predict_risk(cohort).values, atol=1e-12)
    assert m.n_params_ == c.n_params_
