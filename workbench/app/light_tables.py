"""Light tables for a view that shows many of them (the Results view).

Each table is drawn as one block of static HTML (``st.html``), neither an interactive data grid
(a canvas the browser lays out and paints cell by cell) nor ``st.table``, whose every header and
cell is a Markdown component of its own in the browser: a CPU profile of the browser re-drawing
the cached Results view (about 200 cells) spent most of its time in Streamlit's Markdown renderer,
while the view's script took 0.02 s of CPU. One HTML block per table is parsed by the browser in
one go. A static table has no sorting or download menu of its own, so the view offers every
table it showed in one zip of CSV files (the same cells as on the page). Nothing here computes a
number.
"""

from __future__ import annotations

import html
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


# Close to Streamlit's own static table: thin row lines, the header in the secondary text colour,
# numbers right-aligned; the page's font and size.
STYLE = (
    "<style>.wb-table{border-collapse:collapse;font-size:0.875rem;margin:0 0 1rem 0;width:auto;"
    "line-height:1.5;color:inherit}"
    ".wb-table th,.wb-table td{border:1px solid rgba(49,51,63,0.1);padding:0.25rem 0.5rem;text-align:left;"
    "vertical-align:top;white-space:nowrap}"
    ".wb-table th{font-weight:400;color:rgba(49,51,63,0.6)}.wb-table .wb-num{text-align:right}"
    ".wb-scroll{overflow-x:auto;max-width:100%}</style>"
)


def html_table(df: pd.DataFrame, *, label: str = "", max_height: str | None = None) -> str:
    """The table as one block of HTML (every cell escaped; no index), with its style; taller than
    ``max_height`` (a CSS length) it scrolls."""
    numeric = [pd.api.types.is_numeric_dtype(df[c]) and not pd.api.types.is_bool_dtype(df[c]) for c in df.columns]
    esc = html.escape

    def cell(tag: str, value, num: bool) -> str:
        text = "" if value is None or (isinstance(value, float) and value != value) else str(value)
        open_tag = f'<{tag} class="wb-num">' if num else f"<{tag}>"
        return f"{open_tag}{esc(text) or '&nbsp;'}</{tag}>"

    head = "".join(cell("th", c, n) for c, n in zip(df.columns, numeric, strict=True))
    rows = "".join("<tr>" + "".join(cell("td", v, n) for v, n in zip(row, numeric, strict=True)) + "</tr>"
                   for row in df.itertuples(index=False, name=None))
    aria = f' aria-label="{esc(label, quote=True)}"' if label else ""
    box = f' style="max-height:{max_height};overflow-y:auto"' if max_height else ""
    return (f'{STYLE}<div class="wb-scroll"{box}><table class="wb-table"{aria}><thead><tr>{head}</tr></thead>'
            f"<tbody>{rows}</tbody></table></div>")


def show_table(df: pd.DataFrame, *, label: str = "", max_height: str | None = None, where=None) -> None:
    """A static table, drawn by the browser in one go (:func:`html_table`)."""
    (where if where is not None else st).html(html_table(df, label=label, max_height=max_height))


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
        show_table(cells, label=title, where=where)
        self.frames[title] = cells

    def download(self, where, *, file_name: str, key: str) -> None:
        """One button for every table shown so far (the zip is written only when it is pressed)."""
        if not self.frames:
            return
        frames = dict(self.frames)
        where.download_button("Download the tables shown (CSV files, zip)", lambda: tables_zip(frames),
                              file_name=file_name, mime="application/zip", key=key, on_click="ignore")
