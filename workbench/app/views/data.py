"""Data: choose the two tables, say what their columns mean, and look at the cohort."""

from __future__ import annotations

from dataclasses import replace

import numpy as np
import pandas as pd
import streamlit as st

from workbench.app import charts, roles, state
from workbench.app.light_tables import show_table
from workbench.cohort.core import TIME_UNITS
from workbench.cohort.io import read_table
from workbench.cohort.samplesize import criteria_rows
from workbench.errors import WorkbenchError
from workbench.stats.km import kaplan_meier
from workbench.study import DataSpec
from workbench.units import time_phrase

NONE = "(none)"
# Height beyond which a summary table scrolls (about as tall as the data grid it replaces). The
# summary's tables are static HTML: six data grids (canvases) took most of the browser's time on
# this view, the first one a user sees. (A comment: Streamlit would show a bare string on the page.)
TALL = "26rem"


def _choose_tables() -> tuple[str | None, str] | None:
    ss = st.session_state
    options = {"demo": "Demo cohort (invented patients)", "upload": "My own tables"}
    source = st.radio(
        "Tables", list(options), format_func=options.get, horizontal=True, key="data_source",
        index=list(options).index(ss.get(state.K_SOURCE, "demo")),
        help="The demo cohort is synthetic; no real patient is behind any value. "
             "Choosing your own tables starts a new, empty study.",
    )
    if source != ss.get(state.K_SOURCE):
        if source == "demo":
            state.load_demo()
        else:
            state.start_own_study()
    if source == "demo":
        d = ss.get(state.K_DATA)
        if d is None or not str(d.clinical).startswith(str(state.DEMO_DIR)):
            d = state.demo_study().data
        return d.features, d.clinical
    left, right = st.columns(2)
    with left:
        f = st.file_uploader("Imaging features table (optional)", type=state.UPLOAD_TYPES, key="upload_features",
                             help="One row per patient: the patient id, then one column per imaging feature. "
                                  "Leave empty for a clinical-only study. Upload another file here to replace it.")
    with right:
        c = st.file_uploader("Clinical table", type=state.UPLOAD_TYPES, key="upload_clinical",
                             help="One row per patient: the id, follow-up time, event and clinical fields. "
                                  "Upload another file here to replace it.")
    if c is None:
        d = ss.get(state.K_DATA)
        if d is not None and str(state.upload_dir()) in str(d.clinical):
            st.caption("Using the tables uploaded earlier in this session.")
            return d.features, d.clinical
        st.info("Upload the clinical table (CSV, TSV, Parquet or Excel) to continue, and the imaging "
                "features table unless the study is clinical-only.")
        return None
    if f is None:
        st.caption("No imaging features table: a clinical-only study. Upload one to add imaging features.")
        return None, str(state.save_upload(c, "clinical"))
    r = st.file_uploader(
        "Repeat measurements of some patients (optional)", type=state.UPLOAD_TYPES, key="upload_repeats",
        help="A second segmentation or rescan of some patients (10 or more): their id and the same feature "
             "columns as the imaging table. Features that do not reproduce between the two measurements "
             "(ICC below the threshold on the Design page, 0.75 by default) are removed before any modelling; "
             "no outcome is used.")
    ss[state.K_REPEATS] = str(state.save_upload(r, "repeats")) if r is not None else None
    return str(state.save_upload(f, "features")), str(state.save_upload(c, "clinical"))


def _repeats(features, prev) -> dict:
    """The repeat-measurement table: the uploaded one (own tables), or a library study's, kept with its
    imaging table."""
    ss = st.session_state
    if ss.get(state.K_SOURCE) == "upload":
        return {"repeats": ss[state.K_REPEATS]} if features and ss.get(state.K_REPEATS) else {}
    if prev is not None and prev.features == features:
        return {"repeats": prev.repeats, "repeats_sheet": prev.repeats_sheet}
    return {}


def _pick(label, options, current, key, help=None, optional=False):
    opts = ([NONE] if optional else []) + list(options)
    cur = current if current in opts else (NONE if optional else None)
    idx = opts.index(cur) if cur in opts else 0
    v = st.selectbox(label, opts, index=idx, key=key, help=help)
    return None if v == NONE else v


@st.cache_data(show_spinner=False, max_entries=16)
def _guess(features: str | None, clinical: str, digests: tuple[str, str]):
    """Suggested column roles of the tables (cached on their content); no features table: clinical-only."""
    return roles.guess_roles(read_table(clinical), read_table(features) if features else pd.DataFrame())


def _map_columns(features: str | None, clinical: str) -> DataSpec | None:
    ss = st.session_state
    prev = state.current_data()
    digests = (state.file_digest(features) if features else "", state.file_digest(clinical))
    try:
        f_cols = state.table_columns(features, digests[0]) if features else []
        c_cols = state.table_columns(clinical, digests[1])
    except WorkbenchError as exc:
        state.show_error("Reading the tables", exc)
        return None
    shared = [c for c in c_cols if c in f_cols] if features else c_cols
    if not shared:
        st.error(
            "The two tables share no column name, so patients cannot be matched. "
            "Both tables need the same patient id column (for example patient_id)."
        )
        return None
    same_tables = prev is not None and (prev.features, prev.clinical) == (features, clinical)
    demo = state.is_demo()
    confirmed = demo or ss.get(state.K_ROLES_OK) == digests
    guess = None
    if not demo:
        try:
            guess = _guess(features, clinical, digests)
        except WorkbenchError:
            guess = roles.RoleGuess()
    # Known roles of these very tables come first; then roles of the previous tables that fit; then guesses.
    keep = prev is not None and (same_tables or demo)

    def g(name, default=None):
        if keep:
            return getattr(prev, name, default)
        v = getattr(guess, name, None) if guess is not None else None
        if v is None or v == ():
            v = getattr(prev, name, None) if prev is not None else None
        return v if v not in (None, ()) else default

    st.subheader("What the columns mean")
    if not confirmed:
        st.info("The roles below are suggestions read from the column names and values. Check each one, "
                "change what is wrong, then press **Use these column roles**.")
    a, b, c = st.columns(3)
    with a:
        id_col = _pick("Patient id (in both tables)" if features else "Patient id", shared, g("id"), "map_id")
        time_col = _pick("Follow-up time", c_cols, g("time"), "map_time")
        unit = st.selectbox("Time unit", list(TIME_UNITS), key="map_unit",
                            index=list(TIME_UNITS).index(g("time_unit", "months")),
                            help="The unit the follow-up times are written in; horizons use the same unit.")
    with b:
        event_col = _pick("Event (the outcome: death, recurrence, progression...)", c_cols, g("event"), "map_event")
        levels = state.column_levels(clinical, digests[1], event_col) if event_col else []
        binary = set(levels) <= {"0", "1", "0.0", "1.0", "true", "false", "True", "False"}
        ev_default = [v for v in (g("event_codes") or ()) if v in levels]
        cz_default = [v for v in (g("censor_codes") or ()) if v in levels]
        ev = st.multiselect("Values meaning the event happened", levels, default=ev_default, key="map_event_codes",
                            help="Leave empty when the column holds 0/1 or true/false (1 = the event happened).")
        cz = st.multiselect("Values meaning censored (event-free at last follow-up)", levels,
                            default=cz_default, key="map_censor_codes")
        others = [v for v in levels if v not in ev and v not in cz]
        cr = st.multiselect(
            "Values meaning a competing event (optional)", others, key="map_competing_codes",
            default=[v for v in (g("competing_codes") or ()) if v in others],
            help="An event that makes the event of interest impossible, such as death from another cause. The "
                 "main analysis counts it as censored; the Results page then offers a competing-risks analysis.")
        if not binary and not ev:
            st.caption("This column is not 0/1: choose which values mean the event happened.")
    with c:
        every = list(dict.fromkeys(c_cols + f_cols))
        centre = _pick("Hospital / centre (optional)", every, g("centre"), "map_centre", optional=True,
                       help="Needed to validate by leaving one centre out at a time.")
        batch = _pick("Scanner / batch (optional)", every, g("batch"), "map_batch", optional=True,
                      help="Needed for harmonisation of imaging features across scanners.")
        keep_both = drop = False
        if features:  # both choices concern the features table
            keep_both = st.checkbox("Keep only patients found in both tables",
                                    value=g("on_unmatched") == "intersect", key="map_keep")
            drop = st.checkbox("Drop constant or empty feature columns", value=bool(g("drop_unusable_features")),
                               key="map_drop")
    if not confirmed:
        if not st.button("Use these column roles", type="primary", key="map_confirm"):
            return None
        ss[state.K_ROLES_OK] = digests
        st.rerun()  # draw the page again without the suggestion note and the button
    try:
        data = DataSpec(
            features=features, clinical=clinical, id=id_col, time=time_col, event=event_col,
            time_unit=unit, event_codes=tuple(ev) or None, censor_codes=tuple(cz) or None,
            competing_codes=tuple(cr) or None,
            centre=centre, batch=batch, on_unmatched="intersect" if keep_both else "error",
            drop_unusable_features=drop,
            **_repeats(features, prev),
        )
        data.column_map()
    except WorkbenchError as exc:
        state.show_error("Column roles", exc)
        return None
    if data != prev:
        ss[state.K_DATA] = data
        study = state.current_study()
        if study is not None:
            try:
                state.set_study(replace(study, data=data), ss.get(state.K_STUDY_NOTE, ""))
            except WorkbenchError:
                pass  # the Design page rebuilds the study and explains what must change
    return data


def _frame(rows, columns) -> pd.DataFrame:
    return pd.DataFrame(rows, columns=columns)


def _fmt(x: float) -> str:
    return "not reached" if not np.isfinite(x) else f"{x:.1f}"


def _ci(lo: float, hi: float, unit: str) -> str:
    """A median's 95% interval in words; "not estimable" when neither end is reached (not "not reached to
    not reached"), and the unit after a number only."""
    if not np.isfinite(lo) and not np.isfinite(hi):
        return "not estimable"
    return f"{_fmt(lo)} to {_fmt(hi)}" + (f" {unit}" if np.isfinite(hi) else "")


@st.cache_data(show_spinner=False, max_entries=8)
def _km_png(data_hash: str, horizons: tuple, time_unit: str, ylabel: str, _cohort) -> bytes:
    """The cohort's Kaplan-Meier figure as PNG, drawn once per table content, horizons and labels."""
    fig = charts.km_figure(kaplan_meier(_cohort.time, _cohort.event), time_unit=time_unit, horizons=horizons,
                           ylabel=ylabel)
    return charts.figure_bytes(fig)


def _summary(cohort, horizons) -> None:
    inside = tuple(h for h in horizons if 0 < h <= float(cohort.time.max()))
    summary, warns = state.cohort_summary(cohort.source.data_hash, inside, cohort)
    u = summary.time_unit
    d = state.current_data()
    outcome = roles.outcome_name(d.event if d else None, d.event_codes if d else ())
    # "survival" only where the event is death: a median time to relapse or to cGVHD is no survival time
    median_words = "Median survival" if outcome == "death" else f"Median time to {outcome}"
    competing = summary.n_competing or 0
    st.subheader("Cohort summary")
    m = st.columns(5)
    m[0].metric("Patients", summary.n_patients)
    m[1].metric("Events", summary.n_events, help=f"{100 * summary.n_events / summary.n_patients:.0f}% of patients")
    if summary.n_competing is None:
        m[2].metric("Censored", summary.n_censored)
    else:  # the competing events are not censored observations: counted apart
        m[2].metric("Competing / censored", f"{competing} / {summary.n_censored - competing}",
                    help="Patients whose first event was a competing one / patients event-free at last follow-up.")
    m[3].metric(f"Median follow-up ({u})", _fmt(summary.median_followup),
                help="Reverse Kaplan-Meier (Schemper & Smith 1996): censoring treated as the event.")
    # the metric's label stays short enough for its column ("Median time to the event (years)" was cut off)
    m[4].metric(f"Median survival ({u})" if outcome == "death" else f"Median time ({u})", _fmt(summary.median_survival),
                help=None if outcome == "death" else f"Median time to {outcome} (Kaplan-Meier).")
    from workbench.cohort.summary import followup_text

    st.caption(
        "Median follow-up "
        f"{followup_text(summary.median_followup, summary.median_followup_ci, u, summary.max_followup)}; "
        f"longest follow-up {summary.max_followup:.1f} {u}. {median_words} 95% CI "
        f"{_ci(*summary.median_survival_ci, u)}."
    )
    if summary.n_competing is not None:
        codes = ", ".join(str(c) for c in (d.competing_codes or ())) if d else ""
        st.warning(
            f"{competing} patients ({100 * competing / summary.n_patients:.0f}%) had a competing event first"
            f"{f' ({codes})' if codes else ''}. The Kaplan-Meier figures on this page count them as censored: "
            "that is the cause-specific view, and one minus it overstates the risk of the event when competing "
            "events are common. The competing-risks section of the Results page gives the cumulative incidence "
            "of each cause."
        )
    state.show_warnings(warns)
    left, right = st.columns([3, 2])
    with left:
        ylabel = "Overall survival" if outcome == "death" else f"Free of {outcome}"
        st.image(_km_png(cohort.source.data_hash, inside, u, ylabel, cohort), caption=f"Kaplan-Meier estimate of freedom from {outcome}, "
                 "with 95% confidence band")
    with right:
        if summary.horizons:
            free = "Survival" if outcome == "death" else "Event-free"
            title = "Survival at the horizons" if outcome == "death" else f"Free of {outcome} at the horizons"
            st.markdown(f"**{title}**")
            show_table(_frame(
                [(time_phrase(h.horizon, u), f"{100 * h.survival:.1f}%",
                  f"{100 * h.ci_lower:.1f} to {100 * h.ci_upper:.1f}", h.at_risk) for h in summary.horizons],
                ["Horizon", free, "95% CI (%)", "At risk"]), label=title)
        skipped = [h for h in horizons if h not in inside]
        if skipped:
            st.caption(f"Horizons beyond the longest follow-up are left out: {', '.join(f'{h:g}' for h in skipped)}.")
        if summary.centres:
            st.markdown("**Centres**")
            show_table(_frame(list(summary.centres.items()), ["Centre", "Patients"]), label="Centres",
                       max_height=TALL)
        if summary.batches:
            st.markdown("**Scanners / batches**")
            show_table(_frame(list(summary.batches.items()), ["Scanner", "Patients"]), label="Scanners",
                       max_height=TALL)

    a, b = st.columns(2)
    with a:
        st.markdown("**Missing values**")
        if summary.missing:
            show_table(_frame(
                [(x.table, x.column, x.n_missing, f"{100 * x.fraction:.1f}%")
                 for x in sorted(summary.missing, key=lambda x: -x.n_missing)],
                ["Table", "Column", "Missing", "Share"]), label="Missing values", max_height=TALL)
        else:
            st.write("None.")
        if summary.n_features:
            st.markdown(f"**Imaging features**: {summary.n_features} in {len(summary.feature_families)} families")
            show_table(_frame(sorted(summary.feature_families.items()), ["Family prefix", "Features"]),
                       label="Imaging feature families", max_height=TALL)
        else:
            st.markdown("**Imaging features**: none (a clinical-only study)")
    with b:
        ss_ = summary.sample_size
        st.markdown("**Events per parameter**")
        st.write(
            f"{summary.events_per_clinical_parameter:.1f} events per candidate clinical parameter "
            f"({summary.n_events} events / {summary.n_clinical_parameters} parameters); "
            + (f"{summary.events_per_feature:.1f} per imaging feature, which is why the signature needs "
               "penalisation and honest validation." if summary.n_features else "no imaging features.")
        )
        st.markdown("**Minimum sample size** (Riley et al. 2019/2020)")
        rows = criteria_rows(ss_, u.strip())
        show_table(_frame(rows, ["Criterion", "Patients"]), label="Minimum sample size")
        verdict = "meets" if ss_.adequate else "falls short of"
        st.write(
            f"For a Cox model with {ss_.n_parameters} parameters, anticipated Cox-Snell R-squared "
            f"{ss_.r2_cs:.3f} ({ss_.r2_cs_source}): {ss_.n_required} patients ({ss_.events_required} events) "
            f"are needed; this cohort ({ss_.n_available}) {verdict} it."
        )
    if summary.dropped_ids:
        st.warning(f"{len(summary.dropped_ids)} patients were in only one table and are left out.")


def render() -> None:
    st.title("Data")
    st.write("Choose the clinical table and the imaging-features table (none for a clinical-only study), "
             "and say what their columns mean.")
    tables = _choose_tables()
    if tables is None:
        return
    data = _map_columns(*tables)
    if data is None:
        return
    try:
        cohort, warns = state.get_cohort()
    except WorkbenchError as exc:
        state.show_error("The tables cannot be used yet", exc)
        return
    except Exception as exc:  # noqa: BLE001 - shown as text, never as a traceback
        state.show_error("Reading the tables", exc)
        return
    st.success(f"Read {cohort.n} patients with {len(cohort.feature_names)} imaging features.")
    horizons = (state.propose_horizons(cohort) if not state.is_demo()
                else tuple(st.session_state.get(state.K_HORIZONS, ())))
    if not state.is_demo() and st.session_state.get(state.K_HORIZONS_AUTO):
        hz = ", ".join(f"{h:g}" for h in horizons)
        st.caption(f"Horizons proposed from the follow-up ({cohort.time_unit}): {hz or 'none'}; "
                   "change them on the Design page.")
    state.show_warnings(warns)
    try:
        _summary(cohort, horizons)
    except Exception as exc:  # noqa: BLE001
        state.show_error("Summarising the cohort", exc)


if __name__ == "__main__":
    render()
