"""Design columns worded for people in the proportional-hazards warning.

The Rossi recidivism data (lifelines ``load_rossi``), with the study file that
``examples/public_tables.py rossi`` writes (labels "Age", "Work experience", ...): lifelines'
own proportional-hazards check flags age and work experience on these data (the same two terms
tests/unit/stats/test_coxph.py checks). On the veterans data the warning once read "The effect of
'celltype=large', 'celltype=adeno' ... seems to change", design-column names no reader knows.
"""

from __future__ import annotations

import warnings
from pathlib import Path

import pytest

from workbench.errors import ProportionalHazardsWarning
from workbench.models.cox import ClinicalCox
from workbench.models.labels import design_column_words
from workbench.prepare import prepare_cohort
from workbench.preprocess.clinical import ClinicalTransformer
from workbench.stats.schoenfeld import warn_if_nonproportional
from workbench.study import read_study

DEMO = Path(__file__).resolve().parents[3] / "demo_cohort" / "study.toml"


def test_words_of_each_kind_of_column():
    # the demo study's fitted transformer (its design-column names: the categorical levels, the log2
    # CEA and its below-detection-limit indicator; invented data, a naming check only)
    spec = read_study(DEMO)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        terms = ClinicalTransformer(tuple(spec.predictors)).fit(prepare_cohort(spec).cohort).terms_
    columns = {c for t in terms for c in t.columns}
    assert {"stage=III", "log2(cea_ng_ml)", "cea_ng_ml:below_limit", "age"} <= columns
    assert design_column_words(terms, "stage=III") == "Stage (III)"
    assert design_column_words(terms, "log2(cea_ng_ml)") == "Serum CEA"
    assert design_column_words(terms, "cea_ng_ml:below_limit") == "Serum CEA (below the detection limit)"
    assert design_column_words(terms, "age") == "Age"  # "age" inside "stage=III" does not confuse it
    assert design_column_words(terms, "imaging_signature") == "the imaging signature"
    assert design_column_words(terms, "unknown_column") == "unknown_column"


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
                                          labels=lambda c: design_column_words(model.transformer_.terms_, c))
    assert flagged == ("age", "wexp=yes")
