"""Patient: one patient's survival estimate with its interval, their place on the nomogram, range checks."""

from __future__ import annotations

import copy
from dataclasses import replace

import numpy as np
import pandas as pd
import streamlit as st

from workbench.app import charts, nomo, state, tables
from workbench.app.messages import plain
from workbench.app.views.patient_file import file_record, show_outside
from workbench.models.registry import offered_models
from workbench.units import time_phrase


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


def _score_bounds(result, name: str) -> tuple[float, float] | None:
    scores = nomo.training_scores(result, name)
    if scores is None or len(scores) == 0:
        return None
    return float(np.percentile(scores, 1)), float(np.percentile(scores, 99))


def _form(result, ranges, base: dict, tag: str, ask_score: bool) -> tuple[dict, float | None] | None:
    """Clinical values of the patient (blank unless read from a file), and the signature score when typed."""
    score = None
    with st.form(f"patient_form_{tag}"):
        st.markdown("**Clinical values**")
        cols = st.columns(3)
        values = dict(base)
        for i, c in enumerate(ranges.clinical):
            label = c.label or c.column
            cur = base.get(c.column)
            with cols[i % 3]:
                if c.kind in ("categorical", "ordinal"):
                    opts = [str(x) for x in c.levels]
                    shown = str(cur) if cur is not None else None
                    if shown is not None and shown not in opts:
                        opts.append(shown)  # keep an unseen value visible so the range check can flag it
                    if c.missing == "impute":
                        opts = ["(missing)"] + opts
                    v = st.selectbox(label, opts, index=opts.index(shown) if shown in opts else None,
                                     placeholder="Choose...", key=f"pt_{tag}_{c.column}")
                    values[c.column] = None if v in (None, "(missing)") else v
                else:
                    unit = f" ({c.unit})" if c.unit else ""
                    helptext = (f"Training range {c.train_min:g} to {c.train_max:g}{unit}."
                                + (" Values below the detection limit can be written like <0.5."
                                   if c.detection_limit is not None else ""))
                    v = st.text_input(f"{label}{unit}", "" if cur is None else str(cur), key=f"pt_{tag}_{c.column}",
                                      help=helptext)
                    values[c.column] = v.strip() or None
        if ranges.harmonised and not ask_score:
            b = result.spec.data.batch or ranges.batch_column
            opts = list(ranges.batches)
            cur = base.get(b)
            cur = None if cur is None else str(cur)
            if cur is not None and cur not in opts:
                opts.append(cur)
            values[b] = st.selectbox("Scanner / batch", opts, index=opts.index(cur) if cur in opts else None,
                                     placeholder="Choose...", key=f"pt_{tag}_batch")
        if ask_score:
            bounds = _score_bounds(result, tag.split("_")[0])
            hint = "" if bounds is None else f" Training patients: 1st to 99th percentile {bounds[0]:.2f} to {bounds[1]:.2f}."
            text = st.text_input("Imaging signature score", "", key=f"pt_{tag}_score",
                                 help="The score of the imaging signature of this model for the patient, as "
                                      "computed by the model from the patient's features (for example from a "
                                      "report of an earlier estimate)." + hint)
            if text.strip():
                try:
                    score = float(text)
                except ValueError:
                    st.error(plain(f"The signature score must be a number; got {text.strip()!r}."))
        ok = st.form_submit_button("Estimate", type="primary")
    if not (ok or st.session_state.get(f"pt_done_{tag}")):
        return None
    return values, score


def _with_score(model, ranges, score: float):
    """The combined model and its ranges, with the signature score given instead of imaging features."""
    proxy = copy.copy(model)
    proxy.signature_score = lambda cohort: np.full(cohort.n, float(score))
    return proxy, replace(ranges, imaging_features=(), imaging_p01={}, imaging_p99={}, harmonised=False)


def alive_input(horizons) -> dict:
    """Bounds, step and format of the "known to be alive at" input, written like the study's horizons:
    whole numbers when every horizon is one (days always are), else as many decimals as they have."""
    hz = [float(h) for h in horizons]
    decimals = max(len(f"{h:g}".partition(".")[2]) for h in hz)
    if decimals == 0:
        return {"min_value": 0, "max_value": int(max(hz)), "value": 0, "step": max(1, int(min(hz)) // 2),
                "format": "%d"}
    return {"min_value": 0.0, "max_value": max(hz), "value": 0.0, "step": min(hz) / 2,
            "format": f"%.{decimals}f"}


def competing_note(spec) -> str | None:
    """Why a competing-risks study's survival estimate here is not the risk of each cause (None otherwise)."""
    d = spec.data
    if not d.competing_codes:
        return None
    return (f"This study has competing events ({', '.join(d.competing_codes)}). The survival above comes from the "
            "ordinary (cause-specific) model, which counts a competing event as censoring. It is not the chance "
            "of being free of every event, and one minus it overstates the risk of the event of interest "
            f"({', '.join(d.event_codes or ())}), the more so the more competing events there are. For the risk "
            "of each cause with the others competing, see the Competing risks section of the Results page.")


def _show(result, name: str, est, record: dict, score: float | None = None) -> None:
    u = est.time_unit
    st.subheader(f"Estimate from the {tables.label(name).lower()} model")
    cols = st.columns(len(est.horizons) + 1)
    pct = round(100 * est.conf_level)
    for col, hz in zip(cols, est.horizons, strict=False):
        ci = (f"{pct}% CI {100 * hz.lower:.1f}% to {100 * hz.upper:.1f}%"
              if np.isfinite(hz.lower) else "no interval for this model")
        col.metric(f"Survival at {time_phrase(hz.horizon, u)}", f"{100 * hz.survival:.1f}%", help=ci)
        col.caption(ci)
    if est.risk_group is not None:
        cols[-1].metric("Risk group", est.risk_group, help="Tertiles of the training patients' risk.")
    note = competing_note(result.spec)
    if note is not None:
        st.info(note)
    if est.alive_at is not None:
        st.markdown(f"**Alive at {time_phrase(est.alive_at, u)}**: the chance of being alive at each later horizon")
        rows = [(time_phrase(c.horizon, u), f"{100 * c.survival:.1f}%",
                 f"{100 * c.lower:.1f}% to {100 * c.upper:.1f}%" if np.isfinite(c.lower) else "no interval")
                for c in est.conditional]
        if rows:
            state.table(pd.DataFrame(rows, columns=["Horizon", "Chance, given alive now", f"{pct}% CI"]))
            st.caption("Conditional survival: the predicted survival to each horizon divided by that to the visit, "
                       "from the same model; the interval is of the same kind as above.")
        else:
            st.caption("No horizon of the study lies after this time.")
    ch = est.checks
    if not show_outside(ch):
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
        _on_nomogram(result, name, record, score)


def _on_nomogram(result, name: str, record: dict, score: float | None = None) -> None:
    draw = state.load_module("workbench.figures.nomogram")
    if draw is None:
        state.not_available("The nomogram drawing")
        return
    st.subheader("On the nomogram")
    try:
        hz = tuple(float(h) for h in result.spec.horizons)
        scales = nomo.scales_for(state.result_job().key, name, hz, result)
        raw = nomo.nomogram_values(result, name, record, score)
        points = state.load_module("workbench.figures.nomogram_points").points_for_patient(scales, raw)
        fig = draw.plot_nomogram([scales], patient=raw, titles=[tables.label(name)], width="single")
    except Exception as exc:  # noqa: BLE001
        state.show_error("Placing the patient on the nomogram", exc)
        return
    left, right = st.columns([3, 2])
    left.image(nomo.screen_png(fig), width="stretch")
    with right:
        rows = [(scales.term(k).label or k, f"{v:.1f}") for k, v in points.points.items()]
        layout = state.load_module("workbench.figures.nomogram_layout")
        rows.append((layout.SUM_AXIS, f"{points.total:.1f}"))
        import pandas as pd

        st.dataframe(pd.DataFrame(rows, columns=["Axis", layout.SCORE_AXIS]), hide_index=True, width="stretch")
        st.caption("Survival read off the nomogram: " + ", ".join(
            f"{100 * s:.1f}% at {time_phrase(h, result.validation.time_unit)}" for h, s in points.survival.items()))


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
    state.show_provenance("The estimates")
    names = list(offered_models(result.models))  # comparison models (clinical + volume) are not for patients
    default = names.index("combined") if "combined" in names else 0
    a, b = st.columns([1, 2])
    name = a.selectbox("Model", names, index=default, format_func=tables.label, key="patient_model")
    try:
        ranges = _ranges(state.result_job().key, name, result)
    except Exception as exc:  # noqa: BLE001
        state.show_error("Reading the model's training ranges", exc)
        return
    model = result.models[name]
    imaging = bool(ranges.imaging_features) or hasattr(model, "signature_score")
    sources = {"type": "Type the clinical values", "file": "Read patients from a file"}
    if hasattr(model, "signature_score"):
        sources["type"] = "Type the clinical values and the signature score"
    how = b.radio("The patient's values", list(sources), format_func=sources.get, horizontal=True,
                  key="patient_source",
                  help="A new patient starts empty: no value is taken from another patient. Imaging features "
                       "(hundreds of numbers) come from a file; or type the signature score itself.")
    if how == "file" or (imaging and not hasattr(model, "signature_score")):
        base = file_record(result, ranges, name)
        if base is None:
            st.info("Upload a file with the patient's values (the template above has the columns).")
            return
        tag = f"{name}_file_{st.session_state.get('patient_row', 0)}"
        ask_score = False
    else:
        base, tag, ask_score = {}, f"{name}_typed", hasattr(model, "signature_score")
    got = _form(result, ranges, base, tag, ask_score)
    if got is None:
        st.info("Check the values and press Estimate.")
        return
    values, score = got
    st.session_state[f"pt_done_{tag}"] = True
    use_model, use_ranges = model, ranges
    if ask_score:
        if score is None:
            st.info("Type the imaging signature score, or read the patient's imaging values from a file.")
            return
        use_model, use_ranges = _with_score(model, ranges, score)
    known = {c.column for c in use_ranges.clinical} | set(use_ranges.imaging_features)
    if use_ranges.harmonised:
        known.add(result.spec.data.batch or use_ranges.batch_column)
    record = {k: v for k, v in values.items() if k in known}
    estimate = state.load_module("workbench.estimate")
    hz = [float(h) for h in result.spec.horizons]
    u = result.validation.time_unit
    alive = st.number_input(
        f"Known to be alive at ({u}; optional)", **alive_input(hz), key=f"pt_alive_{tag}",
        help="At a follow-up visit: the chance of reaching each later horizon given that the patient is alive "
             "now (conditional survival). 0 leaves it out.")
    try:
        est = estimate.estimate_patient(use_model, record, result.spec.horizons, training_ranges=use_ranges,
                                        alive_at=float(alive) if 0 < alive < max(hz) else None)
    except Exception as exc:  # noqa: BLE001
        state.show_error("The estimate cannot be made", exc)
        return
    _show(result, name, est, {**values}, score)


if __name__ == "__main__":
    render()
