"""Every figure of a study run, built from a :class:`~workbench.workflow.StudyResult`.

One place decides what the standard figures of a study are, so the command
line, the report and the app show the same pictures:

* nomograms of the clinical-only and the clinical + signature models, side by side;
* Kaplan-Meier curves by risk tertile (cut-points fixed on the training rows),
  on the external cohort when there is one, else on the training cohort;
* time-dependent AUC over time, calibration at each horizon and decision curves,
  on the external cohort when there is one (honest), else on the training cohort
  (labelled "apparent");
* hazard ratios of each Cox model, selection frequency of the signature's
  features across the validation refits, the penalised coefficient path, and the
  proportional-hazards diagnostics;
* the patient flow (development and external cohorts) and the baseline survival
  curve of each Cox model.
"""

from __future__ import annotations

import warnings
from functools import cached_property
from pathlib import Path

import numpy as np

from workbench.errors import FigureWarning, SpecError, WorkbenchError, WorkbenchWarning
from workbench.figures import (
    conditional_km_by_group,
    decision_curves,
    forest_table,
    km_by_group,
    nomogram_scales,
    plot_calibration_panels,
    plot_coefficient_path,
    plot_decision_curve,
    plot_forest,
    plot_km_by_group,
    plot_nomogram,
    plot_schoenfeld,
    plot_selection_frequency,
    plot_td_auc,
    risk_groups,
    save_figure,
    td_auc_by_model,
)
from workbench.figures.nomogram_points import SIGNATURE_TERM
from workbench.figures.ticks import format_number
from workbench.metrics.calibration import calibration_at
from workbench.models.registry import MODEL_LABELS
from workbench.models.volume import VOLUME_MODEL
from workbench.units import time_phrase, unit_after_list, unit_for

COX_MODELS = ("clinical", "combined")


def external_censoring(result, cohort, risks: dict) -> dict | None:
    """Per-model censoring weights of the external cohort, the model the validation table used."""
    from workbench.validation.external import censoring_for

    choice = getattr(result.external, "censoring", None)
    if choice is None or choice.method == "km":
        return None
    strata = None if cohort.centre is None else np.asarray(cohort.centre).astype(str)
    return {name: censoring_for(cohort.y, strata, choice.method, r) for name, r in risks.items()}


def _evaluation(result):
    if result.external_prepared is not None:
        return result.external_prepared.cohort, "external cohort"
    return result.cohort, "development cohort, apparent"


def nomogram_figure(result, *, patient=None, layout=None, width="double", notes=None, patient_row=None):
    """Nomograms of the Cox models of the study (clinical-only and clinical + signature).

    ``patient_row=(cohort, index)`` (the row the ``patient`` values came from) adds the
    95% interval of each model's predicted survival for that patient.
    """
    train, unit = result.cohort, result.cohort.time_unit
    scales, intervals = [], []
    for name in COX_MODELS:
        m = result.models.get(name)
        if m is None:
            continue
        sig = m.signature_score(train) if hasattr(m, "signature_score") else None
        scales.append(
            nomogram_scales(m, tuple(result.spec.horizons), signature_scores=sig, time_unit=unit,
                            median_axis=True, name=MODEL_LABELS[name])
        )
        if patient_row is not None:
            cohort, i = patient_row
            # the whole cohort, then the row: a new scanner is harmonised from all its patients
            ci = m.predict_survival_with_ci(cohort, tuple(result.spec.horizons))
            intervals.append({float(h): (float(ci.lower[int(i), k]), float(ci.upper[int(i), k]))
                              for k, h in enumerate(result.spec.horizons)})
    if not scales:
        raise WorkbenchError("the study fits no Cox model, so there is no nomogram to draw.")
    if width == "single" and layout == "columns" and len(scales) > 1:
        layout = "rows"  # two panels side by side do not fit one journal column
    # the notes (patient_notes) are about the patient's scanner: only the imaging panel gets them
    return plot_nomogram(scales, patient=patient, layout=layout, width=width, imaging_notes=notes,
                         intervals=intervals if patient_row is not None else None)


def patient_notes(result, cohort, index: int) -> list[str]:
    """What the nomogram cannot see about one patient: a scanner (batch) the training network never used."""
    train_batches = set(map(str, result.cohort.batch)) if result.cohort.batch is not None else set()
    if cohort.batch is None or not train_batches:
        return []
    b = str(cohort.batch[int(index)])
    if b in train_batches:
        return []
    from workbench.report.methods import unseen_handling

    kind, n = unseen_handling(result).get(b, ("unadjusted", 0)) if result.external_prepared is not None \
        and cohort is result.external_prepared.cohort else ("unadjusted", 0)
    if kind == "estimated":
        return [f"{b} was not among the training scanners ({', '.join(sorted(train_batches))}): its effect on "
                f"the features was estimated from its {n} patients here, so the signature is less certain."]
    return [f"{b} was not among the training scanners ({', '.join(sorted(train_batches))}): this patient's "
            "features were standardised without harmonisation, so the signature may be off."]


def showcase_patients(result, cohort, signature_scores) -> dict[str, int]:
    """Two example rows of ``cohort`` for the nomogram overlay.

    ``"typical"``: the first patient from a scanner seen in training whose signature lies
    inside the training range; ``"flagged"``: the first patient from an unseen scanner,
    preferring one whose signature lies outside the training range (absent when every
    patient's scanner was seen).
    """
    train = result.models["combined"].signature_score(result.cohort)
    lo, hi = np.percentile(train, [1.0, 99.0])
    s = np.asarray(signature_scores, dtype=float)
    inside = (s >= lo) & (s <= hi)
    unseen = np.array([bool(patient_notes(result, cohort, i)) for i in range(cohort.n)])
    out = {}
    ok = np.flatnonzero(~unseen & inside)
    if ok.size:
        out["typical"] = int(ok[0])
    bad = np.flatnonzero(unseen & ~inside)
    bad = bad if bad.size else np.flatnonzero(unseen)
    if bad.size:
        out["flagged"] = int(bad[0])
    return out


def study_figures(result, *, width="double") -> dict:
    """All standard figures of a run, by file-friendly name (matplotlib Figures).

    Each figure is drawn for ``width`` ("single" 85 mm, "double" 175 mm or millimetres):
    text sizes and layout are chosen for that width, so draw once per width rather than
    resizing a drawn figure. A figure this cohort cannot give (its drawing raises a
    :class:`WorkbenchError`) is left out with a :class:`FigureWarning` that gives the reason.
    """
    figs = {}
    for name, draw in figure_plan(result, width=width).items():
        try:
            figs[name] = draw()
        except WorkbenchError as exc:  # one figure this cohort cannot give must not lose the run's results
            warnings.warn(f"the figure '{name}' was not drawn: {exc}", FigureWarning, stacklevel=2)
    return figs


def figure_plan(result, *, width="double") -> dict:
    """The figures of :func:`study_figures`, in its order, each a drawing still to be done.

    Name -> a function of no argument returning the Figure. Which figures a run has is settled
    here (cheaply); the drawing waits for the call, so one figure can be shown before the
    others are drawn. The predictions several figures share are computed once, on first use.
    """
    data = _Shared(result)
    models, horizons, width_ = result.models, data.horizons, width
    plan = {}
    if any(n in models for n in COX_MODELS):
        plan["nomogram"] = lambda: nomogram_figure(result, width=width_)
    plan["km_risk_groups"] = _quiet(lambda: plot_km_by_group(
        km_by_group(data.evalc.y, data.groups, time_unit=data.unit),
        title=f"{data.labels[data.top]}: {data.k} risk groups ({data.where})", width=width_,
        development=data.development, min_at_risk=result.spec.figures.min_at_risk))
    since = min(horizons)
    try:  # alive at the first horizon (a follow-up visit): survival after it, by the same groups
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", WorkbenchWarning)
            conditional = conditional_km_by_group(data.evalc.y, data.groups, since, time_unit=data.unit)
        plan["conditional_survival"] = lambda: plot_km_by_group(
            conditional, title=f"{data.labels[data.top]}: alive at {time_phrase(since, data.unit)}, by risk group "
                               f"({data.where})", width=width_, development=data.development,
            min_at_risk=result.spec.figures.min_at_risk, since=since)
    except SpecError:
        pass  # fewer than two patients or one risk group left after the visit: no figure
    plan["td_auc"] = _quiet(lambda: _td_auc_figure(data, width_))
    plan["calibration"] = _quiet(lambda: plot_calibration_panels(
        {name: [calibration_at(data.evalc.y, c, h) for h in horizons] for name, c in data.curves.items()},
        predicted=data.curves, time_unit=data.unit, width=width_, cohort=data.where))
    h_dc = horizons[len(horizons) // 2]
    plan["decision_curve"] = _quiet(lambda: plot_decision_curve(
        decision_curves(data.evalc.y, data.curves, h_dc), time_unit=data.unit,
        title=data.where.capitalize(), width=width_))
    plan.update(_difference_and_site_figures(result, width))
    plan.update(_model_figures(result, data, width))
    return plan


def _quiet(draw):
    """``draw`` with the warnings of scoring an unseen scanner silenced (documented fallback; the run log has it)."""
    def quiet():
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", WorkbenchWarning)
            return draw()
    return quiet


class _Shared:
    """The predictions several figures of a run use, computed once on first use."""

    def __init__(self, result) -> None:
        self.result = result
        self.unit = result.cohort.time_unit
        self.horizons = tuple(result.spec.horizons)
        self.evalc, self.where = _evaluation(result)
        self.development = result.external_prepared is None
        self.labels = {k: MODEL_LABELS.get(k, k) for k in result.models}
        self.top = "combined" if "combined" in result.models else next(iter(result.models))
        self.k = result.spec.models.risk_groups

    @cached_property
    def groups(self):
        m = self.result.models[self.top]
        return risk_groups(m.predict_risk(self.result.cohort).values, m.predict_risk(self.evalc).values, self.k)

    @cached_property
    def risks(self) -> dict:
        return {self.labels[k]: mm.predict_risk(self.evalc) for k, mm in self.result.models.items()}

    @cached_property
    def curves(self) -> dict:
        return {self.labels[k]: mm.predict_survival(self.evalc, self.horizons) for k, mm in self.result.models.items()}


def td_auc_grid(horizons, time, event, n: int = 15) -> np.ndarray:
    """Times of the AUC-over-time figure: from half the first horizon, but not before the first event
    (a time with no case has no AUC), to the last horizon and a third, within 90% of the follow-up."""
    time, event = np.asarray(time, dtype=float), np.asarray(event, dtype=bool)
    first_event = float(np.min(time[event])) if np.any(event) else 0.0
    last = min(float(np.max(time)) * 0.9, max(horizons) * 1.34)
    return np.linspace(max(min(horizons) / 2, first_event), last, n)


def _td_auc_figure(data: _Shared, width):
    result, evalc, horizons = data.result, data.evalc, data.horizons
    grid = td_auc_grid(horizons, evalc.time, evalc.event)
    cens_y, row_cens = result.cohort.y, None
    if result.external_prepared is not None:  # the evaluated cohort's own weights, as in the table
        cens_y, row_cens = evalc.y, external_censoring(result, evalc, data.risks)
    # the legend's mean AUC is the results table's: over the study horizons, weighted by events
    means = {k: r.mean_auc
             for k, r in td_auc_by_model(cens_y, evalc.y, data.risks, horizons, censoring=row_cens).items()}
    window = ", ".join(format_number(h) for h in horizons) + f" {unit_after_list(horizons, data.unit)}"
    return plot_td_auc(td_auc_by_model(cens_y, evalc.y, data.risks, grid, censoring=row_cens), time_unit=data.unit,
                       horizons=horizons, title=data.where.capitalize(), width=width,
                       mean_auc=means, mean_window=f"at {window}".rstrip())


def _model_figures(result, data: _Shared, width) -> dict:
    """Hazard ratios, the signature's selection and path, the PH checks, patient flow, harmonisation, baseline."""
    from workbench.figures.baseline import plot_baseline_survival
    from workbench.figures.flow import plot_patient_flow
    from workbench.report.appendix import baseline_curves
    from workbench.report.flow import patient_flow

    plan = {}
    models, train, unit = result.models, result.cohort, data.unit

    def forest(name):
        m = models[name]
        sd = (float(np.std(m.signature_score(train), ddof=1)) if hasattr(m, "signature_score")
              and SIGNATURE_TERM in m.fit_.names else None)
        return plot_forest(forest_table(m, signature_sd=sd), title=data.labels[name], width=width)

    for name in (*COX_MODELS, VOLUME_MODEL):
        if name in models:
            plan[f"hazard_ratios_{name}"] = lambda n=name: forest(n)
    sig_model = models.get("combined")
    sel = result.validation.selection.get("combined")
    if sel is not None and sel.n_fits:
        plan["selection_frequency"] = lambda: plot_selection_frequency(
            sel.frequency, n_replicates=sel.n_fits, selected=sel.apparent,
            title="Imaging features kept across bootstrap refits", width=width,
        )
    if sig_model is not None and sig_model.signature_.path_ is not None:
        plan["coefficient_path"] = lambda: plot_coefficient_path(sig_model.signature_.path_,
                                                                 title="Imaging signature: penalised path",
                                                                 width=width)
    for name, ph in result.ph_tests.items():
        plan[f"ph_{name}"] = lambda p=ph: plot_schoenfeld(p, width=width, time_unit=unit)
    plan["patient_flow"] = lambda: plot_patient_flow(patient_flow(result), width=width)
    if getattr(result, "harmonisation", None):
        from workbench.figures.harmonisation import plot_harmonisation_checks

        plan["harmonisation_checks"] = lambda: plot_harmonisation_checks(result.harmonisation, width=width)
    curves = baseline_curves(result)
    if curves:
        plan["baseline_survival"] = lambda: plot_baseline_survival(
            {data.labels[k]: v for k, v in curves.items()}, horizons=data.horizons, time_unit=unit, width=width)
    return plan


def _difference_and_site_figures(result, width) -> dict:
    """Combined-minus-clinical AUC and net benefit (internal beside external) and O/E per centre and scanner."""
    from workbench.figures.differences import plot_difference_curves
    from workbench.figures.site_calibration import plot_site_calibration
    from workbench.report.external_text import worst_horizon
    from workbench.report.methods import unseen_batches

    plan = {}
    unit = result.cohort.time_unit
    bands = (getattr(result, "difference_bands", None) or {}).get("combined")
    if bands is not None:
        base = bands["net_benefit"]["internal"].baseline
        plan["difference_curves"] = lambda: plot_difference_curves(bands, width=width, time_unit=unit,
                                                                   model_label=MODEL_LABELS["combined"],
                                                                   baseline_label=MODEL_LABELS.get(base, base))
    groups = {k: g for k, g in (getattr(result.external, "groups", None) or {}).items() if len(g.levels) >= 2} \
        if result.external is not None else {}
    if groups:
        est = result.external.estimates
        perf = {k: {"external_performance": {n: {"estimate": e.estimate} for n, e in est[k].items()}} for k in est}
        models = [k for k in COX_MODELS if k in result.models] or list(result.models)[:2]
        hs = list(result.external.horizons)
        h = worst_horizon({"external": {"n": result.external.n}, "models": perf,
                           "study": {"horizons": list(result.spec.horizons)}}, models, hs[len(hs) // 2])
        plan["site_calibration"] = lambda: plot_site_calibration(
            groups, horizon=h, models=models, labels={k: MODEL_LABELS.get(k, k) for k in models},
            unseen=unseen_batches(result), width=width, time_unit=unit,
            title=f"External cohort, {format_number(h)} {unit_for(h, unit)}".rstrip())
    return plan


def write_figures(result, out_dir, *, formats=("png", "svg", "pdf"), widths=("double",)) -> list[Path]:
    """Save every figure of the run (PNG 300 dpi, SVG and PDF with editable text)."""
    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    written = []
    for width in widths:
        # drawn afresh at each width: fonts and layout are chosen for the column, not scaled
        for name, fig in study_figures(result, width=width).items():
            for p in save_figure(fig, out / name, widths=(width,), formats=formats):
                final = p.with_name(f"{name}{p.suffix}") if len(widths) == 1 else p
                p.replace(final)
                written.append(final)
    return written
