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


def _repeat_study(pair, repeats_path, **repro):
    from workbench.study import study_from_dict

    doc = {"study": {"name": "repeats", "horizons": [730.0]},
           "data": {"features": str(pair.features), "clinical": str(pair.clinical), "time": "time_days",
                    "event": "status", "time_unit": "days", "event_codes": ["recurrence"],
                    "censor_codes": ["censored"], "repeats": str(repeats_path)},
           "predictor": [{"column": "horTh", "kind": "categorical"}]}
    if repro:
        doc["imaging"] = {"reproducibility": repro}
    return study_from_dict(doc)


def test_reproducibility_filter_removes_features_that_do_not_repeat(gbsg2_tables, tmp_path):
    # GBSG2 measurements (scikit-survival) of 40 patients measured "again": tumour size and
    # receptor levels with a small error (reproducible), node count shuffled between patients
    # (its repeat has nothing to do with the first value)
    import pandas as pd

    from workbench.prepare import prepare_cohort
    from workbench.preprocess.reproducibility import feature_icc

    rng = np.random.default_rng(5)
    first = gbsg2_tables.feat_df.iloc[:40].copy()
    rep = first.copy()
    for c in ("age", "tsize", "progrec", "estrec"):
        rep[c] = first[c] + rng.normal(0, 0.05 * first[c].std(), 40)
    rep["pnodes"] = rng.permutation(first["pnodes"].to_numpy())
    path = tmp_path / "repeats.csv"
    rep.to_csv(path, index=False)
    spec = _repeat_study(gbsg2_tables, path, form="ICC(2,1)", min_icc=0.8)
    prep = prepare_cohort(spec)
    assert prep.unreproducible == ("pnodes",) and "pnodes" not in prep.cohort.feature_names
    assert prep.cohort.feature_names == ["age", "tsize", "progrec", "estrec"]
    # the stored table is feature_icc of those 40 patients
    expect = feature_icc(first.set_index("patient_id").astype(float), rep.set_index("patient_id").astype(float),
                         "ICC(2,1)")
    pd.testing.assert_frame_equal(prep.reproducibility, expect)
    assert (prep.reproducibility["icc"].drop("pnodes") > 0.95).all()


def test_reproducibility_input_errors(gbsg2_tables, tmp_path):
    from workbench.errors import CohortError
    from workbench.prepare import prepare_cohort

    rep = gbsg2_tables.feat_df.iloc[:40].drop(columns=["tsize"])
    path = tmp_path / "repeats.csv"
    rep.to_csv(path, index=False)
    with pytest.raises(CohortError, match=r"repeats.csv: the repeat table lacks 1 imaging feature column"):
        prepare_cohort(_repeat_study(gbsg2_tables, path))
    text = gbsg2_tables.feat_df.iloc[:40].astype({"tsize": object})
    text.loc[5, "tsize"] = "big"
    text.to_csv(path, index=False)
    with pytest.raises(CohortError, match=r"repeats.csv: imaging feature columns must be numeric; text found in 1 "
                                          r"column\(s\): 'tsize'"):
        prepare_cohort(_repeat_study(gbsg2_tables, path))
    gbsg2_tables.feat_df.iloc[:4].to_csv(path, index=False)
    with pytest.raises(CohortError, match="needs at least 10"):
        prepare_cohort(_repeat_study(gbsg2_tables, path))
    from workbench.study_rules import check_spec

    with pytest.raises(SpecError, match=r"\[imaging.reproducibility\] form"):
        check_spec(_repeat_study(gbsg2_tables, path, form="kappa"))
    with pytest.raises(SpecError, match="min_icc must lie in"):
        check_spec(_repeat_study(gbsg2_tables, path, min_icc=1.5))
