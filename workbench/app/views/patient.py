"""Patient: one patient's survival estimate with its interval, their place on the nomogram, range checks."""

from __future__ import annotations

import numpy as np
import streamlit as st

from workbench.app import charts, nomo, state, tables
from workbench.cohort.summary import CAUTION
from workbench.errors import WorkbenchError


@st.cache_resource(show_spinner=False, max_entries=4)
def _ranges(run_key: tuple, name: str, _result):
    """Training ranges of one model (cut-points of its risk groups, imaging percentiles)."""
    bundle = state.load_module("workbench.report.bundle")
    estimate = state.load_module("workbench.estimate")
    training = bundle.summarise_training(_result.cohort, _result.models, _result.spec.horizons,
                                         groups=_result.spec.models.risk_groups)
    return estimate.ranges_from_model(_result.models[name], training, name=name,
                                      batch_column=_result.spec.data.batch or "batch",
                                      time_unit=_result.validation.time_unit)


def _cohort_record(result, index: int) -> dict:
    """Every value of one cohort patient: clinical fields, imaging features and the scanner."""
    c = result.cohort
    rec = {str(k): (None if v is None or (isinstance(v, float) and np.isnan(v)) else v)
           for k, v in c.clinical.iloc[index].items()}
    rec.update({str(k): float(v) for k, v in c.features.iloc[index].items()})
    b = result.spec.data.batch
    if b and c.batch is not None:
        rec[b] = str(c.batch[index])
    return rec


def _uploaded_record():
    up = st.file_uploader("Or read one patient from a file (one-row CSV or Excel with the same column names)",
                          type=["csv", "tsv", "txt", "xlsx", "xls"], key="patient_file")
    if up is None:
        return None
    estimate = state.load_module("workbench.estimate")
    try:
        return estimate.read_patient_file(state.save_upload(up, "patient"))
    except WorkbenchError as exc:
        state.show_error("Reading the patient file", exc)
        return None


def _form(result, ranges, base: dict, tag: str) -> dict | None:
    """Editable clinical values of the patient (imaging values come from the chosen record)."""
    with st.form(f"patient_form_{tag}"):
        st.markdown("**Clinical values**")
        cols = st.columns(3)
        values = dict(base)
        for i, c in enumerate(ranges.clinical):
            label = c.label or c.column
            cur = base.get(c.column)
            with cols[i % 3]:
                if c.kind in ("categorical", "ordinal"):
                    opts = list(c.levels)
                    shown = str(cur) if cur is not None else None
                    if shown is not None and shown not in opts:
                        opts.append(shown)  # keep an unseen value visible so the range check can flag it
                    if c.missing == "impute":
                        opts = ["(missing)"] + opts
                    idx = opts.index(shown) if shown in opts else 0
                    v = st.selectbox(label, opts, index=idx, key=f"pt_{tag}_{c.column}")
                    values[c.column] = None if v == "(missing)" else v
                else:
                    unit = f" ({c.unit})" if c.unit else ""
                    helptext = (f"Training range {c.train_min:g} to {c.train_max:g}{unit}."
                                + (" Values below the detection limit can be written like <0.5."
                                   if c.detection_limit is not None else ""))
                    v = st.text_input(f"{label}{unit}", "" if cur is None else str(cur), key=f"pt_{tag}_{c.column}",
                                      help=helptext)
                    values[c.column] = v.strip() or None
        if ranges.harmonised:
            b = result.spec.data.batch or ranges.batch_column
            opts = list(ranges.batches)
            cur = str(base.get(b, opts[0] if opts else ""))
            if cur not in opts:
                opts.append(cur)
            values[b] = st.selectbox("Scanner / batch", opts, index=opts.index(cur), key=f"pt_{tag}_batch")
        n_img = len(ranges.imaging_features)
        if n_img:
            st.caption(f"The {n_img} imaging feature values are those of the record chosen above.")
        ok = st.form_submit_button("Estimate", type="primary")
    return values if ok or st.session_state.get(f"pt_done_{tag}") else None


def _show(result, name: str, est, record: dict) -> None:
    u = est.time_unit
    st.subheader(f"Estimate from the {tables.label(name).lower()} model")
    cols = st.columns(len(est.horizons) + 1)
    pct = round(100 * est.conf_level)
    for col, hz in zip(cols, est.horizons, strict=False):
        ci = (f"{pct}% CI {100 * hz.lower:.1f}% to {100 * hz.upper:.1f}%"
              if np.isfinite(hz.lower) else "no interval for this model")
        col.metric(f"Survival at {hz.horizon:g} {u}", f"{100 * hz.survival:.1f}%", help=ci)
        col.caption(ci)
    if est.risk_group is not None:
        cols[-1].metric("Risk group", est.risk_group, help="Tertiles of the training patients' risk.")
    st.warning(f"**Caution.** {est.caution or CAUTION}")
    ch = est.checks
    if ch.out_of_range:
        st.markdown("**Values outside the training data** (the model extrapolates there)")
        for f in ch.flags:
            st.warning(f.message)
        if ch.imaging_outside:
            st.warning(f"{ch.imaging_outside} of {ch.imaging_checked} imaging features lie beyond the training "
                       "1st-99th percentiles; furthest: " + "; ".join(f.message for f in ch.imaging_worst))
    else:
        st.success("All values lie within the range of the training patients.")
    for t in ch.imputed:
        st.caption(f"Imputed: {t}")
    for t in est.notes:
        st.caption(t)
    left, right = st.columns([3, 2])
    left.image(charts.figure_bytes(charts.survival_curve_figure(
        est.times, est.survival, est.lower, est.upper, time_unit=u, horizons=[h.horizon for h in est.horizons])),
        caption="Predicted survival with its pointwise confidence band")
    with right:
        if np.isfinite(est.linear_predictor):
            st.write(f"Linear predictor {est.linear_predictor:.3f} (0 = the average training patient).")
        st.caption({"delta": "Delta-method interval from the Cox model.",
                    "bootstrap": f"Bootstrap percentile interval from {est.n_bootstrap} refits.",
                    }.get(est.interval_method, "This model gives no interval."))
    if name in nomo.nomogram_models(result):
        _on_nomogram(result, name, record)


def _on_nomogram(result, name: str, record: dict) -> None:
    draw = state.load_module("workbench.figures.nomogram")
    if draw is None:
        state.not_available("The nomogram drawing")
        return
    st.subheader("On the nomogram")
    try:
        hz = tuple(float(h) for h in result.spec.horizons)
        scales = nomo.scales_for(state.current_job().key, name, hz, result)
        raw = nomo.nomogram_values(result, name, record)
        points = state.load_module("workbench.figures.nomogram_points").points_for_patient(scales, raw)
        fig = draw.plot_nomogram([scales], patient=raw, titles=[tables.label(name)], width="single")
    except Exception as exc:  # noqa: BLE001
        state.show_error("Placing the patient on the nomogram", exc)
        return
    left, right = st.columns([3, 2])
    left.image(nomo.save_figure(fig, "png"))
    with right:
        rows = [(scales.term(k).label or k, f"{v:.1f}") for k, v in points.points.items()]
        rows.append(("Total points", f"{points.total:.1f}"))
        import pandas as pd

        st.dataframe(pd.DataFrame(rows, columns=["Axis", "Points"]), hide_index=True, width="stretch")
        st.caption("Survival read off the nomogram: " + ", ".join(
            f"{100 * s:.1f}% at {h:g} {result.validation.time_unit}" for h, s in points.survival.items()))


def render() -> None:
    st.title("Patient")
    st.write("Enter one patient's values to see their predicted survival, how sure the model is, "
             "and whether they resemble the patients the model learned from.")
    if not state.module_available("workbench.workflow") or not state.module_available("workbench.estimate"):
        state.not_available("The individual estimate")
        return
    result = state.current_result()
    if result is None:
        st.info("Run the study on the Results page first; the estimate uses the fitted models.")
        return
    names = list(result.models)
    default = names.index("combined") if "combined" in names else 0
    a, b = st.columns([1, 2])
    name = a.selectbox("Model", names, index=default, format_func=tables.label, key="patient_model")
    ids = list(result.cohort.ids)
    start = b.selectbox("Start from the values of", ids, index=0, key="patient_start",
                        help="A patient of the analysis cohort; edit the clinical values below.")
    uploaded = _uploaded_record()
    try:
        ranges = _ranges(state.current_job().key, name, result)
    except Exception as exc:  # noqa: BLE001
        state.show_error("Reading the model's training ranges", exc)
        return
    if uploaded is not None:
        base, tag = uploaded, "file"
    else:
        base, tag = _cohort_record(result, ids.index(start)), f"id_{start}"
    values = _form(result, ranges, base, f"{name}_{tag}")
    if values is None:
        st.info("Check the values and press Estimate.")
        return
    st.session_state[f"pt_done_{name}_{tag}"] = True
    known = {c.column for c in ranges.clinical} | set(ranges.imaging_features)
    if ranges.harmonised:
        known.add(result.spec.data.batch or ranges.batch_column)
    record = {k: v for k, v in values.items() if k in known}
    estimate = state.load_module("workbench.estimate")
    try:
        est = estimate.estimate_patient(result.models[name], record, result.spec.horizons, training_ranges=ranges)
    except Exception as exc:  # noqa: BLE001
        state.show_error("The estimate cannot be made", exc)
        return
    _show(result, name, est, {**values})


if __name__ == "__main__":
    render()
