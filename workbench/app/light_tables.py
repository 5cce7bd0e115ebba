"""Light tables for a view that shows many of them (the Results view).

Each table is drawn as static HTML (``st.table``) instead of an interactive data grid (a
canvas the browser lays out and paints cell by cell): a trace of the cached Results view showed
its script done in 0.04 s of CPU while the page took several times longer to appear, the rest
being the browser's. A static table has no sorting or download menu of its own, so the view
offers every table it showed in one zip of CSV files (the same cells as on the page). Nothing
here computes a number.
"""

from __future__ import annotations

import io
import re
import zipfile

import pandas as pd
import streamlit as st


def _cells(df: pd.DataFrame) -> pd.DataFrame:
    """Floats as the data grid showed them (3 decimals; missing as "-"); every other cell unchanged."""
    from workbench.app.tables import num

    out = df.copy()
    for c in out.columns:
        if pd.api.types.is_float_dtype(out[c]):
            out[c] = [num(x, 3) for x in out[c]]
    return out


def _file_name(title: str) -> str:
    return re.sub(r"[^a-z0-9]+", "_", title.lower()).strip("_") + ".csv"


def tables_zip(frames: dict[str, pd.DataFrame]) -> bytes:
    """Each table as a CSV file (named after its title) in one zip."""
    buf = io.BytesIO()
    with zipfile.ZipFile(buf, "w", zipfile.ZIP_DEFLATED) as zf:
        for title, df in frames.items():
            zf.writestr(_file_name(title), df.to_csv(index=False))
    return buf.getvalue()


class ShownTables:
    """The tables of one rerun of a view: shown as static tables, then offered as one download."""

    def __init__(self) -> None:
        self.frames: dict[str, pd.DataFrame] = {}

    def show(self, df: pd.DataFrame, title: str, *, where=None) -> None:
        cells = _cells(df)
        (where if where is not None else st).table(cells, hide_index=True)
        self.frames[title] = cells

    def download(self, where, *, file_name: str, key: str) -> None:
        """One button for every table shown so far (the zip is written only when it is pressed)."""
        if not self.frames:
            return
        frames = dict(self.frames)
        where.download_button("Download the tables shown (CSV files, zip)", lambda: tables_zip(frames),
                              file_name=file_name, mime="application/zip", key=key, on_click="ignore")
