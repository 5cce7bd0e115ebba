"""Preparing the analysis cohort: imaging pool by name pattern, complete cases."""

from __future__ import annotations

import numpy as np
import pytest

from workbench.cohort.io import read_cohort
from workbench.errors import SpecError
from workbench.prepare import drop_incomplete, package_versions, select_pool
from workbench.preprocess.clinical import PredictorSpec


@pytest.fixture
def cohort(gbsg2_tables, gbsg2_columns):
    clin = gbsg2_tables.clin_df.copy()
    clin.loc[[3, 8], "menostat"] = None
    pair = gbsg2_tables.write(clin_df=clin)
    return read_cohort(pair.features, pair.clinical, gbsg2_columns)


def test_pool_patterns(cohort):
    c, dropped = select_pool(cohort, include=("p*", "tsize"), exclude=("progrec",))
    assert c.feature_names == ["tsize", "pnodes"]
    assert set(dropped) == {"age", "progrec", "estrec"}
    with pytest.raises(SpecError, match="leave no imaging feature"):
        select_pool(cohort, include=("cm_*",))


def test_complete_case_drop_counts_and_ids(cohort):
    preds = (PredictorSpec("menostat", kind="categorical"), PredictorSpec("horTh", kind="categorical"))
    c, ids, by_col = drop_incomplete(cohort, preds)
    assert c.n == 684 and ids == ("GB0003", "GB0008") and by_col == {"menostat": 2}
    imputed = (PredictorSpec("menostat", kind="categorical", missing="impute"),)
    c2, ids2, _ = drop_incomplete(cohort, imputed)
    assert c2.n == 686 and ids2 == ()
    np.testing.assert_array_equal(c.ids, np.delete(cohort.ids, [3, 8]))


def test_unknown_predictor_column(cohort):
    with pytest.raises(SpecError, match=r"clinical predictor\(s\) grade are not columns"):
        drop_incomplete(cohort, (PredictorSpec("grade"),))


def test_versions_recorded():
    v = package_versions()
    assert v["numpy"] == np.__version__ and "scikit-survival" in v


def test_post_outcome_patterns_warn_and_clean_data_does_not(cohort):
    import warnings

    from workbench.errors import PostOutcomeWarning
    from workbench.prepare import check_post_outcome

    preds = (PredictorSpec("horTh", kind="categorical"), PredictorSpec("tgrade", kind="categorical"))
    with warnings.catch_warnings():
        warnings.simplefilter("error", PostOutcomeWarning)
        assert check_post_outcome(cohort, preds) == ()  # GBSG2 as shipped raises nothing
    ev = cohort.event
    clin = cohort.clinical.copy()
    clin["late_marker"] = np.where(ev & (np.arange(cohort.n) % 7 == 0), None, "x")
    feats = cohort.features.assign(after=ev + np.random.default_rng(0).normal(0, 0.05, cohort.n))
    from dataclasses import replace

    bad = replace(cohort, clinical=clin, features=feats)
    with pytest.warns(PostOutcomeWarning) as rec:
        msgs = check_post_outcome(bad, (*preds, PredictorSpec("late_marker", kind="categorical")))
    text = " ".join(msgs)
    assert "'late_marker' is missing for" in text and "all of whom had the event" in text
    assert "'after' separates patients with and without the event almost perfectly" in text
    assert len(rec) == len(msgs)
