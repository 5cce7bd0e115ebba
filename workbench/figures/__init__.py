"""Publication figures: nomograms, survival curves, discrimination, calibration, decision curves."""

from workbench.figures.calibration import plot_calibration, plot_calibration_panels
from workbench.figures.decision import decision_curves, plot_decision_curve
from workbench.figures.discrimination import plot_td_auc, td_auc_by_model
from workbench.figures.export import save_figure
from workbench.figures.grouping import RiskGroups, risk_cutpoints, risk_groups
from workbench.figures.hazard_ratios import forest_table, plot_forest
from workbench.figures.km import (
    KMByGroupResult,
    conditional_km_by_group,
    km_by_group,
    plot_km_by_group,
)
from workbench.figures.nomogram import plot_nomogram
from workbench.figures.nomogram_points import (
    NomogramScales,
    PatientPoints,
    PointsTable,
    TermScale,
    nomogram_scales,
    patient_values,
    points_for_patient,
    points_table,
    survival_from_table,
    write_points_table,
)
from workbench.figures.ph import plot_schoenfeld
from workbench.figures.signature import plot_coefficient_path, plot_selection_frequency
from workbench.figures.style import PALETTE, palette_report, series_style, style_context

__all__ = [
    "KMByGroupResult",
    "NomogramScales",
    "PALETTE",
    "PatientPoints",
    "PointsTable",
    "RiskGroups",
    "TermScale",
    "decision_curves",
    "forest_table",
    "conditional_km_by_group",
    "km_by_group",
    "nomogram_scales",
    "palette_report",
    "patient_values",
    "plot_calibration",
    "plot_calibration_panels",
    "plot_coefficient_path",
    "plot_decision_curve",
    "plot_forest",
    "plot_km_by_group",
    "plot_nomogram",
    "plot_schoenfeld",
    "plot_selection_frequency",
    "plot_td_auc",
    "points_for_patient",
    "points_table",
    "risk_cutpoints",
    "risk_groups",
    "save_figure",
    "series_style",
    "style_context",
    "survival_from_table",
    "td_auc_by_model",
    "write_points_table",
]
