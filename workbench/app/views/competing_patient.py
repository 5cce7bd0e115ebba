"""A patient's absolute risk of each cause, inside the Results page's competing-risks section.

Uses the arms the competing-risks analysis fitted on the whole cohort (the same fit as
``workbench competing`` and ``workbench competing-estimate``) and
:func:`workbench.estimate_competing.estimate_competing_patient`. The clinical model's values
are typed, with influence-function limits. For the clinical + signature model the patient's
values come from a file (clinical and imaging columns; limits from refits of the whole model,
:mod:`workbench.app.views.competing_patient_file`) or the signature score is typed (no limits,
and the estimate says why).
"""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd
import streamlit as st

from workbench.app import state
from workbench.app.messages import plain
from workbench.app.views.patient_file import show_outside
from workbench.units import time_phrase

MODEL_WORDS = {"clinical": "Clinical", "combined": "Clinical + signature"}
SOURCE_WORDS = {"file": "Read the patients' values from a file (95% limits from refits of the whole model)",
                "score": "Type the clinical values and the signature score (no limits)"}
KEY = "wb_competing_patient"
CHOICE = f"{KEY}_choice"  # (model, source) kept across page switches: widgets forget theirs


def estimate_frame(est) -> pd.DataFrame:
    """One row per route and quantity; one column per horizon, estimate (lower to upper) in per cent."""
    from workbench.estimate_competing import risk_table

    long = risk_table(est)
    rows = []
    for (route, what), g in long.groupby(["route", "quantity"], sort=False):
        row = {"Model": route, "Probability": what}
        for _, r in g.iterrows():
            limits = (f" ({100 * r['lower']:.1f}% to {100 * r['upper']:.1f}%)"
                      if np.isfinite(r["lower"]) and np.isfinite(r["upper"]) else " (no limits)")
            row[f"By {time_phrase(r['horizon'], est.time_unit)}"] = f"{100 * r['estimate']:.1f}%{limits}"
        rows.append(row)
    return pd.DataFrame(rows)


def training_design(result, name: str, arm):
    """The arm's training design (cross-fitted signature scores), built once per analysis and model."""
    from workbench.estimate_competing import arm_training_design

    designs = st.session_state.setdefault(f"{KEY}_designs", {})
    held = designs.get(name)
    if held is None or held[0] is not result:
        designs.clear()
        held = designs[name] = (result, arm_training_design(arm, result.cohort, result.spec,
                                                             random_state=int(result.spec.seed)))
    return held[1]


def show_estimate(est, *, source: str = "the patient's values") -> None:
    """The estimate as the command line gives it: the table, values outside the training data,
    imputations, notes (the limits' method and caveat) and the caution; the printed text below."""
    from workbench.estimate_competing import format_competing_estimate
    from workbench.plausibility import check_patient_scale

    pct = round(100 * est.cause_specific.conf_level)
    st.markdown(f"**Estimated risks** ({pct}% limits after each value)" if est.limits_method != "none"
                else "**Estimated risks** (no limits: see the note below)")
    state.table(estimate_frame(est))
    ch = est.checks
    if show_outside(ch):
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")  # shown on the page instead
            state.show_warnings(check_patient_scale(ch, source=source))
    else:
        st.caption("All values lie within the training data.")
    for t in ch.imputed:
        st.caption(plain(f"Imputed: {t}"))
    if est.notes:
        st.markdown("**Notes**")
    for note in est.notes:
        st.caption(plain(note))
    st.info(f"**Caution.** {est.caution}")
    with st.expander("The estimate as text (as 'workbench competing-estimate' prints it)"):
        st.code(format_competing_estimate(est), language=None)


def _form(ranges, with_score: bool, tag: str):
    score = None
    with st.form(f"cpe_form_{tag}"):
        cols = st.columns(3)
        values = {}
        for i, c in enumerate(ranges.clinical):
            label = c.label or c.column
            with cols[i % 3]:
                if c.kind in ("categorical", "ordinal"):
                    opts = [str(x) for x in c.levels] + (["(missing)"] if c.missing == "impute" else [])
                    v = st.selectbox(label, opts, index=None, placeholder="Choose...", key=f"cpe_{tag}_{c.column}")
                    values[c.column] = None if v in (None, "(missing)") else v
                else:
                    unit = f" ({c.unit})" if c.unit else ""
                    v = st.text_input(f"{label}{unit}", "", key=f"cpe_{tag}_{c.column}",
                                      help=f"Training range {c.train_min:g} to {c.train_max:g}{unit}.")
                    values[c.column] = v.strip() or None
        if with_score:
            text = st.text_input("Imaging signature score", "", key=f"cpe_{tag}_score",
                                 help="The patient's score of this model's imaging signature.")
            if text.strip():
                try:
                    score = float(text)
                except ValueError:
                    st.error(f"The signature score must be a number; got {text.strip()!r}.")
                    return None
        if not st.form_submit_button("Estimate the absolute risks", type="primary"):
            return None
    return values, score


def _typed(result, name: str, arm, ranges, with_score: bool) -> None:
    """The typed route: clinical values (and the signature score for the clinical + signature model)."""
    from workbench.estimate_competing import estimate_competing_patient

    if with_score:
        st.caption("A typed signature score gives the estimate without limits (the note under it says why): the "
                   "limits come from refitting the whole model, signature included, and need the patient's "
                   "imaging values. Read them from a file for limits.")
    got = _form(ranges, with_score, name)
    if got is not None:
        values, score = got
        if with_score and score is None:
            st.error("Type the patient's imaging signature score.")
            return
        try:
            with st.spinner("Estimating..."):
                est = estimate_competing_patient(arm, result.cohort, result.spec,
                                                 {k: v for k, v in values.items() if v is not None},
                                                 random_state=int(result.spec.seed), signature_score=score,
                                                 training_design=training_design(result, name, arm))
        except Exception as exc:  # noqa: BLE001
            state.show_error("The patient estimate", exc)
            return
        st.session_state[KEY] = (name, est)
    held = st.session_state.get(KEY)
    if held is None or held[0] != name:
        return
    show_estimate(held[1])


def render_patient(result) -> None:
    """The patient subsection of the competing-risks section."""
    from workbench.estimate_competing import competing_ranges

    ss = st.session_state
    st.subheader("One patient's absolute risk of each cause")
    st.caption("From the models fitted on all patients: the risk of the cause of interest by Fine-Gray, and of "
               "each cause together with the chance of no event by the cause-specific Cox models, with 95% "
               "limits: influence-function standard errors for the clinical model; for the clinical + signature "
               "model, a bootstrap that refits the whole model when the patient's values (imaging included) come "
               "from a file, and no limits for a typed signature score.")
    models = [m for (target, m) in result.arms if target == "cause"]
    model0, source0 = ss.get(CHOICE, (None, "file"))
    name = st.radio("Model", models, format_func=lambda m: MODEL_WORDS.get(m, m), horizontal=True,
                    index=models.index(model0) if model0 in models else 0, key="cpe_model")
    arm = result.arms[("cause", name)]
    ranges = competing_ranges(arm, result.cohort, batch_column=result.spec.data.batch or "batch")
    with_score = bool(arm.signature is not None and arm.n_selected)
    source = "typed"
    if with_score:
        source = st.radio("The patient's values", list(SOURCE_WORDS), format_func=SOURCE_WORDS.get,
                          index=list(SOURCE_WORDS).index(source0) if source0 in SOURCE_WORDS else 0,
                          key="cpe_source")
    ss[CHOICE] = (name, source if with_score else source0)
    if source == "file":
        from workbench.app.views.competing_patient_file import render_file

        render_file(result, name, arm, ranges)
        return
    from workbench.app.views.competing_patient_file import running_note

    running_note()
    _typed(result, name, arm, ranges, with_score)
