"""The clinical + signature model's patient estimate from a file, with limits from refits.

The patients' values (clinical and imaging columns, one row per patient) come from an uploaded
file, read and checked as on the Patient page (:mod:`workbench.app.views.patient_file`). The
limits come from a bootstrap that refits the whole model
(:func:`workbench.competing.refit_limits.refit_arms`, as ``workbench competing-estimate
--refits``): every patient's values are checked first, then the refits run in the background
(:class:`workbench.app.runs.RefitJob`, with progress and Cancel). The refits belong to the
analysis (its cohort, study and seed): they are kept per analysis, model and number of refits, so
another patient or another file is estimated from the same refits.
"""

from __future__ import annotations

from pathlib import Path

import streamlit as st

from workbench.app import state
from workbench.app.views import patient_file
from workbench.competing.refit_limits import DEFAULT_REFITS, MIN_REFITS, MIN_SUCCESS

JOB = "wb_competing_refit_job"
CACHE = "wb_competing_refits"  # {"analysis": result, "refits": {(model, B): RefitBootstrap}, "estimates": {...}}
FILE = "wb_competing_patient_file"  # (saved path, name as uploaded): the file outlives the uploader widget
REPS = "wb_competing_refit_count"
KEEP = 2  # sets of refits kept per analysis (one per model and number of refits)
REFITS_HELP = (
    f"Each refit rebuilds the whole model (clinical terms, harmonisation, the signature's selection and weights, "
    f"the regressions) on a bootstrap sample of the patients; the limits come from how the refits' estimates "
    f"spread. {DEFAULT_REFITS} is the default. Fewer finish sooner, but the limits then rest on fewer refits and "
    f"move more from one set of refits to another; below {MIN_REFITS} they are too unstable to give. Limits are "
    f"shown when at least {MIN_REFITS} refits and {MIN_SUCCESS:.0%} of those asked succeed. One refit of the demo "
    "study takes about a second on one core.")


def _against_default(reps: int) -> str:
    if reps == DEFAULT_REFITS:
        return " (the default)."
    if reps < DEFAULT_REFITS:
        return (f" instead of the default {DEFAULT_REFITS}: quicker, but limits that move more from one set of "
                "refits to another.")
    return f" instead of the default {DEFAULT_REFITS}: slower, and limits that move less from one set of refits to another."


def _cache(result) -> dict:
    """The refits and estimates of this analysis (those of an earlier analysis are dropped)."""
    ss = st.session_state
    held = ss.get(CACHE)
    if held is None or held["analysis"] is not result:
        held = ss[CACHE] = {"analysis": result, "refits": {}, "estimates": {}}
    return held


def _estimate(result, name: str, arm, patient: dict, refits=None):
    """The patient's estimate, exactly as the command line makes it (same ignored record fields)."""
    from workbench.app.views.competing_patient import training_design
    from workbench.estimate_competing import estimate_competing_patient

    d = result.spec.data
    ignore = tuple(c for c in (d.id, d.time, d.event, d.centre) if c and c in patient)
    return estimate_competing_patient(arm, result.cohort, result.spec, patient, random_state=int(result.spec.seed),
                                      ignore=ignore, training_design=training_design(result, name, arm),
                                      refits=refits)


def _file(result, ranges, name: str):
    """The patients' file (kept across reruns and page switches) as a table, or None."""
    ss = st.session_state
    patient_file.template_button(result, ranges, name, key="cpe_template")
    up = st.file_uploader("Patient file (CSV or Excel, one row per patient: the template's columns)",
                          type=patient_file.FILE_TYPES, key="cpe_file")
    if up is not None:
        ss[FILE] = (str(state.save_upload(up, "competing_patient")), up.name)
    if ss.get(FILE) is None:
        st.info("Upload a file with the patients' values (the template above has the columns).")
        return None, None
    path, shown = ss[FILE]
    if up is None:
        st.caption(f"Patients from {shown} (uploaded earlier; upload another file to replace it).")
    df = patient_file.read_patients(Path(path), shown)
    if df is None or patient_file.missing_columns(result, ranges, df, shown):
        return None, None
    return df, shown


def _checked(result, name: str, arm, df, shown: str) -> bool:
    """Every patient's values are estimable (checked before minutes go to the refits)."""
    labels = patient_file.row_labels(result, df)
    for i in range(len(df)):
        try:
            _estimate(result, name, arm, patient_file.row_record(df, i))
        except Exception as exc:  # noqa: BLE001 - shown on the page, the refits not started
            state.show_error(f"{shown}, patient {labels[i]} (row {i + 2} of the file); no refit was started", exc)
            return False
    return True


def running_note() -> None:
    """A line saying refits go on in the background (when the page shows another route)."""
    job = st.session_state.get(JOB)
    if job is not None and job.running:
        st.caption(f"Refits of the clinical + signature model run in the background ({job.count_text().lower()}); "
                   "choose that model and the file route to follow them or cancel.")


def _job_state(result, cache: dict) -> None:
    """A finished refit job's refits go into the analysis's cache; a cancelled or failed one is said."""
    ss = st.session_state
    job = ss.get(JOB)
    if job is None or job.running:
        return
    if job.result is not None and job.analysis is result:
        held = cache["refits"]
        held[job.key] = job.result
        for old in list(held)[:-KEEP]:  # a set of refits holds every refitted model: keep the latest few
            del held[old]
    elif job.cancelled:
        st.warning(f"The refits were cancelled after {job.done} of {job.total}: no limits were computed. Start "
                   "them again when you need the limits.")
    elif job.error is not None:
        state.show_error("The refits", job.error)
    ss[JOB] = None if job.result is not None else job


def render_file(result, name: str, arm, ranges) -> None:
    """The file route of the clinical + signature model: file, refits, the chosen patient's estimate."""
    from workbench.app import progress
    from workbench.app.runs import RefitJob
    from workbench.app.views.competing_patient import show_estimate

    ss = st.session_state
    df, shown = _file(result, ranges, name)
    if df is None:
        running_note()
        return
    left, right = st.columns([1, 3], vertical_alignment="bottom")
    reps = int(left.number_input("Refits of the whole model for the limits", MIN_REFITS, 2000,
                                 int(ss.get(REPS, DEFAULT_REFITS)), step=10, key="cpe_refits", help=REFITS_HELP))
    ss[REPS] = reps
    right.caption(f"{reps} refits{_against_default(reps)} The refits belong to this analysis: every patient and "
                  "every file is estimated from the same ones.")
    cache = _cache(result)
    _job_state(result, cache)
    job = ss.get(JOB)
    running = job is not None and job.running
    refits = None if running else cache["refits"].get((name, reps))
    if refits is None:
        # the button stays (disabled while refits run), so the page keeps its layout under the progress bar
        start = st.button(f"Check the patients' values and start {reps} refits", type="primary",
                          key="cpe_refit_start", disabled=running)
        if start and not running and _checked(result, name, arm, df, shown):
            ss[JOB] = RefitJob((name, reps), result.spec, reps, int(result.spec.validation.workers),
                               analysis=result).start()
            st.rerun()  # the next run shows the button disabled above the progress
        if running:
            progress.watch(job, cancel_label="Cancel the refits", key="cpe_refit_cancel",
                           idle="Starting the refits...")
        elif not start:
            st.info(f"Every patient's values in {shown} are checked first; the estimates with their limits "
                    "appear when the refits are done.")
        return
    i = patient_file.pick_row(result, df, key="cpe_row")
    label = patient_file.row_labels(result, df)[i]
    done = cache["estimates"]
    ekey = (name, reps, ss[FILE][0], i)
    if ekey not in done:
        try:
            with st.spinner("Predicting the patient with every refit..."):
                done[ekey] = _estimate(result, name, arm, patient_file.row_record(df, i), refits)
        except Exception as exc:  # noqa: BLE001
            state.show_error(f"{shown}, patient {label}", exc)
            return
    show_estimate(done[ekey], source=f"{shown}, patient {label}")
