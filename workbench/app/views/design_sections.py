"""The settings sections of the Design page: imaging signature, models and validation,
the added-value test and the external cohort.

Each section draws its widgets (keys made by :func:`_key`, renewed when a study file
is loaded) and returns the study section it describes, starting from the current
study's values. The page itself is :mod:`workbench.app.views.design`.
"""

from __future__ import annotations

import os
from dataclasses import replace
from pathlib import Path

import streamlit as st

from workbench.app import state
from workbench.app.views.design_help import HELP, INTERVAL_LABELS, METHOD_LABELS
from workbench.app.views.design_inputs import _lines
from workbench.errors import WorkbenchError
from workbench.models.labels import MODEL_LABELS
from workbench.prepare import select_pool
from workbench.preprocess.reproducibility import ICC_FORMS
from workbench.study import (
    AddedValueSpec,
    ExternalSpec,
    ImagingSpec,
    ModelsSpec,
    StudySpec,
    ValidationSpec,
)
from workbench.study_rules import BACKENDS, MODEL_NAMES, VALIDATION_METHODS

K_GEN = state.K_DESIGN_GEN


def _key(name: str) -> str:
    return f"design{st.session_state.get(K_GEN, 0)}_{name}"


def _imaging(cohort, tpl: ImagingSpec, predictors, data, problems: list) -> ImagingSpec:
    st.subheader("Imaging signature")
    a, b = st.columns(2)
    with a:
        inc = st.text_area("Imaging pool: name patterns to include (one per line)", "\n".join(tpl.include),
                           key=_key("include"), height=190,
                           help="Feature names to consider; * stands for any text (cm_* = every feature whose "
                                "name starts with cm_). A single * takes every feature.")
        exc = st.text_area("Patterns to exclude", "\n".join(tpl.exclude), key=_key("exclude"), height=90)
        include, exclude = _lines(inc) or ("*",), _lines(exc)
        try:
            pooled, _ = select_pool(cohort, include, exclude)
            st.caption(f"{len(pooled.feature_names)} of {len(cohort.feature_names)} imaging features in the pool.")
            names = pooled.feature_names
        except WorkbenchError as e:
            state.show_error("Imaging pool", e)
            problems.append(e)
            names = cohort.feature_names
        vol_opts = ["(none)"] + list(names)
        vol = st.selectbox("Tumour-volume feature (checked for dominance of the signature)", vol_opts,
                           index=vol_opts.index(tpl.volume_feature) if tpl.volume_feature in vol_opts else 0,
                           key=_key("volume"))
        rp = tpl.reproducibility
        if data.repeats:
            r1, r2 = st.columns(2)
            form = r1.selectbox("Reproducibility (repeat table)", list(ICC_FORMS), index=list(ICC_FORMS).index(rp.form),
                                key=_key("iccform"), help=HELP["icc"])
            min_icc = r2.number_input("Keep features with ICC at least", 0.0, 0.99, float(rp.min_icc), 0.05,
                                      key=_key("minicc"))
            rp = replace(rp, form=form, min_icc=float(min_icc))
        else:
            st.caption("No repeat-measurement table: every feature of the pool is kept (upload one on the Data "
                       "page to remove features that do not reproduce).")
    with b:
        h = tpl.harmonise
        can_combat = bool(data.batch)
        method = st.radio("Harmonisation across scanners", ["combat", "none"],
                          format_func={"combat": "ComBat by scanner", "none": "None"}.get,
                          index=0 if (h.method == "combat" and can_combat) else 1, horizontal=True,
                          key=_key("harmonise"), disabled=not can_combat,
                          help=HELP["combat"] + ("" if can_combat else " Choose a scanner / batch column on the "
                                                 "Data page first."))
        cols = [p.column for p in predictors]
        protect = st.multiselect("Clinical predictors whose association with the features is preserved",
                                 cols, default=[c for c in h.protect if c in cols], key=_key("protect"),
                                 help=HELP["protect"])
        policies = ["error", "estimate", "reference"]
        unseen = st.selectbox("A scanner not seen in training", policies,
                              format_func={"error": "stop with a message",
                                           "estimate": "estimate its shifts from its own patients",
                                           "reference": "standardise without batch adjustment"}.get,
                              index=policies.index(h.unseen_batch), key=_key("unseen"),
                              help=HELP["unseen"])
        scanners = ["(average of all)"] + (sorted({str(b) for b in cohort.batch}) if cohort.batch is not None else [])
        ref = st.selectbox("Harmonise every scanner to", scanners,
                           index=scanners.index(h.reference_scanner) if h.reference_scanner in scanners else 0,
                           key=_key("refscanner"), disabled=not can_combat, help=HELP["reference"])
        r = tpl.reduce
        corr = st.slider("Redundancy filter: drop one of each pair correlated above", 0.5, 1.0,
                         float(r.correlation), 0.01, key=_key("corr"), help=HELP["corr"])
        screen = st.checkbox("Univariable Cox screening (false discovery rate)", value=r.screen, key=_key("screen"),
                             help=HELP["screen"])
        fdr = st.number_input("False discovery rate", 0.01, 0.5, float(r.screen_fdr), 0.01, key=_key("fdr"),
                              disabled=not screen)
        p = tpl.penalty
        c1, c2, c3 = st.columns(3)
        l1 = c1.number_input("L1 ratio (1 = LASSO)", 0.05, 1.0, float(p.l1_ratio), 0.05, key=_key("l1"),
                             help=HELP["l1"])
        rule = c2.selectbox("Penalty choice", ["1se", "min"], index=["1se", "min"].index(p.rule),
                            format_func={"1se": "1-SE rule", "min": "best"}.get, key=_key("rule"),
                            help=HELP["rule"])
        folds = c3.number_input("Inner folds", 3, 20, int(p.folds), key=_key("pfolds"), help=HELP["folds"])
        selection = st.radio("Signature features chosen by", ["cv", "stability"], horizontal=True,
                             index=["cv", "stability"].index(p.selection), key=_key("selection"),
                             format_func={"cv": "cross-validated penalty",
                                          "stability": "stability selection"}.get, help=HELP["selection"])
    return replace(
        tpl, include=include, exclude=exclude, volume_feature=None if vol == "(none)" else vol,
        harmonise=replace(h, method=method if can_combat else "none", protect=tuple(protect), unseen_batch=unseen,
                          reference_scanner=None if ref == "(average of all)" else ref),
        reduce=replace(r, correlation=float(corr), screen=bool(screen), screen_fdr=float(fdr)),
        penalty=replace(p, l1_ratio=float(l1), rule=rule, folds=int(folds), selection=selection),
        reproducibility=rp,
    )


def _models_and_validation(tpl_m: ModelsSpec, tpl_v: ValidationSpec, data) -> tuple[ModelsSpec, ValidationSpec]:
    st.subheader("Models and validation")
    names = list(MODEL_NAMES) if data.features else ["clinical"]  # without imaging: the clinical model only
    fit = st.multiselect("Models to fit", names, default=[m for m in tpl_m.fit if m in names] or names[:1],
                         format_func=MODEL_LABELS.get, key=_key("models"))
    if not data.features:
        st.caption("No imaging features table (a clinical-only study): the clinical model is the one to fit.")
    a, b = st.columns(2)
    with a:
        base_opts = fit or ["clinical"]
        baseline = st.selectbox("Baseline every model is compared with", base_opts,
                                index=base_opts.index(tpl_m.baseline) if tpl_m.baseline in base_opts else 0,
                                format_func=MODEL_LABELS.get, key=_key("baseline"), help=HELP["baseline"])
        f = tpl_m.forest
        c1, c2 = st.columns(2)
        trees = c1.number_input("Forest trees", 10, 2000, int(f.trees), 10, key=_key("trees"), help=HELP["trees"])
        leaf = c2.number_input("Smallest leaf (patients)", 1, 200, int(f.min_leaf), key=_key("leaf"),
                               help=HELP["leaf"])
    with b:
        methods = [m for m in VALIDATION_METHODS if m != "by_centre" or data.centre]
        method = st.selectbox("Validation", methods, format_func=METHOD_LABELS.get,
                              index=methods.index(tpl_v.method) if tpl_v.method in methods else 0,
                              key=_key("vmethod"), help=HELP["validation"])
        c1, c2, c3 = st.columns(3)
        reps = c1.number_input("Bootstrap replicates", 1, 5000, int(tpl_v.replicates), key=_key("reps"))
        freps = c2.number_input("Forest replicates", 1, 5000, int(tpl_v.forest_replicates), key=_key("freps"))
        workers = c3.number_input("Parallel workers", 1, max(os.cpu_count() or 1, 1) * 4, int(tpl_v.workers),
                                  key=_key("workers"))
        c1, c2, c3 = st.columns(3)
        vfolds = c1.number_input("CV folds", 2, 20, int(tpl_v.folds), key=_key("vfolds"))
        repeats = c2.number_input("CV repeats", 1, 100, int(tpl_v.repeats), key=_key("repeats"))
        backends = [x for x in BACKENDS]
        backend = c3.selectbox("Where replicates run", backends, index=backends.index(tpl_v.backend),
                               key=_key("backend"))
        c1, c2, c3 = st.columns(3)
        intervals = list(INTERVAL_LABELS)
        interval = c1.selectbox("Intervals", intervals, format_func=INTERVAL_LABELS.get,
                                index=intervals.index(tpl_v.interval) if tpl_v.interval in intervals else 0,
                                key=_key("interval"), help=HELP["interval"])
        two_stage = interval == "two-stage"
        # cross-validation's interval needs no outer samples (intervals.cv_interval)
        outer = c2.number_input("Outer samples", 1, 5000, int(tpl_v.outer_replicates), key=_key("outer"),
                                help=HELP["outer"], disabled=not two_stage or method != "bootstrap")
        inner = c3.number_input("Inner replicates", 1, 1000, int(tpl_v.inner_replicates), key=_key("inner"),
                                help=HELP["inner"], disabled=not two_stage or method != "bootstrap")
        scheduler = tpl_v.scheduler
        if backend == "dask":
            scheduler = st.text_input("Dask scheduler address (or 'local')", tpl_v.scheduler or "local",
                                      key=_key("scheduler")) or None
    models = replace(tpl_m, fit=tuple(fit), baseline=baseline,
                     forest=replace(f, trees=int(trees), min_leaf=int(leaf)))
    validation = replace(tpl_v, method=method, replicates=int(reps), folds=int(vfolds), repeats=int(repeats),
                         forest_replicates=int(freps), workers=int(workers), backend=backend,
                         scheduler=scheduler if backend == "dask" else None, interval=interval,
                         outer_replicates=int(outer), inner_replicates=int(inner))
    return models, validation


def _added_value(tpl_a: AddedValueSpec, data) -> AddedValueSpec:
    """The permutation test of imaging given the clinical model ([added_value]); none without imaging."""
    if not data.features:
        return tpl_a
    st.subheader("Added-value test of imaging")
    c1, c2 = st.columns(2)
    perms = c1.number_input("Added-value permutations", 0, 99999, int(tpl_a.permutations), key=_key("perms"),
                            help=HELP["permutations"])
    folds = c2.number_input("Added-value folds", 3, 20, int(tpl_a.folds), key=_key("avfolds"), help=HELP["av_folds"])
    return replace(tpl_a, permutations=int(perms), folds=int(folds))


def _external(tpl: StudySpec | None, problems: list):
    """The external validation cohort: added from two uploaded tables, or removed."""
    st.subheader("External cohort (optional)")
    current = tpl.external if tpl is not None else None
    gen = st.session_state.get(K_GEN, 0)
    if current is not None:
        a, b = st.columns([3, 1])
        a.write(f"External validation on {Path(current.features).name} and {Path(current.clinical).name}: the "
                "models fitted on the study cohort are applied unchanged to these patients.")
        if b.button("Remove the external cohort", key=f"design_external_remove{gen}"):
            st.session_state["wb_external_removed"] = True
            return None
        return current
    st.caption("Patients from another hospital or period, with the same columns as the study's two tables. "
               "The models are fitted on the study cohort and tested on them unchanged.")
    a, b = st.columns(2)
    f = a.file_uploader("External imaging features table", type=state.UPLOAD_TYPES, key=f"design_ext_f{gen}")
    c = b.file_uploader("External clinical table", type=state.UPLOAD_TYPES, key=f"design_ext_c{gen}")
    if f is None or c is None:
        return None
    if not st.button("Add as external cohort", type="primary", key=f"design_external_add{gen}"):
        return None
    return ExternalSpec(features=str(state.save_upload(f, "external_features")),
                        clinical=str(state.save_upload(c, "external_clinical")))
