"""Results: run the study, then discrimination, calibration, overall accuracy and the comparison with the baseline."""

from __future__ import annotations

import os

import numpy as np
import streamlit as st

from workbench.app import charts, exports, progress, roles, state, tables
from workbench.app.light_tables import ShownTables
from workbench.app.messages import plain
from workbench.units import time_phrase
from workbench.validation.compare import LR_CAUTION

METHODS = {"bootstrap": "bootstrap validation", "cv": "repeated cross-validation",
           "by_centre": "leave-one-centre-out validation", "external": "external validation"}


def comparisons(result) -> list:
    """Every model against the study's baseline, from the result (or the library's comparison)."""
    comp = getattr(result, "comparisons", None) or getattr(result, "comparison", None)
    if isinstance(comp, dict):
        return [c for c in comp.values() if c is not None]
    if comp is not None:
        return [comp]
    from workbench.validation.compare import compare_models

    base = result.spec.models.baseline
    v = result.validation
    return [compare_models(v, m, base) for m in v.models if m != base]


def _run_controls(spec) -> None:
    ss = st.session_state
    a, b, c = st.columns([1, 1, 2])
    # kept under keys of their own: a widget's key is forgotten when another view is shown
    quick = min(state.DEMO_REPLICATES, spec.validation.replicates)  # never more than the study asks for
    reps = a.number_input("Bootstrap replicates for this run", 1, 5000,
                          int(ss.get("wb_run_replicates", quick)), key="results_replicates",
                          help="A quick look uses few replicates; the study file keeps its own number.")
    workers = b.number_input("Parallel workers", 1, 64, int(ss.get("wb_run_workers", min(2, os.cpu_count() or 1))),
                             key="results_workers",
                             help="Replicates computed at the same time; at most the number of processor cores.")
    ss["wb_run_replicates"], ss["wb_run_workers"] = int(reps), int(workers)
    c.caption(
        f"Quick mode: {state.DEMO_REPLICATES} bootstrap replicates by default, so that a run in the browser "
        f"finishes in about a minute. The full analysis uses the {spec.validation.replicates} replicates set on "
        "the Design page: set that number here, or run the study file from the command line. Intervals from few "
        "replicates are rough, and below 10 replicates none is shown (the two-stage interval's outer samples "
        "are then skipped, which makes the run several times quicker)."
        + (f" A quick run also tests the added value of imaging with only {state.QUICK_PERMUTATIONS} permutations "
           f"(instead of {spec.added_value.permutations}), so its p-value cannot go below 0.05."
           if state.quick_permutations(spec, int(reps)) is not None else "")
    )
    job = state.current_job()
    busy = job is not None and job.running
    if st.button("Run the study", type="primary", disabled=busy, key="results_run"):
        state.start_run(spec, int(reps), int(workers))
        st.rerun()


def _decision_figure(dc, model: str, baseline: str, outcome: str = "the event"):
    from workbench.figures.decision import EVERYONE, NO_ONE

    x = np.asarray(dc.thresholds, float)
    fig = charts.line_figure(
        x,
        {tables.label(model): dc.model_validated, tables.label(baseline): dc.baseline_validated,
         EVERYONE: dc.treat_all, NO_ONE: dc.treat_none},
        xlabel=f"Threshold probability of {outcome} by the horizon", ylabel="Net benefit (validated)",
        hline=0.0,
    )
    # Treat-all falls far below zero at high thresholds; keep the range where decisions differ.
    top = float(np.nanmax([np.nanmax(dc.model_validated), np.nanmax(dc.baseline_validated), np.nanmax(dc.treat_all)]))
    ax = fig.axes[0]
    ax.set_ylim(-0.15 * top, 1.1 * top)
    useful = x[(np.asarray(dc.model_validated) > 0) | (np.asarray(dc.baseline_validated) > 0)]
    ax.set_xlim(0, float(min(1.0, (useful.max() if useful.size else 1.0) + 0.05)))
    return fig


FIGURE_TITLES = {
    "km_risk_groups": "Kaplan-Meier curves by risk group",
    "conditional_survival": "Alive at the first horizon: survival after it, by risk group",
    "td_auc": "Time-dependent AUC",
    "calibration": "Calibration at each horizon",
    "decision_curve": "Decision curves",
    "difference_curves": "Combined minus clinical: AUC and net benefit",
    "site_calibration": "Calibration by centre and scanner (external)",
    "selection_frequency": "Signature: selection frequency",
    "coefficient_path": "Signature: coefficient path",
    "harmonisation_checks": "Scanner effects before and after ComBat",
}


def _figure_title(name: str) -> str:
    if name in FIGURE_TITLES:
        return FIGURE_TITLES[name]
    for prefix, text in (("hazard_ratios_", "Hazard ratios"), ("ph_", "Proportional hazards")):
        if name.startswith(prefix):
            return f"{text}: {tables.label(name[len(prefix):])}"
    return name.replace("_", " ").capitalize()


@st.cache_data(show_spinner=False, max_entries=32)
def _decision_png(run_key: tuple, model: str, horizon: float, outcome: str, _dc, baseline: str) -> bytes:
    return charts.figure_bytes(_decision_figure(_dc, model, baseline, outcome))


@st.fragment
def _figures(result, key) -> None:
    """The run's figures, one at a time. A fragment: choosing another figure reruns this part of the
    page alone, so the browser redraws the picture and its buttons instead of the whole view."""
    spec = result.spec
    st.subheader("Figures")
    # drawn in the app's figure worker as soon as the run finished (workbench.app.exports)
    ex = exports.of_job(state.result_job(), result)
    try:
        if ex.ready("figures"):
            names = ex.names()
        else:
            with st.spinner("Drawing the figures of the run..."):
                names = ex.names()
    except Exception as exc:  # noqa: BLE001
        state.show_error("Drawing the figures", exc)
        return
    names = [n for n in names if n != "nomogram"]  # the Nomogram page has it
    if not names:
        state.not_available("The figures of a run")
        return
    pick = st.selectbox("Figure", names, format_func=_figure_title, key="results_figure")
    left, right = st.columns([3, 1])
    try:
        left.image(ex.screen(pick), width="stretch")
    except Exception as exc:  # noqa: BLE001
        state.show_error("Drawing the figure", exc)
    with right:
        for fmt, mime in (("png", "image/png"), ("svg", "image/svg+xml"), ("pdf", "application/pdf")):
            # written only when the button is pressed (the view itself stays quick to redraw)
            data = lambda n=pick, x=fmt: ex.figure_file(n, x)  # noqa: E731
            st.download_button(f"Download {fmt.upper()}", data, file_name=state.study_filename(spec, f".{fmt}", pick),
                               mime=mime, key=f"results_fig_{fmt}", on_click="ignore")
        if result.external_prepared is not None:
            st.caption("Curves, calibration and decision curves are drawn on the external cohort.")
        else:
            st.caption("Curves, calibration and decision curves are drawn on the development cohort (apparent).")


def _comparison(comp, u: str, outcome: str = "the event", key: tuple = (), added_value=None,
                details: bool = False, shown: ShownTables | None = None) -> None:
    shown = shown or ShownTables()
    st.markdown(f"**{tables.label(comp.model)} minus {tables.label(comp.baseline)}** (validated differences; "
                f"{comp.n_paired} paired replicates)")
    shown.show(tables.difference_table(comp, time_unit=u, headline=not details),
               f"{tables.label(comp.model)} minus {tables.label(comp.baseline)}")
    if added_value is not None:
        st.write(f"Added value of imaging given the clinical model (permutation test): cross-validated "
                 f"log-likelihood gain {added_value.observed:.1f}, p = {added_value.p_value:.3g} "
                 f"(Monte Carlo SE {added_value.mc_se:.3f}, {added_value.permutations} permutations).")
        st.caption("Imaging residuals given the clinical terms (and scanner) permuted; the whole signature "
                   "refitted in every fold of every permutation.")
    lr = comp.lr_test
    if lr.nested and np.isfinite(lr.statistic) and np.isfinite(lr.p_value) and lr.df > 0:
        from workbench.figures.wording import chi_squared_text

        st.write(f"Likelihood-ratio test (prespecified terms): {chi_squared_text(lr.statistic, lr.df, lr.p_value)}.")
        st.caption(lr.note)
    elif lr.nested and np.isfinite(lr.statistic):
        from workbench.figures.wording import chi_squared_text

        st.write("Apparent likelihood-ratio statistic (descriptive, not a test): "
                 f"{chi_squared_text(lr.statistic, lr.df, float('nan')).split(', ')[0]}.")
        st.caption(LR_CAUTION)
    elif lr.note:
        st.caption(f"Likelihood-ratio test: {lr.note}")
    if details:
        st.markdown("**Reclassification (NRI, IDI)**")
        shown.show(tables.reclassification_table(comp, time_unit=u), f"Reclassification {tables.label(comp.model)}")
        if comp.reclassification:
            st.caption(comp.reclassification[0].nri_caution)
            st.caption(comp.reclassification[0].idi_caution)
    if comp.decision:
        hz = [f"{d.horizon:g}" for d in comp.decision]
        left, right = st.columns([3, 2])
        pick = right.selectbox("Decision curve at horizon", hz, key=f"results_dc_{comp.model}",
                               format_func=lambda h: time_phrase(float(h), u))
        dc = comp.decision[hz.index(pick)]
        left.image(_decision_png(key, comp.model, float(dc.horizon), outcome, dc, comp.baseline),
                   caption=f"Decision curves at {time_phrase(float(pick), u)}, corrected like the other measures")
        right.caption("Net benefit of acting on the model's predicted risk at each threshold, against "
                      "treating everyone or no one.")
    for note in comp.notes:
        st.caption(note)


def _show(result, job) -> None:
    v = result.validation
    u = v.time_unit
    spec = result.spec
    reps = v.n_replicates
    secs = job.finished - job.started
    took = f"{secs:.0f} s" if secs < 120 else f"{secs / 60:.1f} min"
    if v.method == "none":
        how = "no internal validation: the values are apparent performance only, which is optimistic"
    else:
        how = f"{METHODS.get(v.method, v.method)} with " + ", ".join(
            f"{r} replicate{'' if r == 1 else 's'} for the {tables.label(m)} model" for m, r in reps.items())
    st.success(f"Finished in {took}: {v.n} patients, {v.n_events} events; {how}.")
    state.show_provenance()
    if result.warnings:
        with st.expander(f"Statistical warnings raised during the run ({len(result.warnings)})"):
            for cat, msg in result.warnings:
                st.write(f"**{cat}**: {plain(state.friendly(msg))}")

    details = st.toggle("Show every measure: apparent values, optimism, all differences and reclassification",
                        key="results_details",
                        help="Off, the page shows the validated estimates and the headline differences only.")
    shown, download_slot = ShownTables(), st.empty()  # the tables are static; one download for all of them
    from workbench.models.labels import model_labels

    run_labels = model_labels(result.models)  # an empty signature: "(equal to the clinical model)"
    pct = round(100 * v.conf_level)
    fewest = min(reps.values()) if reps else 0
    if fewest < tables.MIN_CI_REPLICATES:
        st.info(f"Intervals are left out: they need at least {tables.MIN_CI_REPLICATES} replicates, and this run "
                f"has {fewest}. Increase the replicates above for intervals.")
    for title, families, note in (
        ("Discrimination", tables.DISCRIMINATION, "Higher is better; 0.5 is chance."),
        ("Calibration", tables.CALIBRATION, "Slope 1 and observed/expected 1 are ideal; ICI, E50 and E90 are "
         "absolute differences between predicted and observed risk (0 is ideal)."),
        ("Overall accuracy (Brier score)", tables.OVERALL, "Lower Brier score is better; IPA compares with the "
         "no-information model (higher is better)."),
    ):
        st.subheader(title)
        ests = sorted(set(getattr(v, "estimator", {}).values()))
        how = {"optimism": "corrected for optimism", "oob": "out-of-bootstrap", "632plus": ".632+ bootstrap"}
        how_text = (", ".join(how.get(e, e) for e in ests) + " (bootstrap)") if ests else "held out"
        st.caption(f"Validated estimate ({pct}% interval): {how_text}; cross-validation and centres: held "
                   f"out. {note}")
        shown.show(tables.wide_metric_table(v, families, time_unit=u, labels=run_labels), title)
        if details:
            st.markdown(f"**{title}: apparent values and optimism**")
            shown.show(tables.metric_table(v, families, time_unit=u, labels=run_labels),
                       f"{title} apparent and optimism")

    st.subheader(f"Against the baseline: {tables.label(spec.models.baseline)}")
    try:
        comps = comparisons(result)
    except Exception as exc:  # noqa: BLE001
        state.show_error("Comparing the models", exc)
        comps = []
    if comps:
        names = [c.model for c in comps]
        pick = st.segmented_control(
            "Comparison", names, default=names[0], key="results_comparison", label_visibility="collapsed",
            format_func=lambda m: f"{tables.label(m)} minus {tables.label(spec.models.baseline)}") or names[0]
        comp = comps[names.index(pick)] if pick in names else comps[0]
        _comparison(comp, u, roles.outcome_name(spec.data.event, spec.data.event_codes), job.key,
                    getattr(result, "added_value", {}).get(comp.model), details, shown)
    _figures(result, job.key)
    if details:
        _conditional(result, job.key, u, shown)

    if result.external is not None:
        st.subheader("External validation")
        st.caption("The models fitted on all training patients, applied unchanged to the external cohort "
                   f"({result.external.n} patients, {result.external.n_events} events).")
        shown.show(tables.wide_metric_table(result.external, tables.DISCRIMINATION + tables.CALIBRATION
                                            + tables.OVERALL, time_unit=u, labels=run_labels), "External validation")
        ext_comps = getattr(result, "external_comparisons", None) or {}
        chosen = ext_comps.get(st.session_state.get("results_comparison")) or next(iter(ext_comps.values()), None)
        if chosen is not None:
            st.markdown(f"**External: {tables.label(chosen.model)} minus {tables.label(chosen.baseline)}** "
                        "(the comparison chosen above)")
            shown.show(tables.difference_table(chosen, time_unit=u, headline=not details), "External difference")
        if details:
            _by_group(getattr(result.external, "groups", None), "External cohort", shown)
    if details:
        _by_group(getattr(result.validation, "groups", None), "Leave-one-centre-out", shown)
    elif getattr(result.validation, "groups", None) or getattr(result.external, "groups", None):
        st.caption("Performance by centre and scanner: switch on 'Show every measure' at the top.")
    shown.download(download_slot, file_name=state.study_filename(spec, ".zip", "results_tables"),
                   key="results_tables_zip")


@st.cache_data(show_spinner=False, max_entries=4)
def _conditional_frame(run_key: tuple, _result, unit: str):
    """Observed conditional survival by risk group of the lead model (as results.json has it)."""
    import pandas as pd

    from workbench.report.result_blocks import conditional_rows
    from workbench.stats.riskgroups import learn_cutpoints

    lead = "combined" if "combined" in _result.models else next(iter(_result.models))
    m = _result.models[lead]
    cuts = learn_cutpoints(m.predict_risk(_result.cohort), _result.spec.models.risk_groups)
    ev = _result.external_prepared.cohort if _result.external_prepared is not None else _result.cohort
    rows = conditional_rows(m, ev, cuts, _result.spec.horizons)
    df = pd.DataFrame([{"Risk group": r["group"], "Alive at": time_phrase(r["alive_at"], unit),
                        "Chance of being alive at": time_phrase(r["horizon"], unit),
                        "Estimate (95% CI)": (r.get("note") or "-") if r["survival"] is None else
                        tables.num(_nan(r["survival"]), 2) + (
                            f" ({tables.interval(r['ci_lower'], r['ci_upper'], 2)})"
                            if r["ci_lower"] is not None else ""),
                        "At risk then": r["at_risk"]} for r in rows])
    return lead, _result.external_prepared is not None, df


def _nan(x) -> float:
    return float("nan") if x is None else float(x)


def _conditional(result, key, u: str, shown: ShownTables) -> None:
    try:
        lead, external, df = _conditional_frame(key, result, u)
    except Exception as exc:  # noqa: BLE001
        state.show_error("Conditional survival by risk group", exc)
        return
    if df.empty:
        return
    st.subheader("Alive at a follow-up visit, by risk group")
    st.caption(f"Kaplan-Meier within the {tables.label(lead)} risk groups among the patients still followed at the "
               f"visit ({'external' if external else 'development'} cohort; on the development cohort the groups' "
               "separation is apparent): the chance of being alive at each later horizon, with 95% limits.")
    shown.show(df, "Alive at a follow-up visit by risk group")


def _by_group(groups, title: str, shown: ShownTables) -> None:
    """Per-centre / per-scanner performance with its random-effects pooling (report/heterogeneity.py)."""
    if not groups:
        return
    from workbench.report.heterogeneity import group_table

    df = group_table(groups)
    keep = df["metric"].str.split("@").str[0].isin(["harrell_c", "oe_ratio", "cal_slope"])
    st.markdown(f"**{title}: performance by centre and scanner**")
    st.caption("Each level weighted by its own censoring distribution; pooled rows: random-effects "
               "meta-analysis with the 95% prediction interval for a new site (pi_lower, pi_upper).")
    shown.show(df[keep].round(3), f"{title} by centre and scanner")


def render() -> None:
    st.title("Results")
    spec = state.current_study()
    if spec is None:
        st.info("Set up the study on the Design page first.")
        return
    if not state.module_available("workbench.workflow"):
        state.not_available("Running a study")
        return
    _run_controls(spec)
    _main(spec)
    from workbench.app.views import competing

    competing.render_section(spec)


def _main(spec) -> None:
    """The study run's state and, once one has finished, its results."""
    job = state.current_job()
    if job is None:
        st.info("Press Run the study to fit the models and validate them.")
        return
    if job.running:
        progress.watch(job)
        return
    last = state.result_job()
    if job.stopping:
        st.caption("The cancelled run is finishing the replicates under way in the background (the "
                   "computer may be slower meanwhile); nothing from it will be kept.")
    if job.cancelled:
        st.warning("The run was cancelled. " + ("The results below are those of the last complete run."
                                                 if last is not None else "Press Run the study to start again."))
    elif job.error is not None:
        state.show_error("The run stopped", job.error)
        if last is not None:
            st.caption("The results below are those of the last complete run.")
    if last is None:
        return
    try:
        _show(last.result, last)
    except Exception as exc:  # noqa: BLE001
        state.show_error("Showing the results", exc)


if __name__ == "__main__":
    render()
