"""A patient's absolute risk of each cause, inside the Results page's competing-risks section.

Uses the arms the competing-risks analysis fitted on the whole cohort (the same fit as
``workbench competing`` and ``workbench competing-estimate``) and
:func:`workbench.estimate_competing.estimate_competing_patient`. For the clinical +
signature model the patient's signature score is typed in place of the imaging values.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import streamlit as st

from workbench.app import state
from workbench.units import time_phrase

MODEL_WORDS = {"clinical": "Clinical", "combined": "Clinical + signature"}
KEY = "wb_competing_patient"


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


def render_patient(result) -> None:
    """The patient subsection of the competing-risks section."""
    from workbench.estimate_competing import (
        arm_training_design,
        competing_ranges,
        estimate_competing_patient,
    )

    st.subheader("One patient's absolute risk of each cause")
    st.caption("From the models fitted on all patients: the risk of the cause of interest by Fine-Gray, and of "
               "each cause together with the chance of no event by the cause-specific Cox models, with 95% "
               "limits (influence-function standard errors) for the clinical model; the clinical + signature "
               "model's estimate is shown without limits (see the note under it).")
    models = [m for (target, m) in result.arms if target == "cause"]
    name = st.radio("Model", models, format_func=lambda m: MODEL_WORDS.get(m, m), horizontal=True,
                    key="cpe_model")
    arm = result.arms[("cause", name)]
    ranges = competing_ranges(arm, result.cohort, batch_column=result.spec.data.batch or "batch")
    with_score = bool(arm.signature is not None and arm.n_selected)
    got = _form(ranges, with_score, name)
    if got is not None:
        values, score = got
        if with_score and score is None:
            st.error("Type the patient's imaging signature score.")
            return
        try:
            with st.spinner("Estimating..."):
                # the training design (cross-fitted signature scores) is built once per analysis and model
                designs = st.session_state.setdefault(f"{KEY}_designs", {})
                dkey = (id(result), name)
                if dkey not in designs:
                    designs.clear()
                    designs[dkey] = arm_training_design(arm, result.cohort, result.spec,
                                                        random_state=int(result.spec.seed))
                est = estimate_competing_patient(arm, result.cohort, result.spec,
                                                 {k: v for k, v in values.items() if v is not None},
                                                 random_state=int(result.spec.seed), signature_score=score,
                                                 training_design=designs[dkey])
        except Exception as exc:  # noqa: BLE001
            state.show_error("The patient estimate", exc)
            return
        st.session_state[KEY] = (name, est)
    held = st.session_state.get(KEY)
    if held is None or held[0] != name:
        return
    est = held[1]
    state.table(estimate_frame(est))
    for f in est.checks.flags:
        st.warning(f.message)
    for note in est.notes:
        st.caption(note)
    if not est.checks.out_of_range:
        st.caption("All values lie within the training data.")
    st.info(f"**Caution.** {est.caution}")
