"""Design view under AppTest: the demo study round-trips, the study file downloads, bad input is explained."""

from __future__ import annotations

from apphelpers import DEMO, assert_clean

from workbench.app import state
from workbench.study import dumps_study, read_study, study_from_dict


def _design(new_app):
    at = new_app().run()
    return at.switch_page("views/design.py").run()


def test_demo_study_rebuilt_unchanged(new_app):
    at = _design(new_app)
    assert_clean(at)
    # Reference: the study file itself, read by the library's reader.
    assert at.session_state[state.K_STUDY] == read_study(DEMO / "study.toml")
    assert any("Ready to run" in s.value for s in at.success)


def test_download_is_the_library_study_text(new_app):
    import tomllib

    at = _design(new_app)
    spec = read_study(DEMO / "study.toml")
    shown = at.code[0].value
    assert shown == dumps_study(spec, base=DEMO).rstrip("\n")  # st.code drops the final newline
    # Paths are written relative to the tables' folder, and the text reads back to the same study.
    doc = tomllib.loads(shown)
    assert doc["data"]["features"] == "imaging.csv"
    assert study_from_dict(doc, base=DEMO) == spec


def test_changing_models_and_replicates_reaches_the_study(new_app):
    at = _design(new_app)
    gen = at.session_state["wb_design_gen"] if "wb_design_gen" in at.session_state else 0
    at.multiselect(key=f"design{gen}_models").set_value(["clinical", "combined"])
    at.number_input(key=f"design{gen}_reps").set_value(50)
    at.run()
    assert_clean(at)
    spec = at.session_state[state.K_STUDY]
    assert spec.models.fit == ("clinical", "combined") and spec.validation.replicates == 50


def test_interval_and_added_value_settings_reach_the_study(new_app):
    at = _design(new_app)
    demo = read_study(DEMO / "study.toml")
    # the boxes start from the study file's values
    assert at.number_input(key="design0_outer").value == demo.validation.outer_replicates
    assert at.number_input(key="design0_inner").value == demo.validation.inner_replicates
    assert at.number_input(key="design0_perms").value == demo.added_value.permutations
    at.number_input(key="design0_outer").set_value(150)
    at.number_input(key="design0_inner").set_value(4)
    at.number_input(key="design0_perms").set_value(999)
    at.number_input(key="design0_avfolds").set_value(10)
    at.run()
    assert_clean(at)
    spec = at.session_state[state.K_STUDY]
    assert (spec.validation.outer_replicates, spec.validation.inner_replicates) == (150, 4)
    assert (spec.added_value.permutations, spec.added_value.folds) == (999, 10)
    # the quick interval switches the outer and inner boxes off (they are not used)
    at.selectbox(key="design0_interval").set_value("shifted-percentile").run()
    assert at.session_state[state.K_STUDY].validation.interval == "shifted-percentile"
    assert at.number_input(key="design0_outer").disabled and at.number_input(key="design0_inner").disabled


def test_bad_horizons_are_explained(new_app):
    at = _design(new_app)
    at.text_input(key="design0_horizons").set_value("12, two years").run()
    assert_clean(at)
    assert any("horizons must be numbers" in e.value for e in at.error)
    at.text_input(key="design0_horizons").set_value("36, 12").run()
    assert any("positive and increasing" in e.value for e in at.error)


def test_baseline_not_fitted_is_explained(new_app):
    at = _design(new_app)
    at.multiselect(key="design0_models").set_value(["combined"]).run()
    assert_clean(at)
    # The baseline box offers only fitted models, so the study stays consistent.
    assert at.session_state[state.K_STUDY].models.baseline == "combined"


def test_load_study_file_applies_its_settings(new_app):
    at = _design(new_app)
    spec = read_study(DEMO / "study.toml")
    from dataclasses import replace

    text = dumps_study(replace(spec, validation=replace(spec.validation, replicates=77)), base=DEMO)
    at.file_uploader(key="design_load").set_value(("other.toml", text.encode(), "application/toml")).run()
    assert_clean(at)
    loaded = at.session_state[state.K_STUDY]
    assert loaded.validation.replicates == 77
    assert loaded.data.features == spec.data.features  # the tables chosen on the Data page are kept


def test_malformed_study_file_is_a_plain_message(new_app):
    at = _design(new_app)
    at.file_uploader(key="design_load").set_value(("broken.toml", b"[study\nname = 1", "application/toml")).run()
    assert_clean(at)
    assert any("broken.toml" in e.value and "not valid TOML" in e.value for e in at.error)
    at.file_uploader(key="design_load").set_value(
        ("typo.toml", b'[study]\nname = "x"\nhorizons = [12]\n[data]\nfeatures = "a.csv"\nclinical = "b.csv"\ntiem = "t"\n',
         "application/toml")).run()
    assert any("unknown key 'tiem'" in e.value and "time" in e.value for e in at.error)


def test_scanner_and_signature_choices_reach_the_study(new_app):
    at = _design(new_app)
    demo = read_study(DEMO / "study.toml")
    # the demo's own settings are what the boxes show first
    assert at.selectbox(key="design0_unseen").value == demo.imaging.harmonise.unseen_batch == "estimate"
    assert at.selectbox(key="design0_refscanner").value == "(average of all)"
    assert at.radio(key="design0_selection").value == "cv"
    # the scanners offered are the development cohort's own
    assert at.selectbox(key="design0_refscanner").options == ["(average of all)", "scanner_A", "scanner_B",
                                                               "scanner_C"]
    at.selectbox(key="design0_refscanner").set_value("scanner_B")
    at.radio(key="design0_selection").set_value("stability")
    at.selectbox(key="design0_unseen").set_value("reference")
    at.run()
    assert_clean(at)
    spec = at.session_state[state.K_STUDY]
    assert spec.imaging.harmonise.reference_scanner == "scanner_B"
    assert spec.imaging.harmonise.unseen_batch == "reference"
    assert spec.imaging.penalty.selection == "stability"


def test_predictor_table_shows_the_reference_level_the_transformer_uses(new_app):
    import json

    import pandas as pd

    from workbench.preprocess.clinical import ClinicalTransformer

    at = _design(new_app)
    assert_clean(at)
    spec = read_study(DEMO / "study.toml")
    shown = at.dataframe[0].value.set_index("column")
    # reference: the library's clinical transformer fitted on the demo table (the cohort the page reads)
    fitted = ClinicalTransformer(spec.predictors).fit(pd.read_csv(DEMO / "clinical.csv"))
    levelled = [t for t in fitted.terms_ if t.kind in ("categorical", "ordinal")]
    assert any(p.kind == "ordinal" and p.reference is None for p in spec.predictors)  # ecog names none
    assert {t.column: shown.loc[t.column, "reference"] for t in levelled} == {t.column: t.reference for t in levelled}
    assert shown.loc["ecog", "reference"] == "0"  # was blank: the first declared level
    # shown, not written: the study still names no reference for ecog (it follows the levels' order)
    assert next(p for p in at.session_state[state.K_STUDY].predictors if p.column == "ecog").reference is None
    columns = json.loads(at.dataframe[0].proto.columns)
    assert columns["transform"].get("width") != "small"  # "small" cut the header to "Transfo"
    assert list(at.dataframe[0].proto.column_order)[:3] == ["use", "column", "label"]  # seen without scrolling
    caption = next(c.value for c in at.caption if "Tick the predictors" in c.value)
    assert "Label and unit: type the names" in caption


def test_a_typed_reference_level_is_kept_and_the_default_one_left_unnamed():
    from types import SimpleNamespace

    import pandas as pd

    from workbench.app.views.design_inputs import _predictor_table, _predictors_from

    clinical = pd.DataFrame({"age": [61, 70, 55, 48, 66], "grade": ["G2", "G1", "G3", "G2", None],
                             "site": ["lung", "colon", "lung", "breast", "lung"]})
    cohort = SimpleNamespace(clinical=clinical)
    data = SimpleNamespace(centre=None, batch=None)
    table = _predictor_table(cohort, None, data)
    # a linear term has none; levels in natural order (workbench.preprocess.values.natural_order)
    assert list(table["reference"]) == ["", "G1", "breast"]
    specs = {p.column: p for p in _predictors_from(table, None, cohort)}
    assert specs["age"].reference is specs["grade"].reference is specs["site"].reference is None
    table.loc[table["column"] == "site", "reference"] = "lung"
    assert {p.column: p.reference for p in _predictors_from(table, None, cohort)}["site"] == "lung"
