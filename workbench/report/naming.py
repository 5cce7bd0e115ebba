"""One naming scheme for model terms in results.json and the CSV tables.

- ``term``: what the study lists -- a clinical predictor's column name, or
  ``"signature"`` for the imaging signature of the combined model;
- ``design_column``: one column of the design matrix the Cox model was fitted
  on (``"stage=III"``, ``"age"``, ``"cea:below_limit"``); a term has one or more;
- ``design_columns``: all design columns of a term (a list in JSON, text joined
  by ``"; "`` in CSV files).

The models and statistics layers keep their own field names; this module
translates at the edge, where files are written.
"""

from __future__ import annotations

import pandas as pd

CSV_LIST_SEPARATOR = "; "


def coefficient_rows(rows: list[dict]) -> list[dict]:
    """Coefficient rows (one per design column): ``column`` becomes ``design_column``."""
    out = []
    for r in rows:
        r = dict(r)
        if "column" in r:
            r["design_column"] = r.pop("column")
        out.append({"term": r.pop("term", None), "design_column": r.pop("design_column", None), **r})
    return out


def hazard_ratio_frame(table: pd.DataFrame, *, for_csv: bool = False) -> pd.DataFrame:
    """Hazard-ratio rows (one per contrast): ``column`` becomes ``term``; design columns as a list or text."""
    df = table.rename(columns={"column": "term"}).copy()
    if "design_columns" in df:
        df["design_columns"] = [
            CSV_LIST_SEPARATOR.join(map(str, v)) if for_csv else list(map(str, v)) for v in df["design_columns"]
        ]
    return df


def ph_frame(table: pd.DataFrame) -> pd.DataFrame:
    """Proportional-hazards rows: one per design column plus ``"GLOBAL"``, named ``design_column``."""
    return table.rename(columns={"term": "design_column"})
