"""The figures of the competing-risks route, built once for the results folder and the app.

:func:`competing_figures` returns every figure at one journal width (name -> Figure):

* ``cumulative_incidence``: the Aalen-Johansen incidence of every cause with its band;
* ``incidence_calibration``: observed (Aalen-Johansen) against predicted risk of the cause
  of interest in fifths of predicted risk, cause-specific models, apparent;
* ``incidence_decision_curve``: net benefit of acting on the predicted risk of the cause of
  interest at the middle horizon, cause-specific models, apparent;
* ``incidence_nomogram``: the Fine-Gray nomograms (risk of the cause of interest by each
  horizon from the total points).
"""

from __future__ import annotations

from workbench.competing.analysis import CompetingStudyResult
from workbench.competing.fitting import target_outcome
from workbench.competing.metrics import competing_grouped_calibration, competing_net_benefit
from workbench.errors import WorkbenchError
from workbench.units import time_phrase

__all__ = ["DECISION_LABELS", "EMPTY_NOTE", "NOMOGRAM_TITLES", "cause_labels", "competing_figures", "equal_to_clinical",
           "nomogram_scales_by_model"]

DECISION_LABELS = {"clinical": "Clinical (cause-specific Cox)", "combined": "Clinical + signature (cause-specific Cox)"}
NOMOGRAM_TITLES = {"clinical": "Clinical, Fine-Gray", "combined": "Clinical + signature, Fine-Gray"}
APPARENT = "development cohort, apparent (the models were fitted here)"


EMPTY_NOTE = "the signature kept no feature"


def equal_to_clinical(result: CompetingStudyResult) -> bool:
    """Whether the clinical + signature arm of the cause of interest is the clinical arm (its signature is empty).

    The figures then draw the clinical arm alone, its label saying why (``EMPTY_NOTE``), rather
    than the same points, curve or nomogram twice.
    """
    arm = result.arms.get(("cause", "combined"))
    return arm is not None and arm.signature is not None and not arm.n_selected


def _models(result: CompetingStudyResult) -> tuple[str, ...]:
    return ("clinical",) if equal_to_clinical(result) else ("clinical", "combined")


def _label(result: CompetingStudyResult, label: str) -> str:
    return f"{label} ({EMPTY_NOTE})" if equal_to_clinical(result) else label


def cause_labels(result: CompetingStudyResult) -> dict:
    """Cause code -> the study's event codes that make it (1: the cause of interest, 2: competing)."""
    d = result.spec.data
    return {1: ", ".join(d.event_codes or ("event",)), 2: ", ".join(d.competing_codes or ("competing",))}


def _calibration_groups(result: CompetingStudyResult, n_groups: int = 5) -> dict:
    cohort = result.cohort
    y = target_outcome(cohort, "cause")
    out = {}
    for (target, model), arm in result.arms.items():
        if target != "cause" or model not in _models(result):
            continue
        curves = arm.predict(cohort, result.horizons, "cause_specific")
        try:
            out[model] = [competing_grouped_calibration(y, curves, t0, n_groups=n_groups) for t0 in result.horizons]
        except WorkbenchError:
            continue
    return out


def _decision_curves(result: CompetingStudyResult, t0: float) -> dict:
    y = target_outcome(result.cohort, "cause")
    curves = {}
    for model in _models(result):
        arm = result.arms.get(("cause", model))
        if arm is None:
            continue
        try:
            curves[_label(result, DECISION_LABELS[model])] = competing_net_benefit(
                y, arm.predict(result.cohort, [t0], "cause_specific"), t0)
        except WorkbenchError:
            continue
    return curves


def nomogram_scales_by_model(result: CompetingStudyResult) -> dict:
    """model -> NomogramScales of its Fine-Gray fit for the cause of interest (models that have one)."""
    from workbench.competing.nomogram import incidence_nomogram_scales

    label = f"the event coded '{cause_labels(result)[1]}'"
    out = {}
    for model in _models(result):
        arm = result.arms.get(("cause", model))
        if arm is None or arm.fine_gray is None:
            continue
        out[model] = incidence_nomogram_scales(arm, result.cohort, result.horizons, cause_label=label,
                                               time_unit=result.cohort.time_unit,
                                               name=_label(result, NOMOGRAM_TITLES[model]))
    return out


def competing_figures(result: CompetingStudyResult, width: str = "double") -> dict:
    """Every figure of the route at ``width`` ("single" or "double"), name -> Figure."""
    from workbench.figures.competing import plot_cause_incidence, plot_incidence_calibration
    from workbench.figures.decision import plot_decision_curve
    from workbench.figures.nomogram import plot_nomogram

    labels = cause_labels(result)
    unit = result.cohort.time_unit
    figs = {"cumulative_incidence": plot_cause_incidence(result.incidence, labels, horizons=result.horizons,
                                                         time_unit=unit, width=width)}
    groups = _calibration_groups(result)
    if groups:
        from workbench.models.labels import MODEL_LABELS

        named = {m: _label(result, MODEL_LABELS.get(m, m)) for m in groups}
        figs["incidence_calibration"] = plot_incidence_calibration(groups, cause_label=labels[1], width=width,
                                                                   time_unit=unit, title=APPARENT, labels=named)
    h = result.horizons
    t0 = float(h[len(h) // 2])
    curves = _decision_curves(result, t0)
    if curves:
        title = f"Risk of event '{labels[1]}' by {time_phrase(t0, unit)}, other events competing; {APPARENT}"
        figs["incidence_decision_curve"] = plot_decision_curve(curves, time_unit=unit, width=width, title=title)
    scales = list(nomogram_scales_by_model(result).values())
    if scales:
        figs["incidence_nomogram"] = plot_nomogram(
            scales, layout="rows" if width == "single" and len(scales) > 1 else "columns", width=width)
    return figs
