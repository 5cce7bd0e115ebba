"""Competing risks on the Results page: the cause of interest with other events competing.

Shown when the study names competing codes (the Data page's third set of event values).
The analysis is :func:`workbench.competing.analysis.run_competing`, the same as
``workbench competing``; it is run on request in the background (with progress and Cancel),
apart from the main study run, and kept for the study and number of replicates it was run with.
"""

from __future__ import annotations

import re

import numpy as np
import pandas as pd
import streamlit as st

from workbench.app import charts, state
from workbench.competing.estimates import INTERVAL_CELLS, INTERVAL_ESTIMATORS, INTERVAL_RULE
from workbench.report.competing import withheld_lines
from workbench.units import time_phrase

# "all-cause" is the first event of any cause: death from any cause only when every code is a death
TARGET_WORDS = {"cause": "cause of interest", "all_cause": "first event of any cause"}
MODEL_WORDS = {"clinical": "Clinical", "combined": "Clinical + signature",
               "combined_minus_clinical": "Difference (signature added)"}
METHOD_WORDS = {"cause_specific": "cause-specific Cox", "fine_gray": "Fine-Gray"}
# the metric functions name themselves at the start of their warnings; people read what was measured
METRIC_WORDS = {"competing_auc": "AUC for the cause of interest", "competing_brier": "Brier score",
                "competing_grouped_calibration": "Calibration by risk group",
                "competing_smoothed_calibration": "Calibration curve (ICI)",
                "competing_net_benefit": "Decision curve"}
_PREFIX = re.compile(r"^([a-z][a-z0-9]*(?:_[a-z0-9]+)+):\s+")
_HORIZON = re.compile(r"\b(horizons?) (\d+(?:\.\d+)?)(?![\d.]| ?(?:days?|weeks?|months?|years?)\b)")
KEY = "wb_competing_result"
JOB = "wb_competing_job"


def _unit(result) -> str:
    return result.spec.data.time_unit


def warning_text(message: str, unit: str) -> str:
    """A warning of the analysis for people: the metric in words instead of its function's name,
    a horizon with its time unit ("the horizon 1 year", not "the horizon 1")."""
    text = str(message)
    m = _PREFIX.match(text)
    if m:
        text = f"{METRIC_WORDS.get(m.group(1), m.group(1).replace('_', ' '))}: {text[m.end():]}"
    text = _HORIZON.sub(lambda h: f"{h.group(1)} {time_phrase(float(h.group(2)), unit)}", text)
    return text[:1].upper() + text[1:]


def _fmt(x: float, lo: float | None = None, hi: float | None = None) -> str:
    if not np.isfinite(x):
        return "n/a"
    if lo is None or not np.isfinite(lo):
        return f"{x:.3f}"
    return f"{x:.3f} ({lo:.3f} to {hi:.3f})"


def corrected_table(result) -> pd.DataFrame:
    """One row per target, model and method; the validated AUC, Brier and ICI per horizon (95% interval if any)."""
    rows = []
    for (target, model, method), v in result.corrected.items():
        row = {"Outcome": TARGET_WORDS.get(target, target), "Model": MODEL_WORDS.get(model, model),
               "Fitted by": METHOD_WORDS.get(method, method)}
        lower, upper = result.lower.get((target, model, method), {}), result.upper.get((target, model, method), {})
        for m, label in (("auc", "AUC"), ("brier", "Brier"), ("ici", "ICI")):
            for j, t in enumerate(result.horizons):
                lo = float(lower[m][j]) if m in lower else None
                hi = float(upper[m][j]) if m in upper else None
                row[f"{label} {time_phrase(t, _unit(result))}"] = _fmt(float(v[m][j]), lo, hi)
        rows.append(row)
    return pd.DataFrame(rows)


def interval_words(result) -> str:
    """What the intervals of the validated table are, or why there are none."""
    why = " ".join(f"Without an interval: {x}." for x in withheld_lines(result))
    if any(np.any(np.isfinite(b[m])) for b in result.lower.values() for m in b):
        shown = "; ".join(f"{TARGET_WORDS.get(t, t)}, {METHOD_WORDS.get(meth, meth)}: {', '.join(ms)}"
                          for (t, meth), ms in INTERVAL_CELLS.items())
        return f"95% intervals ({INTERVAL_RULE}) for {shown}. {why}".strip()
    if result.estimator not in INTERVAL_ESTIMATORS:
        return "No intervals: this estimator has none."
    if result.replicates - result.failed < 10:
        return "No intervals: fewer than 10 bootstrap replicates with a value."
    return f"No intervals. {why}".strip()  # every cell withheld: the floors of patients or events say why


def external_table(result) -> pd.DataFrame | None:
    """AUC with its 95% interval on the external cohort, per target, model and method."""
    if result.external is None:
        return None
    rows = []
    for (target, model, method), block in result.external.items():
        row = {"Outcome": TARGET_WORDS.get(target, target), "Model": MODEL_WORDS.get(model, model),
               "Fitted by": METHOD_WORDS.get(method, method)}
        a = block["auc"]
        for j, t in enumerate(result.horizons):
            row[f"AUC {time_phrase(t, _unit(result))}"] = _fmt(float(a["estimate"][j]), float(a["lower"][j]),
                                                                float(a["upper"][j]))
        rows.append(row)
    return pd.DataFrame(rows)


def incidence_table(result) -> pd.DataFrame:
    from workbench.competing.cif import incidence_at
    from workbench.report.competing_figures import cause_labels

    labels = cause_labels(result)
    rows = []
    for k in result.incidence.causes:
        est, lo, hi = incidence_at(result.incidence, result.horizons, cause=k)
        row = {"Cause": labels.get(k, str(k))}
        for t, e, a, b in zip(result.horizons, est, lo, hi, strict=True):
            row[f"By {time_phrase(t, _unit(result))}"] = _fmt(float(e), float(a), float(b))
        rows.append(row)
    return pd.DataFrame(rows)


@st.cache_data(show_spinner=False, max_entries=2)
def _pngs(run_key: tuple, _result) -> dict:
    from workbench.report.competing_figures import competing_figures

    return {name: charts.screen_png(fig, tight=name != "incidence_nomogram")
            for name, fig in competing_figures(_result, "double").items()}


FIGURE_TITLES = {"cumulative_incidence": "Cumulative incidence of each cause",
                 "incidence_calibration": "Calibration for the cause of interest (apparent)",
                 "incidence_decision_curve": "Decision curve for the cause of interest (apparent)",
                 "incidence_nomogram": "Fine-Gray nomogram: risk of the cause of interest"}


def held_analysis() -> tuple | None:
    """The last finished analysis as (its key, its result), taking in one finished since last shown."""
    ss = st.session_state
    job = ss.get(JOB)
    if job is not None and job.result is not None and ss.get(KEY, (None, None))[1] is not job.result:
        ss[KEY] = (job.key, job.result)
    return ss.get(KEY)


def render_section(spec) -> None:
    """The competing-risks section (nothing when the study names no competing codes)."""
    if not spec.data.competing_codes:
        return
    ss = st.session_state
    st.divider()
    st.header("Competing risks")
    st.caption(
        f"Events coded {', '.join(spec.data.event_codes or ())} are the cause of interest; "
        f"{', '.join(spec.data.competing_codes)} compete with them (a patient who has a competing event can no "
        "longer have the event of interest). The main results above treat competing events as censored. This "
        "analysis fits cause-specific Cox and Fine-Gray models and validates them by the bootstrap, as "
        "'workbench competing' does.")
    quick = min(state.DEMO_REPLICATES, spec.validation.replicates)
    reps = st.number_input("Bootstrap replicates for the competing-risks analysis", 0, 2000,
                           int(ss.get("wb_competing_reps", quick)), key="competing_replicates",
                           help="0 gives apparent performance only (optimistic). External intervals need 10 "
                                "or more.")
    ss["wb_competing_reps"] = int(reps)
    run_key = (state.study_text(spec), int(reps))
    job = ss.get(JOB)
    if st.button("Run the competing-risks analysis", key="competing_run",
                 disabled=job is not None and job.running):
        from workbench.app.runs import CompetingJob

        # in the background, like the study run: the page stays responsive and Cancel acts between replicates
        job = ss[JOB] = CompetingJob(run_key, spec, int(reps), int(spec.validation.workers)).start()
    if job is not None and job.running:
        from workbench.app import progress

        progress.watch(job, cancel_label="Cancel the competing-risks analysis", key="competing_cancel",
                       idle="Fitting the competing-risks models on all patients...")
        return
    held = held_analysis()
    if job is not None and job.cancelled:
        st.warning("The competing-risks analysis was cancelled." + (" The results below are those of the last "
                                                                   "complete analysis." if held else ""))
    elif job is not None and job.error is not None:
        state.show_error("The competing-risks analysis", job.error)
    if held is None:
        st.info("Press the button to run it.")
        return
    key, result = held
    if key != run_key:
        st.warning("The study or the number of replicates changed since this analysis ran: run it again to "
                   "bring it up to date.")
    c = result.cohort
    st.success(f"{c.n} patients: {int(np.sum(c.cause == 1))} events of interest, {int(np.sum(c.cause == 2))} "
               f"competing, {int(np.sum(c.cause == 0))} censored; {result.replicates} bootstrap replicates "
               f"({result.failed} failed).")
    for category, message in result.warnings:  # as the command line prints them
        st.warning(f"{warning_text(message, _unit(result))} ({category})")
    st.subheader("Cumulative incidence (Aalen-Johansen, 95% interval)")
    state.table(incidence_table(result))
    st.subheader("Validated performance")
    st.caption(f"Estimated by {result.estimator_label}. AUC for the cause of interest (competing events count as "
               "controls); Brier score and ICI of the predicted cumulative incidence. "
               + interval_words(result))
    state.table(corrected_table(result))
    ext = external_table(result)
    if ext is not None:
        st.subheader("External cohort (95% interval from resampling its patients)")
        state.table(ext)
    for name, png in _pngs(key, result).items():
        st.markdown(f"**{FIGURE_TITLES.get(name, name)}**")
        st.image(png)
    from workbench.app.views.competing_patient import render_patient

    render_patient(result)
