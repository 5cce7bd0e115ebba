"""Nomogram scales of a finished run, cached per run, shared by the Nomogram and Patient views."""

from __future__ import annotations

import io
import zipfile

import streamlit as st

from workbench.app import state, tables
from workbench.app.charts import SCREEN_DPI, save_figure, screen_png  # noqa: F401  (re-exported)
from workbench.errors import WorkbenchError

NOMOGRAM_MODELS = ("clinical", "combined")


def nomogram_models(result) -> list[str]:
    """Models of the run that have a nomogram (the Cox models with clinical terms)."""
    return [m for m in NOMOGRAM_MODELS if m in result.models and hasattr(result.models[m], "transformer_")]


def training_scores(result, name: str):
    model = result.models[name]
    if hasattr(model, "signature_score"):
        return model.signature_score(result.cohort)
    return None


def _scales(result, name: str, horizons: tuple[float, ...]):
    points = state.load_module("workbench.figures.nomogram_points")
    return points.nomogram_scales(
        result.models[name], horizons, signature_scores=training_scores(result, name),
        time_unit=result.validation.time_unit, name=tables.label(name),
    )


@st.cache_resource(show_spinner=False, max_entries=8)
def _axes_for(run_key: tuple, name: str, _result):
    """``NomogramScales`` of one model at the study's horizons: its predictor and total-points axes
    (cached on the run; they do not depend on the horizons)."""
    return _scales(_result, name, tuple(_result.spec.horizons))


@st.cache_resource(show_spinner=False, max_entries=16)
def scales_for(run_key: tuple, name: str, horizons: tuple[float, ...], _result):
    """``NomogramScales`` of one model at the chosen horizons (cached on the run and horizons): the run's
    axes with only the survival axes computed for ``horizons``."""
    points = state.load_module("workbench.figures.nomogram_points")
    try:
        axes = _axes_for(run_key, name, _result)
    except WorkbenchError:  # e.g. a study horizon before the first event: the chosen ones may still do
        return _scales(_result, name, horizons)
    return points.with_horizons(axes, _result.models[name], horizons)


def rounded_terms(terms):
    """Points per predictor value as people read them: values to 4 significant digits, points to 0.1."""
    out = terms.copy()
    if "points" in out:
        out["points"] = out["points"].astype(float).round(1)
    if "value" in out:
        out["value"] = [float(f"{v:.4g}") if isinstance(v, float) else v for v in out["value"]]
    return out


def rounded_survival(surv):
    """Total points -> survival with points to 0.1, linear predictor to 0.001 and survival to 0.001."""
    out = surv.copy()
    for c in out.columns:
        digits = 1 if c == "total_points" else 3
        out[c] = out[c].astype(float).round(digits)
    return out


def points_table_zip(tables_by_model: dict, prefix: str = "") -> bytes:
    """The points tables of each model as CSV files in one zip (terms and total points -> survival)."""
    buf = io.BytesIO()
    with zipfile.ZipFile(buf, "w", zipfile.ZIP_DEFLATED) as zf:
        for name, t in tables_by_model.items():
            zf.writestr(f"{prefix}{name}_points.csv", rounded_terms(t.terms).to_csv(index=False))
            zf.writestr(f"{prefix}{name}_total_points_survival.csv",
                        rounded_survival(t.survival).to_csv(index=False))
    return buf.getvalue()


def nomogram_values(result, name: str, record: dict, score: float | None = None) -> dict:
    """The patient's raw values as the nomogram reads them, with the signature score of the combined model
    (``score`` when typed in, else computed from the patient's imaging features)."""
    import numpy as np
    import pandas as pd

    from workbench.cohort.core import Cohort
    from workbench.cohort.outcome import make_outcome

    model = result.models[name]
    clinical_cols = list(result.cohort.clinical.columns)
    values = {c: record.get(c) for c in clinical_cols}
    if hasattr(model, "signature_score") and score is not None:
        values["imaging_signature"] = float(score)
    elif hasattr(model, "signature_score"):
        feats = list(result.cohort.feature_names)
        row = pd.DataFrame([[_number(record.get(f)) for f in feats]], columns=feats)
        batch_col = result.spec.data.batch
        batch = np.array([str(record[batch_col])]) if batch_col and batch_col in record else None
        one = Cohort(ids=np.array(["patient"]), y=make_outcome([1.0], [False]),
                     clinical=pd.DataFrame({c: pd.Series([values[c]], dtype=object) for c in clinical_cols}),
                     features=row, time_unit=result.cohort.time_unit, batch=batch)
        values["imaging_signature"] = float(model.signature_score(one)[0])
    return values


def _number(v) -> float:
    """A feature value as a number; blank or absent is missing (the model fills in its training median)."""
    if v is None or (isinstance(v, str) and not v.strip()):
        return float("nan")
    return float(v)
