"""Patients' values read from an uploaded file: the template of the columns a model needs, the
reader, the check that every needed column is there, the row picker; and the values outside the
training data.

Shared by the Patient page and the Results page's competing-risks patient subsection; ``key``
keeps their widgets apart.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import streamlit as st

from workbench.app import state
from workbench.app.messages import plain

FILE_TYPES = ["csv", "tsv", "txt", "xlsx", "xls"]


def needed_columns(result, ranges) -> list[str]:
    """Exactly the columns a patient file needs for this model: id, clinical predictors, scanner, imaging."""
    cols = [result.spec.data.id]
    cols += [c.column for c in ranges.clinical]
    if ranges.harmonised:
        cols.append(result.spec.data.batch or ranges.batch_column)
    cols += list(ranges.imaging_features)
    return list(dict.fromkeys(cols))


def template_button(result, ranges, name: str, *, key: str = "patient_template") -> None:
    cols = needed_columns(result, ranges)
    st.download_button(
        f"Download a template for the patient file ({len(cols)} columns)", ",".join(cols) + "\n",
        file_name=state.study_filename(result.spec, ".csv", f"{name}_patient_template"), mime="text/csv",
        key=f"{key}_{name}",
        help="A CSV file with exactly the columns this model needs, one row per patient. Fill it in with a "
             "spreadsheet program and upload it here.")


def read_patients(path, shown_name: str) -> pd.DataFrame | None:
    """The rows of a patient file (text kept as written; blanks become missing); errors shown on the page."""
    try:
        if path.suffix.lower() in (".xlsx", ".xls"):
            df = pd.read_excel(path, dtype=object)
        else:
            df = pd.read_csv(path, dtype=str, keep_default_na=False,
                             sep="\t" if path.suffix.lower() == ".tsv" else ",")
    except Exception as exc:  # noqa: BLE001 - any reading error is explained in words
        st.error(plain(f"{shown_name}: could not be read as a table ({state.friendly(str(exc))}). Save it as CSV "
                       "(comma separated, UTF-8) or Excel, with the column names in the first row."))
        return None
    df = df.dropna(how="all")
    df.columns = [str(c).strip() for c in df.columns]
    if df.empty:
        st.error(plain(f"{shown_name} has a header row but no patient rows."))
        return None
    return df


def missing_columns(result, ranges, df: pd.DataFrame, shown_name: str) -> bool:
    """Say which needed columns the file lacks (True when some are missing)."""
    missing = [c for c in needed_columns(result, ranges)[1:] if c not in df.columns]
    if missing:
        shown = ", ".join(missing[:8]) + (f" and {len(missing) - 8} more" if len(missing) > 8 else "")
        st.error(plain(f"{shown_name} lacks {len(missing)} column(s) this model needs: {shown}. "
                       "Download the template above for the exact column names."))
    return bool(missing)


def row_labels(result, df: pd.DataFrame) -> list[str]:
    idc = result.spec.data.id
    return [str(v) for v in df[idc]] if idc in df.columns else [f"row {i + 1}" for i in range(len(df))]


def pick_row(result, df: pd.DataFrame, *, key: str = "patient_row") -> int:
    """The row of the patient to show (a picker when the file holds several)."""
    if len(df) < 2:
        return 0
    labels = row_labels(result, df)
    return int(st.selectbox(f"Patient ({len(df)} in the file)", range(len(df)), format_func=lambda i: labels[i],
                            key=key))


def row_record(df: pd.DataFrame, i: int) -> dict:
    """One row's values, blanks as None."""
    return {str(k): (None if v is None or (isinstance(v, str) and not v.strip()) or
                     (isinstance(v, float) and np.isnan(v)) else v) for k, v in df.iloc[int(i)].items()}


def show_outside(ch) -> bool:
    """The patient's values outside the training data (:class:`~workbench.estimate.PatientChecks`), as
    warnings under one heading; True when there are any (both patient views)."""
    if not ch.out_of_range:
        return False
    st.markdown("**Values outside the training data** (the model extrapolates there)")
    for f in ch.flags:
        st.warning(plain(f.message))
    if ch.imaging_outside:
        st.warning(f"{ch.imaging_outside} of {ch.imaging_checked} imaging features lie beyond the training "
                   "1st-99th percentiles; furthest: " + plain("; ".join(f.message for f in ch.imaging_worst)))
    return True


def file_record(result, ranges, name: str) -> dict | None:
    """One patient's values from an uploaded file with one or more patients (the Patient page)."""
    template_button(result, ranges, name)
    up = st.file_uploader("Patient file (CSV or Excel, one row per patient)", type=FILE_TYPES, key="patient_file")
    if up is None:
        return None
    df = read_patients(state.save_upload(up, "patient"), up.name)
    if df is None or missing_columns(result, ranges, df, up.name):
        return None
    return row_record(df, pick_row(result, df))
