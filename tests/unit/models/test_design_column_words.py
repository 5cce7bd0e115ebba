"""Design columns worded for people in the proportional-hazards warning.

The Rossi recidivism data (lifelines ``load_rossi``), with the study file that
``examples/public_tables.py rossi`` writes (labels "Age", "Work experience", ...): lifelines'
own proportional-hazards check flags age and work experience on these data (the same two terms
tests/unit/stats/test_coxph.py checks). On the veterans data the warning once read "The effect of
'celltype=large', 'celltype=adeno' ... seems to change", design-column names no reader knows.
"""

from __future__ import annotations

import warnings

import pytest

from workbench.errors import ProportionalHazardsWarning
from workbench.models.cox import ClinicalCox
from workbench.models.labels import design_column_words
from workbench.prepare import prepare_cohort
from workbench.preprocess.predictor_spec import PredictorSpec
from workbench.stats.schoenfeld import warn_if_nonproportional
from workbench.study import read_study


def test_words_of_each_kind_of_column():
    preds = (PredictorSpec("celltype", kind="categorical", label="Cell type"),
             PredictorSpec("cea_ng_ml", kind="linear", transform="log2", label="CEA"),
             PredictorSpec("age", kind="linear"))
    assert design_column_words(preds, "celltype=large") == "Cell type (large)"
    assert design_column_words(preds, "log2(cea_ng_ml)") == "CEA"
    assert design_column_words(preds, "cea_ng_ml:below_limit") == "CEA (below the detection limit)"
    assert design_column_words(preds, "age") == "age"
    assert design_column_words(preds, "imaging_signature") == "the imaging signature"
    assert design_column_words(preds, "unknown_column") == "unknown_column"


def test_the_warning_names_the_study_labels_and_the_model(tmp_path, public_tables):
    assert public_tables.main(["rossi", "--out", str(tmp_path)]) == 0
    spec = read_study(tmp_path / "study.toml")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        cohort = prepare_cohort(spec).cohort
        model = ClinicalCox(tuple(spec.predictors)).fit(cohort)
    res = model.ph_test(cohort)
    with pytest.warns(ProportionalHazardsWarning,
                      match=r"effect of 'Age' and 'Work experience \(yes\)' in the Clinical Cox model seems"):
        flagged = warn_if_nonproportional(res, model="Clinical Cox",
                                          labels=lambda c: design_column_words(spec.predictors, c))
    assert flagged == ("age", "wexp=yes")
