"""The report's figures: drawn from the fitted models with :mod:`workbench.figures`, embedded as SVG.

Split from :mod:`workbench.report.html`, which arranges them in the report; a figure that
cannot be drawn leaves a note in its place, never a broken report.
"""

from __future__ import annotations

import base64
import io
import warnings

import matplotlib
import numpy as np

from workbench.errors import WorkbenchError, WorkbenchWarning
from workbench.metrics.decision import DecisionCurveResult
from workbench.models.registry import offered_models
from workbench.report.formatting import _finite, _label, fmt_num, fmt_p, metric_label  # noqa: F401
from workbench.report.methods import (
    estimate_label,
    unseen_batches,
)
from workbench.units import time_phrase, unit_after_list

FIGURE_SLOTS = ("data", "harmonisation", "calibration", "decision", "difference", "external", "main", "appendix")
"""Places in the report that hold figures."""


def _settle_layout(fig) -> None:
    """Run the figure's layout engine once, measuring text as the SVG printer will.

    ``savefig`` on a figure with a layout engine draws it twice: a full draw with the output
    switched off (only to run the layout), then the real one. Running the engine directly with
    the SVG canvas (text measured as paths, 72 dpi, as in that first draw) places every axes at
    the same spot without drawing every artist a second time."""
    from matplotlib.backends.backend_svg import FigureCanvasSVG

    canvas, dpi = fig.canvas, fig.dpi
    FigureCanvasSVG(fig)  # attaches itself to the figure for the measurement
    try:
        fig.get_layout_engine().execute(fig)
    finally:
        fig.set_canvas(canvas)
        fig.dpi = dpi


def _no_offset_text(axis) -> bool:
    """True when the axis cannot show an offset text ("1e-3", "+1e4") whatever its final length.

    Tick labels not from a scalar formatter have none. A scalar formatter with automatic offset and
    tick spacing has none when 0 lies in the view (0 is then a tick, and matplotlib adds an offset only
    to ticks of one sign) and the largest value shown is between 0.01 and 10^5 (the ticks stay within
    matplotlib's default power limits, 10^-5 and 10^6)."""
    from matplotlib.ticker import MaxNLocator, ScalarFormatter

    fmt = axis.get_major_formatter()
    if not isinstance(fmt, ScalarFormatter):
        return True
    lo, hi = sorted(axis.get_view_interval())
    return (isinstance(axis.get_major_locator(), MaxNLocator) and fmt.get_useOffset() and not fmt.offset
            and tuple(getattr(fmt, "_powerlimits", (-5, 6))) == (-5, 6)
            and lo <= 0.0 <= hi and 1e-2 <= max(-lo, hi) < 1e5)


def _fix_title_heights(fig) -> None:
    """Keep each axes title at the top of its axes without matplotlib searching for a clash at every draw.

    Left to itself, matplotlib re-measures every tick label of the y axis of an axes (and of its inset and
    aligned axes) each time the title is placed, only to check that the axis's offset text ("1e-3") does
    not reach the title, and lifts the title above ticks or a label on top. Where no y axis can show an
    offset text (their tick labels do not come from a scalar formatter) and nothing sits on top, the title
    stays at the top of the axes (axes fraction 1, plus its pad) anyway: it is put there directly."""

    for ax in fig.axes:
        titles = (ax.title, ax._left_title, ax._right_title)
        if not any(t.get_text() for t in titles) or getattr(ax, "_autotitlepos", None) is False:
            continue
        group = {ax, *ax.child_axes, *ax._twinned_axes.get_siblings(ax),
                 *ax.get_figure(root=False)._align_label_groups["title"].get_siblings(ax)}
        if any(not _no_offset_text(a.yaxis)
               or a.xaxis.get_ticks_position() in ("top", "unknown") or a.xaxis.get_label_position() == "top"
               for a in group):
            continue
        for t in titles:
            t.set_y(1.0)
        ax._autotitlepos = False


def _embed(fig) -> str:
    """A matplotlib Figure as an SVG data URI (text as paths, so no font is needed to show it)."""
    buf = io.BytesIO()
    with matplotlib.rc_context({"svg.hashsalt": "workbench-report", "svg.fonttype": "path"}):
        _fix_title_heights(fig)
        engine = fig.get_layout_engine()
        if engine is None or not fig.axes:  # nothing to lay out (a figure's draw skips the engine too)
            fig.savefig(buf, format="svg", metadata={"Date": None})
        else:
            _settle_layout(fig)
            fig.set_layout_engine(None)  # laid out above: save without drawing twice
            try:
                fig.savefig(buf, format="svg", metadata={"Date": None})
            finally:
                fig.set_layout_engine(engine)
    return "data:image/svg+xml;base64," + base64.b64encode(buf.getvalue()).decode("ascii")


def _figure(items: list, key: str, title: str, caption: str, draw, half: bool = False, compact: bool = False) -> None:
    """Draw one figure into ``items``; a figure that cannot be drawn leaves a note, not a broken report.

    ``compact`` figures print at most about half a page high, so two share a page."""
    item = {"id": f"fig-{key}", "title": title, "caption": caption, "src": "", "error": "", "half": half,
            "compact": compact}
    try:
        with warnings.catch_warnings():
            # the run already recorded its statistical warnings; redrawing must not repeat them
            warnings.simplefilter("ignore", WorkbenchWarning)
            item["src"] = _embed(draw())
    except (WorkbenchError, ValueError, KeyError, IndexError) as exc:
        item["error"] = f"This figure could not be drawn: {exc}"
    items.append(item)


def _calibration_fig(models, cohort, horizons, unit):
    from workbench.figures import plot_calibration_panels
    from workbench.metrics.calibration import calibration_at

    curves = {_label(k): m.predict_survival(cohort, horizons) for k, m in models.items()}
    cal = {name: [calibration_at(cohort.y, c, h) for h in horizons] for name, c in curves.items()}
    return plot_calibration_panels(cal, predicted=curves, time_unit=unit)


def _eval_horizons(horizons, cohort) -> tuple[float, ...]:
    return tuple(h for h in horizons if h < float(np.max(cohort.time[cohort.event])) if np.any(cohort.event))


def _km_fig(model, train, cohort, unit, title, k=3, min_at_risk=10, since=None):
    from workbench.figures import (
        conditional_km_by_group,
        km_by_group,
        plot_km_by_group,
        risk_groups,
    )

    groups = risk_groups(model.predict_risk(train).values, model.predict_risk(cohort).values, k)
    km = (km_by_group(cohort.y, groups, time_unit=unit) if since is None
          else conditional_km_by_group(cohort.y, groups, since, time_unit=unit))
    # on the development patients the groups come from a model fitted to them: described, not tested
    return plot_km_by_group(km, title=title, development=cohort is train, min_at_risk=min_at_risk, since=since)


def _external_row_censoring(result, cohort, models):
    from workbench.report.figureset import external_censoring

    risks = {_label(k): m.predict_risk(cohort) for k, m in models.items()}
    return external_censoring(result, cohort, risks)


def _auc_fig(models, weights_from, cohort, horizons, unit, title, row_censoring=None):
    """AUC over time; censoring weights from ``weights_from`` (the evaluated cohort itself when external)."""
    from workbench.figures import plot_td_auc, td_auc_by_model
    from workbench.report.figureset import td_auc_grid

    grid = td_auc_grid(horizons, cohort.time, cohort.event)  # the same times as the figure files
    risks = {_label(k): m.predict_risk(cohort) for k, m in models.items()}
    # the legend's mean AUC is the results table's: over the study horizons, weighted by events
    means = {k: r.mean_auc
             for k, r in td_auc_by_model(weights_from.y, cohort.y, risks, horizons, censoring=row_censoring).items()}
    window = "at " + ", ".join(f"{h:g}" for h in horizons) + (f" {unit_after_list(horizons, unit)}" if unit else "")
    return plot_td_auc(td_auc_by_model(weights_from.y, cohort.y, risks, grid, censoring=row_censoring),
                       time_unit=unit, horizons=horizons, title=title, mean_auc=means, mean_window=window)


def _decision_fig(d: dict, unit: str, j: int, external: bool = False):
    """Decision curves of every model at the j-th horizon, from the comparison blocks.

    Internal: the validated curves (apparent when the study ran no internal validation,
    method "none"). External: the curves of the unchanged models on the external patients."""
    arm = "apparent" if d["validation"]["method"] == "none" and not external else "validated"
    from workbench.figures import plot_decision_curve

    comps = list((d["external"]["comparison"] if external else d["comparison"]).values())
    surv = {h["horizon"]: h["survival"] for h in d["cohort"]["summary"]["horizons"]}
    first = comps[0]["decision_curves"][j]
    h, pt = first["horizon"], np.asarray(first["thresholds"], float)
    treat_all = np.asarray([np.nan if x is None else x for x in first["treat_all"]], float)
    # the event risk only sets the vertical scale; treat-all at the lowest threshold is close to it
    risk = float(np.nanmax(treat_all)) if external else 1.0 - surv.get(h, np.nan)

    def curve(values, name):
        v = np.asarray([np.nan if x is None else x for x in values], float)
        return DecisionCurveResult(h, pt, v, treat_all, np.zeros_like(pt), np.full_like(pt, np.nan), risk, name)

    res = {_label(comps[0]["baseline"]): curve(first[f"baseline_{arm}"], comps[0]["baseline"])}
    for c in comps:
        res[_label(c["model"])] = curve(c["decision_curves"][j][f"model_{arm}"], c["model"])
    where = "external cohort" if external else "development cohort"
    return plot_decision_curve(res, time_unit=unit, title=f"{time_phrase(h, unit)}, {where}")


def _data_and_appendix_figures(result, out: dict) -> None:
    """The patient flow (data section) and the baseline survival curves (appendix)."""
    from workbench.figures.baseline import plot_baseline_survival
    from workbench.figures.flow import plot_patient_flow
    from workbench.report.appendix import baseline_curves
    from workbench.report.flow import patient_flow

    ext = " and the external cohort" if result.external_prepared is not None else ""
    _figure(out["data"], "flow", "Patient flow", f"Patients of the development cohort{ext}: read, set aside "
            "with the reason (a patient missing several complete-case predictors counts under each), analysed.",
            lambda: plot_patient_flow(patient_flow(result), width="double"))
    if getattr(result, "harmonisation", None):
        from workbench.figures.harmonisation import plot_harmonisation_checks

        _figure(out["harmonisation"], "harmonisation", "Scanner effects before and after ComBat",
                "Open markers: before harmonisation; filled: after. Scanner effects should move to 0 and the "
                "classifier AUC towards 0.5 (dashed tick); the links with protected predictors should stay put.",
                lambda: plot_harmonisation_checks(result.harmonisation, width="double"), compact=True)
    curves = baseline_curves(result)
    if curves:
        unit = result.spec.data.time_unit
        _figure(out["appendix"], "baseline", "Baseline survival of each Cox model",
                "S0(t) for a patient at the training means of the design columns (x_mean), with a step at every "
                "training event time; dotted lines mark the prediction horizons.",
                lambda: plot_baseline_survival({_label(k): v for k, v in curves.items()}, horizons=result.spec.horizons,
                                               time_unit=unit, width="double"))


def _figures(result, d: dict) -> dict:
    from workbench.figures import (
        forest_table,
        nomogram_scales,
        plot_coefficient_path,
        plot_forest,
        plot_nomogram,
        plot_schoenfeld,
        plot_selection_frequency,
    )

    unit, horizons, train = result.spec.data.time_unit, tuple(result.spec.horizons), result.cohort
    models = result.models
    cox = {k: m for k, m in models.items() if hasattr(m, "fit_") and hasattr(m, "transformer_")}
    offered = offered_models(cox)  # comparison models (clinical + volume) get no nomogram
    lead = models.get("combined") or next(iter(models.values()))
    k_groups = getattr(result.spec.models, "risk_groups", 3)
    at_risk = result.spec.figures.min_at_risk
    out = {k: [] for k in FIGURE_SLOTS}
    _data_and_appendix_figures(result, out)
    _figure(out["calibration"], "calibration", "Calibration at each horizon (development cohort, apparent fits)",
            "Smoothed observed against predicted risk with 95% band, grouped points and the predicted risks "
            "below. Drawn from the fits on all patients, so optimistic; the corrected numbers are in the table.",
            lambda: _calibration_fig(models, train, horizons, unit))
    # the estimator the run used (optimism, out-of-bootstrap, .632+, cross-validation), not a fixed word
    how = estimate_label(d).split(" (")[0]
    ext_comps = (d.get("external") or {}).get("comparison") or {}
    for j, h in enumerate(horizons if d["comparison"] else ()):
        app = d["validation"]["method"] == "none"
        _figure(out["decision"], f"decision-{j}",
                f"Decision curves at {time_phrase(h, unit)} ({'apparent, not validated' if app else how.lower()})",
                "Net benefit against the threshold risk, " + ("measured on the development patients (optimistic)"
                if app else f"validated like the other metrics ({how.lower()})") + ", with the two reference "
                "strategies (everyone acted on, no one acted on).",
                lambda j=j: _decision_fig(d, unit, j), half=True)
        if ext_comps:
            _figure(out["decision"], f"decision-external-{j}", f"Decision curves at {time_phrase(h, unit)} (external cohort)",
                    "The same models applied unchanged to the external patients: nothing to correct, but "
                    "judged on patients the models never saw.",
                    lambda j=j: _decision_fig(d, unit, j, external=True), half=True)
    _difference_figures(out["difference"], result, unit)
    if result.external is not None:
        ext = result.external_prepared.cohort
        eh = _eval_horizons(horizons, ext)
        _figure(out["external"], "external-calibration", "Calibration on the external cohort",
                "Smoothed calibration of the unchanged models on the external patients.",
                lambda: _calibration_fig(models, ext, eh, unit))
        _site_figure(out["external"], result, d, unit)
        _figure(out["external"], "external-km", "Risk groups on the external cohort",
                f"Kaplan-Meier curves by {k_groups} quantile groups of the {_label(lead.name)} risk, cut-points "
                f"fixed on the development patients. Curves stop when fewer than {at_risk} patients remain at risk.", lambda: _km_fig(lead, train, ext, unit, "External cohort",
                                                                       k_groups, at_risk))
        _figure(out["external"], "external-auc", "Discrimination over time, external cohort",
                "Cumulative/dynamic AUC over follow-up time.",
                lambda: _auc_fig(models, ext, ext, eh, unit, "External cohort",
                                 _external_row_censoring(result, ext, models)))
    if cox:
        def nomo():
            scales = [nomogram_scales(m, horizons, time_unit=unit, median_axis=True, name=_label(k),
                                      signature_scores=m.signature_score(train) if hasattr(m, "signature_score")
                                      else None) for k, m in offered.items()]
            return plot_nomogram(scales, layout="rows")
        _figure(out["main"], "nomogram", "Nomograms", "Points per predictor, total points, and survival "
                "probability at each horizon and predicted median survival, for each Cox model.", nomo)
    _figure(out["main"], "km", "Kaplan-Meier curves by risk group (development cohort)",
            f"{k_groups} quantile groups of the {_label(lead.name)} risk on all development patients (apparent). "
            f"Curves stop when fewer than {at_risk} patients remain at risk.",
            lambda: _km_fig(lead, train, train, unit, _label(lead.name), k_groups, at_risk))
    first = float(min(horizons))
    on_ext = result.external is not None
    ev = result.external_prepared.cohort if on_ext else train
    _figure(out["main"], "conditional-km", f"Alive at {time_phrase(first, unit)}: survival after it, by risk group",
            f"The patients still followed at {time_phrase(first, unit)} ({'external' if on_ext else 'development'} "
            "cohort), in the same risk groups, with time counted from then: conditional survival, read off for a "
            f"patient seen alive at a visit at {time_phrase(first, unit)}. Curves stop when fewer than {at_risk} patients "
            "remain at risk.",
            lambda: _km_fig(lead, train, ev, unit, _label(lead.name), k_groups, at_risk, since=first), half=True)
    _figure(out["main"], "td-auc", "Discrimination over time (development cohort, apparent)",
            "Cumulative/dynamic AUC over follow-up time.",
            lambda: _auc_fig(models, train, train, horizons, unit, "Development cohort"))
    for k, m in cox.items():
        _figure(out["main"], f"forest-{k}", f"Hazard ratios: {_label(k)}", "Hazard ratios with 95% CI per "
                "clinically meaningful contrast (reference levels marked).",
                lambda m=m, k=k: plot_forest(forest_table(m), title=_label(k)))
    for k, sel in result.validation.selection.items():
        if sel.n_fits:
            _figure(out["main"], f"selection-{k}", f"Selection frequency: {_label(k)}",
                    f"Share of the {sel.n_fits} bootstrap refits that kept each imaging feature; features of "
                    "the fit on all patients are highlighted.",
                    lambda sel=sel, k=k: plot_selection_frequency(sel.frequency, n_replicates=sel.n_fits,
                                                                  selected=sel.apparent, title=_label(k)))
    sig = getattr(models.get("combined"), "signature_", None)
    if sig is not None and sig.path_ is not None:
        _figure(out["main"], "path", "Penalised path of the imaging signature",
                "Coefficients along the penalty path and the cross-validated deviance that chose the penalty.",
                lambda: plot_coefficient_path(sig.path_, title="Imaging signature", width="double"), compact=True)
    for k, ph in result.ph_tests.items():
        _figure(out["main"], f"ph-{k}", f"Proportional-hazards diagnostics: {_label(k)}",
                "Scaled Schoenfeld residuals against transformed time with a smooth; a flat line supports "
                "proportional hazards.", lambda ph=ph: plot_schoenfeld(ph))
    return out


_BAND_WORDS = {
    "two-stage": "with a two-stage bootstrap band (over outer bootstrap samples, paired)",
    "shifted-percentile": "with the cheap shifted-percentile paired bootstrap band",
    "corrected-t": "with a corrected resampled t band (over the paired per-fold differences)",
}


def _difference_figures(items: list, result, unit: str) -> None:
    """Model-minus-baseline AUC and net benefit, internal beside external (validation/difference_bands.py)."""
    from workbench.figures.differences import plot_difference_curves

    for name, bands in (getattr(result, "difference_bands", None) or {}).items():
        nb = bands["net_benefit"]["internal"]
        ext = result.external is not None
        names = {"model_label": _label(name), "baseline_label": _label(nb.baseline)}
        _figure(items, f"difference-{name}", f"{_label(name)} minus {_label(nb.baseline)}: AUC and net benefit",
                "Differences from the same resamples for both models. Internal: validated AUC differences at the "
                "study horizons with their intervals, and the validated net-benefit difference at "
                f"{time_phrase(nb.horizon, unit)} " + _BAND_WORDS.get(nb.band, "without a band (see the note in results.json)")
                + "."
                + (" External: the difference of the unchanged models on the external patients with pointwise "
                   "normal bands over resamples of those patients (the resamples of the external table; in "
                   "simulation they covered about 95%)."
                   if ext else "") + " Above zero favours the first model.",
                lambda b=bands, kw=names: plot_difference_curves(b, time_unit=unit, **kw))


def _site_figure(items: list, result, d: dict, unit: str) -> None:
    """Observed/expected per centre and per scanner with the random-effects pooling (external cohort)."""
    from workbench.figures.site_calibration import plot_site_calibration
    from workbench.report.external_text import worst_horizon

    groups = {k: g for k, g in (getattr(result.external, "groups", None) or {}).items() if len(g.levels) >= 2}
    if not groups:
        return
    models = [k for k in ("clinical", "combined") if k in result.models] or list(result.models)[:2]
    hs = list(result.external.horizons)
    h = worst_horizon(d, models, hs[len(hs) // 2])
    _figure(items, "external-sites", f"Calibration by centre and scanner at {time_phrase(h, unit)} (external cohort)",
            "Observed/expected risk (Kaplan-Meier observed over mean predicted) with 95% bootstrap intervals of each "
            "site's patients; the pooled random-effects estimate (diamond: 95% confidence interval) and the 95% "
            "prediction interval for a new site (dotted) under each grouping. Open markers: a scanner the "
            "development data did not have. The horizon is the one at which these models depart most overall.",
            lambda: plot_site_calibration(groups, horizon=h, models=models, labels={k: _label(k) for k in models},
                                          unseen=unseen_batches(result), time_unit=unit))
