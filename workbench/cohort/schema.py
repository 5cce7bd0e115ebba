"""Validation rules for the input tables.

Each check raises :class:`~workbench.errors.CohortError` with the file, the
column and the rows involved. Row numbers are those a spreadsheet shows: the
header is row 1, the first patient row 2.
"""

from __future__ import annotations

import difflib
import warnings

import numpy as np
import pandas as pd

from workbench.errors import CohortError, DataQualityWarning

TRUE_WORDS = {"1", "1.0", "true", "t", "yes", "y"}
FALSE_WORDS = {"0", "0.0", "false", "f", "no", "n"}


def rows_text(rows, limit: int = 8) -> str:
    """'rows 2, 5 and 9' style text from 0-based data positions."""
    rows = [int(r) + 2 for r in np.asarray(rows).ravel()]
    if not rows:
        return "no rows"
    head = ", ".join(str(r) for r in rows[:limit])
    more = f" and {len(rows) - limit} more" if len(rows) > limit else ""
    word = "row" if len(rows) == 1 else "rows"
    return f"{word} {head}{more}"


def check_required_columns(df: pd.DataFrame, source, roles: dict[str, str], pool=None) -> None:
    """Each role's column must exist; suggest close names when it does not."""
    pool = list(df.columns) if pool is None else pool
    for role, col in roles.items():
        if col in pool:
            continue
        close = difflib.get_close_matches(col, pool, n=3, cutoff=0.5)
        if not close:
            close = [c for c in pool if col.lower() in c.lower() or c.lower() in col.lower()][:3]
        hint = f" Did you mean {', '.join(repr(c) for c in close)}?" if close else ""
        shown = ", ".join(repr(c) for c in pool[:12]) + (" ..." if len(pool) > 12 else "")
        glued = [c for c in pool if any(d in str(c) for d in (";", "\t", "|"))]
        if glued:
            hint += (" The header looks like several names run together: the file's delimiter could not be "
                     "told from its first lines (rows with different numbers of fields?). Save it as a "
                     "comma-separated file.")
        raise CohortError(
            f"{source}: the {role} column {col!r} is not in the table.{hint} Columns found: {shown}."
        )


def check_ids(df: pd.DataFrame, source, id_col: str) -> None:
    """Patient ids must be present and unique within a table."""
    ids = df[id_col]
    missing = np.flatnonzero(ids.isna().to_numpy() | (ids.astype(str).str.strip() == "").to_numpy())
    if missing.size:
        raise CohortError(f"{source}, column {id_col!r}: patient id is missing in {rows_text(missing)}.")
    norm = ids.astype(str).str.strip()
    dup_mask = norm.duplicated(keep=False).to_numpy()
    if dup_mask.any():
        dups = sorted(set(norm[dup_mask]))
        listed = "; ".join(
            f"{d} ({rows_text(np.flatnonzero((norm == d).to_numpy()))})" for d in dups[:5]
        )
        more = f" and {len(dups) - 5} more" if len(dups) > 5 else ""
        raise CohortError(
            f"{source}, column {id_col!r}: {len(dups)} patient id(s) appear more than once: "
            f"{listed}{more}. Each patient must have exactly one row."
        )


def _to_float(values: pd.Series) -> tuple[np.ndarray, np.ndarray]:
    """Numbers, plus the mask of cells that were present but not numeric.

    Text cells are parsed in one vectorised pass; only the cells that pass fails on (blank,
    padded or text) are looked at again, stripped, so a table of numbers read as text stays quick.
    """
    s = values
    if not (s.dtype == object or pd.api.types.is_string_dtype(s)):
        num = pd.to_numeric(s, errors="coerce")
        return num.to_numpy(dtype=float), (~pd.isna(s)).to_numpy() & pd.isna(num).to_numpy()
    num = pd.to_numeric(s, errors="coerce").to_numpy(dtype=float)
    again = np.isnan(num) & s.notna().to_numpy()
    bad = np.zeros(len(s), dtype=bool)
    if again.any():
        sub = s[again].astype("string").str.strip().replace("", pd.NA)
        sub_num = pd.to_numeric(sub, errors="coerce")
        num[again] = sub_num.to_numpy(dtype=float, na_value=np.nan)
        bad[again] = (~pd.isna(sub)).to_numpy() & pd.isna(sub_num).to_numpy()
    return num, bad


def _comma_hint(values) -> str:
    if values.astype(str).str.contains(r"\d,\d", regex=True).any():
        return (" Some cells use a decimal comma while others in the column use a point, or the file is "
                "comma-separated: write all numbers with a decimal point.")
    return ""


MAX_ABS_VALUE = 1e15
"""Largest magnitude accepted in an imaging feature. Far beyond any measured quantity in its usual
unit (even first-order energy of a large volume stays near 1e12); values such as 1e308 or 9.9e37 are
export errors or missing-value codes, and squaring them overflows (common sense, not a published limit)."""


def parse_time(values: pd.Series, source, col: str, rows) -> np.ndarray:
    """Follow-up times: numeric, present, finite and not negative."""
    t, bad = _to_float(values)
    if bad.any():
        examples = ", ".join(repr(v) for v in values[bad].astype(str).unique()[:3])
        raise CohortError(
            f"{source}, column {col!r}: follow-up time is not a number in {rows_text(rows[bad])} "
            f"(values such as {examples}). Times must be numbers in one unit.{_comma_hint(values[bad])}"
        )
    miss = np.isnan(t)
    if miss.any():
        raise CohortError(
            f"{source}, column {col!r}: follow-up time is missing in {rows_text(rows[miss])}. "
            "Every patient needs a time of last follow-up or of the event."
        )
    inf = np.isinf(t)
    if inf.any():
        raise CohortError(
            f"{source}, column {col!r}: infinite follow-up time in {rows_text(rows[inf])}. Give the time of "
            "last follow-up or of the event as a number."
        )
    neg = t < 0
    if neg.any():
        raise CohortError(
            f"{source}, column {col!r}: negative follow-up time in {rows_text(rows[neg])}. "
            "Time must be counted from a start point such as diagnosis or start of treatment."
        )
    return t


def parse_event(values, source, col, rows, event_codes=None, censor_codes=None) -> np.ndarray:
    """Event flags from 0/1, true/false, or explicit codes."""
    s = values.astype("string").str.strip()
    miss = s.isna().to_numpy() | (s == "").fillna(False).to_numpy()
    if miss.any():
        raise CohortError(
            f"{source}, column {col!r}: event status is missing in {rows_text(rows[miss])}. "
            "Mark each patient as having had the event or as censored."
        )
    s = s.fillna("")
    if event_codes is not None or censor_codes is not None:
        ev = set(event_codes or ())
        ce = set(censor_codes or ())
        both = ev & ce
        if both:
            raise CohortError(f"event codes and censoring codes overlap: {', '.join(sorted(both))}.")
        is_ev = s.isin(ev).to_numpy()
        is_ce = s.isin(ce).to_numpy() if ce else ~is_ev
        if not ce:
            # Only event codes given: other values are accepted as censored only
            # when they are a single further code, so a typo is never censored.
            others = sorted(set(s[~is_ev]))
            if len(others) > 1:
                bad = ~is_ev
                raise CohortError(
                    f"{source}, column {col!r}: values {', '.join(repr(o) for o in others[:6])} are not "
                    f"event codes ({', '.join(sorted(ev))}) and more than one other value is present "
                    f"({rows_text(rows[bad])}). List the censoring codes as well."
                )
        bad = ~(is_ev | is_ce)
        if bad.any():
            found = ", ".join(repr(v) for v in s[bad].unique()[:5])
            allowed = ", ".join(repr(c) for c in sorted(ev | ce))
            raise CohortError(
                f"{source}, column {col!r}: event values {found} in {rows_text(rows[bad])} are not among "
                f"the allowed codes ({allowed})."
            )
        return is_ev
    low = s.str.lower()
    is_ev = low.isin(TRUE_WORDS).to_numpy()
    is_ce = low.isin(FALSE_WORDS).to_numpy()
    bad = ~(is_ev | is_ce)
    if bad.any():
        found = ", ".join(repr(v) for v in s[bad].unique()[:5])
        raise CohortError(
            f"{source}, column {col!r}: event values {found} in {rows_text(rows[bad])} are not 0/1 or "
            "true/false. If the column holds words such as 'dead'/'alive', give them as event and "
            "censoring codes (command line: --event-codes dead --censor-codes alive)."
        )
    return is_ev


def check_events(event: np.ndarray, source, col: str, min_events: int) -> None:
    n_ev = int(np.sum(event))
    if n_ev == 0:
        raise CohortError(
            f"{source}, column {col!r}: no events at all among {event.size} patients; nothing can be "
            "modelled. Check the event coding (which value means the event happened?)."
        )
    if n_ev < min_events:
        raise CohortError(
            f"{source}, column {col!r}: only {n_ev} events among {event.size} patients; at least "
            f"{min_events} are needed to fit and validate a survival model."
        )


def parse_features(frame: pd.DataFrame, source, rows, drop_unusable: bool) -> pd.DataFrame:
    """Imaging features must be numeric; constant or empty columns are refused or dropped."""
    out = {}
    non_numeric = []
    for c in frame.columns:
        vals, bad = _to_float(frame[c])
        if bad.any():
            examples = ", ".join(repr(v) for v in frame[c][bad].astype(str).unique()[:3])
            non_numeric.append(f"{c!r} ({rows_text(rows[bad], 4)}: {examples}){_comma_hint(frame[c][bad])}")
        out[c] = vals
    if non_numeric:
        raise CohortError(
            f"{source}: imaging feature columns must be numeric; text found in "
            f"{len(non_numeric)} column(s): {'; '.join(non_numeric[:5])}"
            f"{' ...' if len(non_numeric) > 5 else ''}. Remove or fix these cells, or move "
            "non-feature columns to the clinical table."
        )
    _check_magnitudes(out, source, rows)
    X = pd.DataFrame(out)
    all_missing = [c for c in X.columns if X[c].isna().all()]
    constant = [c for c in X.columns if c not in all_missing and X[c].nunique(dropna=True) <= 1]
    if all_missing or constant:
        parts = []
        if all_missing:
            parts.append(f"all values missing: {', '.join(all_missing[:8])}{' ...' if len(all_missing) > 8 else ''}")
        if constant:
            parts.append(f"the same value for every patient: {', '.join(constant[:8])}{' ...' if len(constant) > 8 else ''}")
        msg = f"{source}: {len(all_missing) + len(constant)} feature column(s) carry no information ({'; '.join(parts)})."
        if not drop_unusable:
            raise CohortError(
                msg + " Remove them, or let the workbench drop them (drop_unusable_features=True, "
                "command-line option --drop-unusable-features)."
            )
        warnings.warn(msg + " They were dropped.", DataQualityWarning, stacklevel=3)
        X = X.drop(columns=all_missing + constant)
        if X.shape[1] == 0:
            raise CohortError(f"{source}: no usable imaging feature is left.")
    return X


def _check_magnitudes(columns: dict, source, rows) -> None:
    """Infinite values and magnitudes beyond :data:`MAX_ABS_VALUE` are errors, per column with rows."""
    found = []
    for c, v in columns.items():
        bad = np.isinf(v) | (np.abs(np.nan_to_num(v)) > MAX_ABS_VALUE)
        if bad.any():
            found.append(f"{c!r} ({rows_text(rows[bad], 4)}: {', '.join(f'{x:g}' for x in v[bad][:3])})")
    if found:
        raise CohortError(
            f"{source}: infinite or absurdly large values (beyond {MAX_ABS_VALUE:g} in size) in "
            f"{len(found)} imaging feature column(s): {'; '.join(found[:5])}{' ...' if len(found) > 5 else ''}. "
            "These are export errors or missing-value codes, not measurements: leave the cells empty if the "
            "value is unknown, or correct them."
        )
