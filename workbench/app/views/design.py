"""Design: which predictors, how the signature is built, which models, how they are validated."""

from __future__ import annotations

import os
import tomllib
from dataclasses import replace
from pathlib import Path

import pandas as pd
import streamlit as st

from workbench.app import state
from workbench.errors import WorkbenchError
from workbench.models.labels import MODEL_LABELS
from workbench.prepare import select_pool
from workbench.preprocess.harmonize import DEFAULT_MIN_NEW_BATCH
from workbench.preprocess.predictor_spec import PredictorSpec
from workbench.preprocess.reproducibility import ICC_FORMS
from workbench.study import (
    AddedValueSpec,
    ExternalSpec,
    HarmoniseSpec,
    ImagingSpec,
    ModelsSpec,
    StudySpec,
    ValidationSpec,
    study_from_dict,
)
from workbench.study_rules import BACKENDS, MODEL_NAMES, VALIDATION_METHODS
from workbench.units import time_phrase

K_GEN = state.K_DESIGN_GEN
K_LOADED = "wb_design_loaded_file"
KINDS = ("linear", "spline", "categorical", "ordinal")
TRANSFORMS = ("", "log", "log2")
MISSING = ("complete_case", "impute")
HELP = {
    "l1": "How the penalty mixes two kinds of shrinkage. 1 (LASSO) keeps few features and sets the others "
          "exactly to zero; smaller values (elastic net) keep groups of correlated features together.",
    "rule": "How strong the penalty is, chosen by cross-validation. The 1-SE rule takes the strongest penalty "
            "whose error is within one standard error of the best: fewer features, usually more stable. "
            "'Best' takes the penalty with the smallest error.",
    "folds": "The penalty is chosen by splitting the training patients into this many parts (inner folds); "
             "each part is predicted once from the others. 5 or 10 is usual.",
    "combat": "ComBat removes systematic differences between scanners (shifts and scales of each feature) "
              "while keeping differences that belong to the patients.",
    "unseen": "For an external hospital's scanner that no training patient was imaged on. 'Estimate' learns that "
              "scanner's shift and scale per feature from its own patients' features (never their outcomes; "
              f"at least {DEFAULT_MIN_NEW_BATCH} of them), keeping the training scanners' values fixed.",
    "icc": "Intraclass correlation between the first and the repeat measurement: ICC(3,1) for consistency "
           "(a shift common to all repeat values is ignored), ICC(2,1) for absolute agreement, ICC(1,1) one-way.",
    "reference": "ComBat maps every scanner onto the average of all by default. Name one scanner to map the "
                 "others onto it and leave its features exactly as measured (for a planned study on that scanner).",
    "selection": "Cross-validated penalty: the features the lasso keeps at the penalty cross-validation chooses. "
                 "Stability selection: the features the lasso picks again and again on random halves of the "
                 "patients, with a bound on the expected number of false picks (1 by default): fewer, more "
                 "reproducible features; the run takes several times longer.",
    "protect": "Clinical predictors whose link with the imaging features must survive harmonisation "
               "(for example stage, if later stages truly look different on images).",
    "missing": "Complete cases only: a patient with a missing value in this predictor is left out. "
               "Impute: the missing value is filled in from the other patients, so nobody is left out.",
    "corr": "Of two features that move together more closely than this, one is dropped: they carry "
            "the same information.",
    "screen": "Keep only features with some association with the outcome on their own, allowing for "
              "the number of features tried (false discovery rate).",
    "validation": "How the models are tested on patients they were not fitted on: the bootstrap refits "
                  "everything on resampled patients and corrects the apparent performance for optimism "
                  "(or, with a forest among the models, scores every model on the patients left out of "
                  "each resample); "
                  "cross-validation holds out parts of the cohort; leave-one-centre-out holds out each "
                  "hospital in turn.",
    "baseline": "Every other model is compared with this one (differences in C-index, Brier score...).",
    "trees": "The survival forest averages this many trees; more trees are steadier but slower.",
    "leaf": "The smallest group of patients at the end of a tree's branch; larger leaves give smoother risks.",
    "interval": "Two-stage: the whole validation is repeated in bootstrap samples of the patients, and the "
                "interval comes from how much the validated numbers vary between them (the interval that "
                "covered in simulation). Quick percentile: cheap, known to be too narrow; for a first look only.",
    "outer": "Bootstrap samples in which the whole validation is repeated for the intervals. Each costs "
             "(inner replicates + 1) refits of every model. 100 or more for a final analysis. Cross-validation "
             "needs none: its interval comes from the spread of its own fold results (corrected for their "
             "overlap).",
    "inner": "Bootstrap replicates of the validation inside each outer sample (bootstrap validation only).",
    "permutations": "Permutations of the added-value test of imaging given the clinical model. Each refits "
                    "the whole signature; 199 give p-values down to 0.005, 999 for a final analysis; "
                    "0 leaves the test out.",
    "av_folds": "Folds of the cross-validated likelihood the added-value test compares.",
    "horizons": "Times at which survival is estimated and the models are compared; proposed from the "
                "follow-up of your cohort, inside its range.",
}
INTERVAL_LABELS = {"two-stage": "Two-stage", "shifted-percentile": "Quick (too narrow)"}
METHOD_LABELS = {
    "bootstrap": "Bootstrap (refit on resampled patients)",
    "cv": "Repeated k-fold cross-validation",
    "by_centre": "Leave one centre out",
    "none": "Apparent performance only",
}


def _key(name: str) -> str:
    return f"design{st.session_state.get(K_GEN, 0)}_{name}"


def _is_numeric(values: pd.Series) -> bool:
    v = values.dropna().astype(str).str.strip().str.lstrip("<")
    v = v[v != ""]
    return not v.empty and pd.to_numeric(v, errors="coerce").notna().mean() > 0.9


def _predictor_table(cohort, template: StudySpec | None, data) -> pd.DataFrame:
    chosen = {p.column: p for p in (template.predictors if template else ())}
    every = template is None  # a new study: every clinical column is suggested, the user unticks
    skip = {data.centre, data.batch}
    rows = []
    for col in cohort.clinical.columns:
        if col in skip:
            continue
        p = chosen.get(col)
        numeric = _is_numeric(cohort.clinical[col])
        if p is None:
            p = PredictorSpec(column=col, kind="linear" if numeric else "categorical")
        rows.append({
            "use": every or col in chosen,
            "column": col,
            "kind": p.kind,
            "transform": p.transform or "",
            "missing": p.missing,
            "reference": p.reference or "",
            "levels": ", ".join(p.levels or ()),
            "detection_limit": "" if p.detection_limit is None else str(p.detection_limit),
            "knots": int(p.knots) if p.knots else None,
            "label": p.label if p.label and p.label != col else "",
            "unit": p.unit or "",
        })
    return pd.DataFrame(rows)


def _predictors_from(table: pd.DataFrame, template: StudySpec | None) -> tuple[PredictorSpec, ...]:
    """Predictor specs from the edited table; settings the table does not show are kept from the template."""
    known = {p.column: p for p in (template.predictors if template else ())}
    out = []
    for i, r in table.iterrows():
        if not bool(r["use"]):
            continue
        col = str(r["column"])
        limit = str(r.get("detection_limit") or "").strip()
        if limit and limit != "auto":
            try:
                limit = float(limit)
            except ValueError:
                raise WorkbenchError(
                    f"predictor {col!r} (row {i + 1}): detection limit {limit!r} is neither 'auto' nor a number."
                ) from None
        levels = tuple(x.strip() for x in str(r.get("levels") or "").split(",") if x.strip())
        knots = r.get("knots")
        fields = dict(
            kind=str(r["kind"] or "linear"),
            transform=str(r["transform"]) or None,
            knots=int(knots) if knots is not None and pd.notna(knots) and r["kind"] == "spline" else None,
            reference=str(r.get("reference") or "").strip() or None,
            levels=levels or None,
            detection_limit=limit or None,
            missing=str(r["missing"] or "complete_case"),
            label=str(r.get("label") or "").strip() or col,
            unit=str(r.get("unit") or "").strip(),
        )
        out.append(replace(known[col], **fields) if col in known else PredictorSpec(column=col, **fields))
    return tuple(out)


def _lines(text: str) -> tuple[str, ...]:
    return tuple(x.strip() for x in text.replace(",", "\n").splitlines() if x.strip())


def _horizons(text: str) -> tuple[float, ...]:
    try:
        return tuple(float(x) for x in text.replace(";", ",").split(",") if x.strip())
    except ValueError:
        raise WorkbenchError(
            f"horizons must be numbers separated by commas, such as 12, 24, 36; got {text!r}."
        ) from None


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
               "per doubling. Detection limit 'auto' reads values such as <0.5 from the data.")
    table = st.data_editor(
        _predictor_table(cohort, tpl, data), key=_key("predictors"), hide_index=True, width="stretch",
        disabled=["column"],
        column_config={
            "use": st.column_config.CheckboxColumn("Use", width="small"),
            "column": st.column_config.TextColumn("Column"),
            "kind": st.column_config.SelectboxColumn("Kind", options=list(KINDS), required=True, width="small"),
            "transform": st.column_config.SelectboxColumn("Transform", options=list(TRANSFORMS), width="small"),
            "missing": st.column_config.SelectboxColumn("Missing values", options=list(MISSING), required=True,
                                                        help=HELP["missing"]),
            "reference": st.column_config.TextColumn("Reference level"),
            "levels": st.column_config.TextColumn("Levels (in order)"),
            "detection_limit": st.column_config.TextColumn("Detection limit"),
            "knots": st.column_config.NumberColumn("Knots", min_value=3, max_value=7, step=1, width="small"),
            "label": st.column_config.TextColumn("Label"),
            "unit": st.column_config.TextColumn("Unit"),
        },
    )
    problems = []
    try:
        predictors = _predictors_from(table, tpl)
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
