"""Design: which predictors, how the signature is built, which models, how they are validated.

The page: loading a study file, name, horizons and seed, the clinical-predictor table,
then the settings sections (``design_sections.py``) and the finished study file. Help
texts and labels are in ``design_help.py``; the predictor table and typed values are
turned into study values in ``design_inputs.py``.
"""

from __future__ import annotations

import tomllib
from dataclasses import replace
from pathlib import Path

import streamlit as st

from workbench.app import state
from workbench.app.views.design_help import HELP, KINDS, METHOD_LABELS, MISSING, TRANSFORMS
from workbench.app.views.design_inputs import _horizons, _predictor_table, _predictors_from
from workbench.app.views.design_sections import (
    K_GEN,
    _added_value,
    _external,
    _imaging,
    _key,
    _models_and_validation,
)
from workbench.errors import WorkbenchError
from workbench.study import (
    AddedValueSpec,
    HarmoniseSpec,
    ImagingSpec,
    ModelsSpec,
    StudySpec,
    ValidationSpec,
    study_from_dict,
)
from workbench.units import time_phrase

K_LOADED = "wb_design_loaded_file"


def _load_study_file(data) -> None:
    up = st.file_uploader("Load an existing study file (.toml)", type=["toml"], key="design_load")
    if up is None or st.session_state.get(K_LOADED) == up.file_id:
        return
    st.session_state[K_LOADED] = up.file_id
    try:
        doc = tomllib.loads(up.getvalue().decode("utf-8"))
        spec = study_from_dict(doc, source=Path(up.name).name)
    except UnicodeDecodeError:
        st.error(f"{up.name}: not a text file; a study file is TOML text.")
        return
    except tomllib.TOMLDecodeError as exc:
        st.error(f"{up.name}: not valid TOML ({exc}).")
        return
    except WorkbenchError as exc:
        state.show_error(f"Loading {up.name}", exc)
        return
    # The study's own file paths point at a folder on another machine; keep the tables chosen here.
    new_data = replace(spec.data, features=data.features, clinical=data.clinical)
    note = f"Loaded {up.name}; its column roles now apply to the tables chosen on the Data page."
    external = None
    if spec.external is not None:
        base = Path(data.clinical).parent
        f, c = base / spec.external.features, base / spec.external.clinical
        if f.exists() and c.exists():
            external = replace(spec.external, features=str(f), clinical=str(c))
        else:
            note += " Its external cohort files are not beside these tables, so external validation is left out."
    try:
        spec = replace(spec, data=new_data, external=external)
    except WorkbenchError as exc:
        state.show_error(f"Loading {up.name}", exc)
        return
    st.session_state[state.K_DATA] = new_data
    st.session_state[state.K_HORIZONS] = tuple(spec.horizons)
    state.set_study(spec, note)
    st.session_state[K_GEN] = st.session_state.get(K_GEN, 0) + 1
    st.rerun()


def render() -> None:
    st.title("Design")
    st.write("Say how the clinical predictors enter the model, how the imaging signature is built, "
             "which models are compared and how they are validated.")
    data = state.current_data()
    if data is None:
        st.info("Choose the tables and confirm their column roles on the Data page first.")
        return
    try:
        cohort, _ = state.get_cohort()
    except Exception as exc:  # noqa: BLE001
        state.show_error("The tables on the Data page cannot be used yet", exc)
        return
    note = st.session_state.get(state.K_STUDY_NOTE)
    if note and state.is_demo():
        st.caption(note)
    elif note:
        st.caption(note)
    _load_study_file(data)
    tpl = state.current_study()

    a, b, c = st.columns([3, 2, 1])
    name = a.text_input("Study name", tpl.name if tpl else "My study", key=_key("name"))
    auto = st.session_state.get(state.K_HORIZONS_AUTO)
    proposed = tuple(st.session_state.get(state.K_HORIZONS, ()))
    if not state.is_demo() and not proposed:
        proposed = state.propose_horizons(cohort)
        auto = st.session_state.get(state.K_HORIZONS_AUTO)
    hz_now = proposed if (auto is not None or tpl is None) else tpl.horizons
    hz_default = ", ".join(f"{h:g}" for h in hz_now)
    hz_text = b.text_input(f"Horizons ({data.time_unit}, comma separated)", hz_default,
                           key=_key("horizons" if auto is None else f"horizons_{abs(hash(auto)) % 10**8}"), help=HELP["horizons"])
    seed = c.number_input("Seed", 0, 2**31 - 1, int(tpl.seed if tpl else 20261202), key=_key("seed"),
                          help="Fixes the random draws (resamples, folds), so a run can be repeated exactly.")

    st.subheader("Clinical predictors")
    st.caption("Tick the predictors of the clinical model. Kind: linear, spline (restricted cubic), "
               "categorical or ordinal (levels in order, comma separated). Transform log2 gives hazard ratios "
               "per doubling. Reference level: the level the others are compared with; unless you type another, "
               "the first level in the order given (or, with none given, numbers first, then alphabetical), as "
               "shown. Detection limit 'auto' reads values such as <0.5 from the data. Label and unit: type the "
               "names the tables, figures and nomogram should show; an empty label shows the column name.")
    table = st.data_editor(
        _predictor_table(cohort, tpl, data), key=_key("predictors"), hide_index=True, width="stretch",
        disabled=["column"],
        # the label beside its column, where it is seen without scrolling the table sideways
        column_order=("use", "column", "label", "kind", "transform", "missing", "reference", "levels",
                      "detection_limit", "knots", "unit"),
        column_config={
            "use": st.column_config.CheckboxColumn("Use", width="small"),
            "column": st.column_config.TextColumn("Column"),
            "kind": st.column_config.SelectboxColumn("Kind", options=list(KINDS), required=True, width="small"),
            "transform": st.column_config.SelectboxColumn("Transform", options=list(TRANSFORMS)),
            "missing": st.column_config.SelectboxColumn("Missing values", options=list(MISSING), required=True,
                                                        help=HELP["missing"]),
            "reference": st.column_config.TextColumn("Reference level"),
            "levels": st.column_config.TextColumn("Levels (in order)"),
            "detection_limit": st.column_config.TextColumn("Detection limit"),
            "knots": st.column_config.NumberColumn("Knots", min_value=3, max_value=7, step=1, width="small"),
            "label": st.column_config.TextColumn("Label", width="medium"),  # "ECOG performance status" in full
            "unit": st.column_config.TextColumn("Unit"),
        },
    )
    problems = []
    try:
        predictors = _predictors_from(table, tpl, cohort)
    except WorkbenchError as exc:
        problems.append(exc)
        state.show_error("Clinical predictors", exc)
        predictors = tpl.predictors if tpl else ()
    base_im = tpl.imaging if tpl else ImagingSpec(harmonise=HarmoniseSpec(method="combat" if data.batch else "none"))
    imaging = _imaging(cohort, base_im, predictors, data, problems)
    models, validation = _models_and_validation(tpl.models if tpl else ModelsSpec(),
                                                tpl.validation if tpl else ValidationSpec(), data)
    added_value = _added_value(tpl.added_value if tpl else AddedValueSpec(), data)
    external = _external(tpl, problems)
    try:
        horizons = _horizons(hz_text)
    except WorkbenchError as exc:
        problems.append(exc)
        state.show_error("Horizons", exc)
        horizons = tpl.horizons if tpl else ()
    if problems:
        st.info("The study is not ready to run: correct the points marked above.")
        return
    try:
        spec = StudySpec(name=name.strip() or "My study", data=data, predictors=predictors, horizons=horizons,
                         seed=int(seed), imaging=imaging, models=models, validation=validation,
                         external=external, anticipated_r2=tpl.anticipated_r2 if tpl else None,
                         added_value=added_value)
    except WorkbenchError as exc:
        state.show_error("The study cannot be built yet", exc)
        st.info("The study is not ready to run: correct the point above.")
        return
    if horizons and max(horizons) > float(cohort.time.max()):
        st.warning(f"The horizon {time_phrase(max(horizons), data.time_unit)} lies beyond the longest follow-up "
                   f"({float(cohort.time.max()):.1f} {data.time_unit}); choose horizons inside follow-up.")
    if spec != tpl:
        state.set_study(spec, note or "")
    if tuple(spec.horizons) != tuple(st.session_state.get(state.K_HORIZONS, ())):
        st.session_state[state.K_HORIZONS_AUTO] = None  # typed by the user: no longer re-proposed
    st.session_state[state.K_HORIZONS] = tuple(spec.horizons)
    if (external is None) != (tpl is None or tpl.external is None):
        st.rerun()  # the external cohort was added or removed: show the section in its new state
    text = state.study_text(spec)
    ran = state.result_job()
    status = ("Ready to run" if ran is None or not state.result_is_current(ran)
              else "Matches the last run")
    st.success(f"{status}: {len(spec.predictors)} clinical predictors, {len(spec.models.fit)} models, "
               f"{METHOD_LABELS[spec.validation.method].lower()}"
               + (", with external validation" if spec.external is not None else "") + ".")
    st.download_button("Download the study file (TOML)", text, file_name=state.study_filename(spec),
                       mime="application/toml", key="design_download")
    st.caption("Save the study file in the folder that holds the two tables: it names them by file name, "
               "relative to its own folder, so the folder can be moved or shared as a whole.")
    with st.expander("Study file"):
        st.code(text, language="toml")


if __name__ == "__main__":
    render()
