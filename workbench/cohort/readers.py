"""Reading one table file as text: format, delimiter, decimal mark, sheet and header.

Every cell is read as text so that values such as ``"<0.5"`` or ``"0042"``
survive untouched and each later conversion problem can be reported with its
file, column and row. Where a file can be read in one reasonable way only, it
is read that way and the reading is said (an :class:`InputFormatWarning`):

* the delimiter of a text table is detected (comma, semicolon, tab or bar);
* in a table not separated by commas, a column whose numbers are written with
  a decimal comma (``"2,5"``) is read with a decimal point;
* a workbook with one sheet holding data is read from that sheet.

Anything with two readings stops with a message instead: a workbook with more
than one sheet holding data and no sheet named, the same column name twice in
a header (the usual readers would silently rename one to ``x.1``), a header
cell left empty above values. Input files are only ever read.
"""

from __future__ import annotations

import csv
import hashlib
import io
import re
import warnings
from pathlib import Path

import pandas as pd

from workbench.errors import CohortError, InputFormatWarning

READERS = {
    ".csv": "text",
    ".tsv": "text",
    ".tab": "text",
    ".txt": "text",
    ".parquet": "parquet",
    ".pq": "parquet",
    ".xlsx": "excel",
    ".xlsm": "excel",
    ".xls": "excel",
}

DELIMITERS = {",": "comma", ";": "semicolon", "\t": "tab", "|": "vertical bar"}
_DEFAULT_DELIMITER = {".csv": ",", ".tsv": "\t", ".tab": "\t", ".txt": "\t"}
_SNIFF_BYTES = 1 << 16
_SNIFF_LINES = 50

# "2,5", "-0,25", "<0,5", "1,2e-3": a number written with a decimal comma
_DECIMAL_COMMA = re.compile(r"^\s*[<>]?=?\s*[+-]?\d*,\d+(?:[eE][+-]?\d+)?\s*$")
# a number written with a decimal point: its column is not a decimal-comma column
_DECIMAL_POINT = re.compile(r"^\s*[<>]?=?\s*[+-]?\d*\.\d+(?:[eE][+-]?\d+)?\s*$")


def column_letter(position: int) -> str:
    """Spreadsheet column letter of a 0-based column position (0 -> A, 26 -> AA)."""
    out, n = "", position + 1
    while n:
        n, r = divmod(n - 1, 26)
        out = chr(65 + r) + out
    return out


def file_digest(path) -> str:
    """SHA-256 of a file's bytes (read in chunks; the file is not modified)."""
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        for chunk in iter(lambda: fh.read(1 << 20), b""):
            h.update(chunk)
    return h.hexdigest()


def read_table(path, *, sheet: str | None = None) -> pd.DataFrame:
    """Read one table (CSV/TSV/text, Parquet or Excel) with every cell as text.

    Parameters
    ----------
    path : path-like
    sheet : str, optional
        Excel only: the sheet to read. Without it, a workbook must hold data on
        one sheet only.

    Returns
    -------
    DataFrame
        Text cells keep their exact spelling ("<0.5", "0042"); blank cells are
        missing; column names are stripped of surrounding spaces. Parquet
        columns keep their stored types.

    Raises
    ------
    CohortError
        If the file does not exist, has an unknown extension, cannot be parsed,
        holds no rows, names a column twice or leaves a header cell empty above
        values, or (Excel) has several sheets with data and none was named.
    """
    p = Path(path)
    if not p.exists():
        raise CohortError(f"{p}: file not found. Check the path (it is read relative to the current folder).")
    if p.is_dir():
        raise CohortError(f"{p}: is a folder, not a table file.")
    kind = READERS.get(p.suffix.lower())
    if kind is None:
        raise CohortError(
            f"{p}: unknown table format {p.suffix!r}; expected one of {', '.join(sorted(set(READERS)))}."
        )
    if sheet is not None and kind != "excel":
        raise CohortError(f"{p}: a sheet ({sheet!r}) was named, but the file is not an Excel workbook.")
    try:
        if kind == "text":
            raw = _read_text(p)
        elif kind == "parquet":
            df = pd.read_parquet(p)
            _check_header(list(enumerate(df.columns)), p)
            df.columns = [str(c).strip() for c in df.columns]
            if df.shape[0] == 0:
                raise CohortError(f"{p}: the table has a header but no rows.")
            return df
        else:
            raw = _read_excel(p, sheet)
    except CohortError:
        raise
    except pd.errors.EmptyDataError:
        raise CohortError(f"{p}: the file is empty.") from None
    except Exception as exc:  # the parsers raise many types; all mean "cannot read"
        first = str(exc).splitlines()[0] if str(exc) else type(exc).__name__
        label = {"text": "a text table", "parquet": "PARQUET", "excel": "EXCEL"}[kind]
        raise CohortError(f"{p}: cannot be read as {label} ({first}).") from None
    return _with_header(raw, p)


# ------------------------------------------------------------------ text files


def _decode(p: Path) -> tuple[str, str]:
    data = p.read_bytes()
    try:
        return data.decode("utf-8-sig"), "utf-8"
    except UnicodeDecodeError:
        return data.decode("cp1252", errors="replace"), "cp1252"


def detect_delimiter(text: str, default: str) -> str:
    """The delimiter that splits the first lines into the same number (> 1) of fields.

    Quoted fields are respected. Among consistent candidates the one giving the
    most fields wins; without any, ``default``.
    """
    lines = [ln for ln in text[:_SNIFF_BYTES].splitlines()[:_SNIFF_LINES] if ln.strip()]
    if len(lines) > 1 and len(text) > _SNIFF_BYTES:
        lines = lines[:-1]  # the last line may be cut off
    best, best_n = None, 1
    for d in DELIMITERS:
        counts = [len(r) for r in csv.reader(lines, delimiter=d)]
        if counts and counts[0] > best_n and all(c == counts[0] for c in counts):
            best, best_n = d, counts[0]
    return best or default


def _read_text(p: Path) -> pd.DataFrame:
    text, encoding = _decode(p)
    if not text.strip():
        raise CohortError(f"{p}: the file is empty.")
    default = _DEFAULT_DELIMITER[p.suffix.lower()]
    delim = detect_delimiter(text, default)
    notes = []
    if delim != default:
        notes.append(f"read as {DELIMITERS[delim]}-separated")
    if encoding != "utf-8":
        notes.append("read with the Windows-1252 character set (the file is not UTF-8)")
    raw = pd.read_csv(io.StringIO(text), sep=delim, dtype=str, header=None)
    if delim != ",":
        raw, converted = _decimal_commas(raw)
        if converted:
            cols = ", ".join(repr(str(raw.iat[0, j]).strip()) for j in converted[:6])
            more = f" and {len(converted) - 6} more" if len(converted) > 6 else ""
            notes.append(f"numbers with a decimal comma were read with a decimal point in {len(converted)} "
                         f"column(s): {cols}{more}")
    if notes:
        warnings.warn(
            f"{p}: {'; '.join(notes)}. If this is not how the file is meant, save it as a comma-separated "
            "file with decimal points.",
            InputFormatWarning,
            stacklevel=4,
        )
    return raw


def _decimal_commas(raw: pd.DataFrame) -> tuple[pd.DataFrame, list[int]]:
    """Turn "2,5" into "2.5" in columns written with decimal commas (header row untouched)."""
    converted = []
    out = raw.copy()
    for j in range(raw.shape[1]):
        body = raw.iloc[1:, j].dropna().astype(str)
        if body.empty:
            continue
        has_comma = body.str.match(_DECIMAL_COMMA)
        if not has_comma.any() or body.str.match(_DECIMAL_POINT).any():
            continue
        cells = raw.iloc[1:, j]
        mask = cells.notna() & cells.astype(str).str.match(_DECIMAL_COMMA)
        out.iloc[1:, j] = cells.where(~mask, cells.astype(str).str.replace(",", ".", regex=False))
        converted.append(j)
    return out, converted


# ------------------------------------------------------------------ Excel


def _read_excel(p: Path, sheet: str | None) -> pd.DataFrame:
    with pd.ExcelFile(p) as book:
        names = [str(s) for s in book.sheet_names]
        if sheet is not None:
            if sheet not in names:
                raise CohortError(
                    f"{p}: the workbook has no sheet {sheet!r}; its sheets are {', '.join(map(repr, names))}."
                )
            return book.parse(sheet, header=None, dtype=str)
        frames = {s: book.parse(s, header=None, dtype=str) for s in names}
    with_data = {s: f for s, f in frames.items() if f.notna().to_numpy().any()}
    if len(with_data) > 1:
        listed = ", ".join(f"{s!r} ({max(len(f) - 1, 0)} rows)" for s, f in with_data.items())
        raise CohortError(
            f"{p}: the workbook has {len(with_data)} sheets holding data: {listed}. Only one sheet is read "
            "per table: name it (study file: features_sheet = '...' or clinical_sheet = '...' under [data] "
            "or [external]; workbench inspect and apply: --features-sheet / --clinical-sheet), or save that sheet as a "
            "file of its own; gather the patients on one sheet if the cohort is spread over several."
        )
    if not with_data:
        raise CohortError(f"{p}: the file is empty (no sheet holds any value).")
    name, frame = next(iter(with_data.items()))
    if len(names) > 1:
        warnings.warn(
            f"{p}: read sheet {name!r}, the only one of {len(names)} sheets that holds data.",
            InputFormatWarning,
            stacklevel=4,
        )
    return frame


# ------------------------------------------------------------------ header


def _check_header(named: list, p: Path) -> None:
    """``named``: (0-based column position, name) pairs; the same name twice is an error."""
    seen: dict[str, list[int]] = {}
    for j, n in named:
        seen.setdefault(str(n).strip(), []).append(j)
    dup = {n: js for n, js in seen.items() if len(js) > 1}
    if dup:
        listed = "; ".join(
            f"{n!r} in columns {', '.join(column_letter(j) for j in js)}" for n, js in list(dup.items())[:6]
        )
        raise CohortError(
            f"{p}: column names appear more than once in the header: {listed}. Each column needs its own "
            "name; rename or remove the copies (nothing was renamed automatically)."
        )


def _with_header(raw: pd.DataFrame, p: Path) -> pd.DataFrame:
    if raw.shape[0] == 0:
        raise CohortError(f"{p}: the file is empty.")
    header = raw.iloc[0]
    body = raw.iloc[1:].reset_index(drop=True)
    blank = [j for j in range(raw.shape[1]) if pd.isna(header.iloc[j]) or not str(header.iloc[j]).strip()]
    unnamed_with_values = [j for j in blank if body.iloc[:, j].notna().any()]
    if unnamed_with_values:
        cols = ", ".join(column_letter(j) for j in unnamed_with_values[:6])
        raise CohortError(
            f"{p}: column(s) {cols} hold values but have no name in the header row (row 1). Give each column "
            "a name, or delete it (a table saved with its row numbers has such a column first)."
        )
    keep = [j for j in range(raw.shape[1]) if j not in blank]
    names = [str(header.iloc[j]).strip() for j in keep]
    _check_header(list(zip(keep, names, strict=True)), p)
    df = body.iloc[:, keep]
    df.columns = names
    if df.shape[0] == 0:
        raise CohortError(f"{p}: the table has a header but no rows.")
    return df
