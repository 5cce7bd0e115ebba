"""Study-file keys for reading the tables: Excel sheets and take_from, through prepare_cohort.

GBSG2 data shipped with scikit-survival (Schumacher et al. 1994), split into a features
workbook (two sheets, one of them the data) and a clinical table that repeats 'age'.
"""

from __future__ import annotations

import pandas as pd
import pytest

from workbench.errors import SpecError
from workbench.prepare import prepare_cohort
from workbench.study import dumps_study, study_from_dict

DOC = {
    "study": {"name": "sheets", "horizons": [365, 730]},
    "data": {
        "features": "features.xlsx", "clinical": "clinical.csv", "time": "time_days", "time_unit": "days",
        "event": "status", "event_codes": ["recurrence"], "censor_codes": ["censored"],
        "features_sheet": "radiomics", "take_from": {"age": "clinical"},
    },
    "predictor": [{"column": "age"}, {"column": "tgrade", "kind": "categorical"}],
    "imaging": {"harmonise": {"method": "none"}},
}


@pytest.fixture
def folder(tmp_path, gbsg2_frames):
    feat, clin, _ = gbsg2_frames
    with pd.ExcelWriter(tmp_path / "features.xlsx") as xw:
        feat.describe().to_excel(xw, sheet_name="summary")
        feat.to_excel(xw, sheet_name="radiomics", index=False)
    clin.assign(age=feat["age"]).to_csv(tmp_path / "clinical.csv", index=False)
    return tmp_path


def test_sheet_and_take_from_reach_the_reader(folder):
    spec = study_from_dict(DOC, base=folder)
    assert spec.data.take_from == (("age", "clinical"),)
    prepared = prepare_cohort(spec)
    assert prepared.cohort.n == 686
    assert "age" not in prepared.cohort.feature_names and "age" in prepared.cohort.clinical.columns
    # written out and read back: the same study
    import tomllib

    again = study_from_dict(tomllib.loads(dumps_study(spec, base=folder)), base=folder)
    assert again == spec


def test_take_from_with_an_unknown_table_is_refused(folder):
    doc = {**DOC, "data": {**DOC["data"], "take_from": {"age": "both"}}}
    with pytest.raises(SpecError, match=r"take_from\['age'\] is 'both'; it says which table's 'age' column to use: "
                                        r"'clinical' or 'features'"):
        study_from_dict(doc, base=folder)


def test_sheet_must_be_text(folder):
    doc = {**DOC, "data": {**DOC["data"], "features_sheet": 2}}
    with pytest.raises(SpecError, match=r"\[data\]: features_sheet must be text in quotes, such as \"name\"; found 2"):
        study_from_dict(doc, base=folder)
