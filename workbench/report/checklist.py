"""The reporting checklist: which items of a prediction-model report this report fills in.

The items follow the topics of the TRIPOD statement and its update for
regression and machine-learning models, TRIPOD+AI, in our own short wording.
Each item says whether the generated report fills it in or the authors must
write it (study dates, recruitment, funding, ethics, patient involvement and
everything else the data cannot tell), and which section of the report holds it.

References
----------
.. [1] Collins GS, Reitsma JB, Altman DG, Moons KGM. Transparent reporting of a
   multivariable prediction model for individual prognosis or diagnosis
   (TRIPOD): the TRIPOD statement. BMJ 2015;350:g7594.
.. [2] Collins GS, Moons KGM, Dhiman P, et al. TRIPOD+AI statement: updated
   guidance for reporting clinical prediction models that use regression or
   machine learning methods. BMJ 2024;385:e078378.
"""

from __future__ import annotations

from dataclasses import dataclass

import pandas as pd

FILLED = "filled in by this report"
AUTHORS = "authors must write"


@dataclass(frozen=True)
class ChecklistItem:
    """One reporting item.

    Attributes
    ----------
    topic : str
        Topic of the reporting guidelines (e.g. "Sample size").
    item : str
        What a reader needs, in our words.
    status : str
        :data:`FILLED` or :data:`AUTHORS`.
    section : str or None
        Id of the report section that holds it (None when only the authors can write it).
    note : str
        What exactly is there, or what is missing.
    """

    topic: str
    item: str
    status: str
    section: str | None
    note: str = ""


def reporting_checklist(result) -> tuple[ChecklistItem, ...]:
    """The checklist for one study run.

    Parameters
    ----------
    result : StudyResult

    Returns
    -------
    tuple of ChecklistItem
        In the order of a manuscript.
    """
    ext = result.external is not None
    combined = "combined" in result.models
    items = [
        ChecklistItem("Title", "Say that a prognostic model is developed (and validated), for whom and for "
                      "which outcome", AUTHORS, "title", "the report shows the study name only"),
        ChecklistItem("Abstract", "Structured summary of aims, data, methods, results and conclusions", AUTHORS,
                      None),
        ChecklistItem("Background and objectives", "Clinical context, intended use and users of the model, "
                      "why imaging might add", AUTHORS, None),
        ChecklistItem("Source of data", "Study design, data sources, dates of recruitment and end of follow-up",
                      AUTHORS, "data", "centre and scanner counts are given; design and dates are not known "
                      "to the run"),
        ChecklistItem("Participants", "Eligibility criteria, setting, treatments received", AUTHORS, "data"),
        ChecklistItem("Participants", "Numbers read, analysed and set aside", FILLED, "data",
                      "patient flow diagram with the reasons and counts"),
        ChecklistItem("Participants", "Characteristics of the participants (table of clinical factors)",
                      FILLED, "data", "the model's predictors by centre" + (" and for the external cohort" if ext
                                                                             else "") + "; factors outside the model "
                      "(e.g. treatments) are for the authors"),
        ChecklistItem("Data preparation", "Cleaning, harmonisation of imaging features across scanners, "
                      "feature filters", FILLED, "predictors"),
        ChecklistItem("Outcome", "Definition, time unit, how and when assessed; events and censoring; "
                      "follow-up", FILLED, "outcome", "how the outcome was assessed (and blinding) is for the "
                      "authors"),
        ChecklistItem("Predictors", "Definition, kind, transformation, detection limits, when measured",
                      FILLED, "predictors", "when and how each was measured is for the authors"),
        ChecklistItem("Predictors", "Imaging acquisition, segmentation and feature extraction settings",
                      AUTHORS, "predictors", "the run sees the features only"),
        ChecklistItem("Sample size", "How the study size was arrived at; events per parameter; minimum "
                      "sample size", FILLED, "sample-size"),
        ChecklistItem("Missing data", "Counts per predictor and how they were handled", FILLED, "missing"),
        ChecklistItem("Analytical methods", "Model types, predictor selection, penalty tuning", FILLED,
                      "model"),
        ChecklistItem("Analytical methods", "Internal validation: method, replicates, what is refitted",
                      FILLED, "validation-method"),
        ChecklistItem("Analytical methods", "Performance measures and their intervals", FILLED, "performance"),
        ChecklistItem("Fairness", "Performance in relevant subgroups (sex, age, centre, scanner)", AUTHORS,
                      None, "not computed by this run"),
        ChecklistItem("Model specification", "Full model: every coefficient, baseline survival at each "
                      "horizon, centring values", FILLED, "model"),
        ChecklistItem("Model specification", "Imaging signature: features and weights", FILLED if combined
                      else AUTHORS, "model" if combined else None),
        ChecklistItem("Model performance", "Discrimination and overall accuracy, apparent and corrected",
                      FILLED, "performance"),
        ChecklistItem("Model performance", "Calibration at each horizon (table and plot)", FILLED,
                      "calibration"),
        ChecklistItem("Incremental value", "What the imaging signature adds to clinical factors", FILLED
                      if result.comparisons else AUTHORS, "incremental" if result.comparisons else None),
        ChecklistItem("Clinical utility", "Net benefit across decision thresholds", FILLED, "decision"),
        ChecklistItem("Risk groups", "How risk groups were formed; survival by group", FILLED, "figures"),
        ChecklistItem("External validation", "Performance in patients from elsewhere", FILLED if ext else AUTHORS,
                      "external", "" if ext else "no external cohort in this run"),
        ChecklistItem("Limitations", "Limitations of the study", FILLED, "limitations",
                      "generated from the run; the authors should review and add"),
        ChecklistItem("Interpretation", "Interpretation, implications for practice and research", AUTHORS, None),
        ChecklistItem("Model availability", "How to obtain and use the model", FILLED, "model",
                      "full Cox formulas here, the baseline survival curve and the values that reproduce "
                      "predictions in the appendix; the model bundle file for software use"),
        ChecklistItem("Software and code", "Software, versions, seed, input data hash", FILLED, "software"),
        ChecklistItem("Data availability", "Whether and how the data can be shared", AUTHORS, None),
        ChecklistItem("Protocol and registration", "Where the protocol is available, registration", AUTHORS,
                      None),
        ChecklistItem("Ethics", "Ethics approval and consent or its waiver", AUTHORS, None),
        ChecklistItem("Funding", "Sources of funding and the funder's role", AUTHORS, None),
        ChecklistItem("Conflicts of interest", "Declarations of the authors", AUTHORS, None),
        ChecklistItem("Patient and public involvement", "How patients and the public were involved", AUTHORS,
                      None),
    ]
    return tuple(items)


def checklist_frame(result) -> pd.DataFrame:
    """The checklist as a table (topic, item, status, section, note)."""
    return pd.DataFrame([vars(i) for i in reporting_checklist(result)])
