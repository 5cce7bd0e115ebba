"""Reading raw clinical cells: numbers, values below a detection limit, levels, blanks.

Clinical tables arrive as typed by people and laboratory systems: ``"<0.5"`` for a
value below the assay's detection limit, ``"NA"`` or an empty cell for missing,
numbers stored as text, grades written as ``2`` in one file and ``"2"`` in the
next. This module turns such cells into arrays, vectorised over the column, and
never guesses: a cell it cannot read is reported, not dropped.
"""

from __future__ import annotations

import re
import warnings
from dataclasses import dataclass

import numpy as np
import pandas as pd
from numpy.typing import ArrayLike

from workbench.errors import CohortError, DataQualityWarning, ModelError, SpecError

MISSING_TOKENS = frozenset({"", "na", "n/a", "nan", "null", "."})
"""Cell texts (after trimming, any letter case) read as a missing value."""

_MEASUREMENT = re.compile(
    r"^(?P<below><=?|\u2264)?\s*"
    r"(?P<number>[+-]?(?:\d+(?:\.\d*)?|\.\d+)(?:[eE][+-]?\d+)?)$"
)


@dataclass(frozen=True)
class ParsedMeasurements:
    """A column of numeric cells after parsing.

    Attributes
    ----------
    value : ndarray of float, shape (n,)
        The number written in the cell; for ``"<0.5"`` this is the stated limit
        0.5. NaN where the cell is missing or unreadable.
    below_limit : ndarray of bool, shape (n,)
        True where the cell was written as below a limit (``"<x"``, ``"<=x"``).
    missing : ndarray of bool, shape (n,)
        True for empty cells, NaN and the texts in ``MISSING_TOKENS``.
    invalid : ndarray of bool, shape (n,)
        True for cells that are neither a number, a ``"<x"`` value nor missing
        (for example ``"abc"``, ``">100"``, ``"0,5"`` or infinity).
    """

    value: np.ndarray
    below_limit: np.ndarray
    missing: np.ndarray
    invalid: np.ndarray


def parse_measurements(values: ArrayLike) -> ParsedMeasurements:
    """Parse a column of numeric cells that may hold detection-limit texts.

    Parameters
    ----------
    values : array-like or pandas Series of shape (n,)
        Numbers, numeric text, ``"<x"`` / ``"< x"`` / ``"<=x"`` texts, blanks.

    Returns
    -------
    ParsedMeasurements
    """
    s = values if isinstance(values, pd.Series) else pd.Series(np.asarray(values, dtype=object))
    n = len(s)
    if pd.api.types.is_numeric_dtype(s.dtype) and not pd.api.types.is_bool_dtype(s.dtype):
        v = s.to_numpy(dtype=float, na_value=np.nan)
        missing = np.isnan(v)
        invalid = np.isinf(v)
        v = np.where(invalid, np.nan, v)
        return ParsedMeasurements(v, np.zeros(n, dtype=bool), missing, invalid)

    # Parse each distinct cell once: clinical columns repeat values heavily, and
    # per-cell regular expressions over the whole column dominate otherwise.
    codes, uniques = pd.factorize(s.to_numpy(dtype=object), use_na_sentinel=True)
    table = np.array([_parse_cell(u) for u in uniques] + [(np.nan, False, True, False)], dtype=object)
    picked = table[codes]  # code -1 (NaN, None) picks the trailing "missing" row
    return ParsedMeasurements(
        value=picked[:, 0].astype(float),
        below_limit=picked[:, 1].astype(bool),
        missing=picked[:, 2].astype(bool),
        invalid=picked[:, 3].astype(bool),
    )


def _parse_cell(cell: object) -> tuple[float, bool, bool, bool]:
    """(value, below_limit, missing, invalid) of one distinct cell."""
    if isinstance(cell, (bool, np.bool_)):
        return np.nan, False, False, True
    if isinstance(cell, (int, float, np.integer, np.floating)):
        f = float(cell)
        if np.isnan(f):
            return np.nan, False, True, False
        return (f, False, False, False) if np.isfinite(f) else (np.nan, False, False, True)
    text = str(cell).strip()
    if text.lower() in MISSING_TOKENS:
        return np.nan, False, True, False
    match = _MEASUREMENT.match(text)
    if match is None:
        return np.nan, False, False, True
    # Python's float() rounds correctly; pandas' fast text parser can be one unit
    # in the last place off, which would move knots and limits by a hair.
    f = float(match["number"])
    if not np.isfinite(f):
        return np.nan, False, False, True
    return f, match["below"] is not None, False, False


_WHOLE_DECIMAL = re.compile(r"^[+-]?\d+\.0+$")


def _canonical(cell: object) -> str:
    # Grades typed as 2, 2.0 and "2" in different files must be the same level.
    if isinstance(cell, (bool, np.bool_)):
        return str(bool(cell))
    if isinstance(cell, (int, np.integer)):
        return str(int(cell))
    if isinstance(cell, (float, np.floating)):
        f = float(cell)
        return str(int(f)) if np.isfinite(f) and f.is_integer() else repr(f)
    text = str(cell).strip()
    # "2.0" typed as text (a spreadsheet export of a numeric column) is the level "2" too.
    if _WHOLE_DECIMAL.match(text):
        return text.split(".", 1)[0].lstrip("+")
    return text


def level_keys(values: ArrayLike) -> tuple[np.ndarray, np.ndarray]:
    """Canonical text keys of categorical cells.

    Parameters
    ----------
    values : array-like or pandas Series of shape (n,)

    Returns
    -------
    keys : ndarray of object, shape (n,)
        Trimmed text of each cell; whole numbers lose a trailing ``.0`` so that
        ``2``, ``2.0`` and ``"2"`` give the same key. ``None`` where missing.
    missing : ndarray of bool, shape (n,)
    """
    # plain numpy and a dict: this runs for every categorical term of every model fit and
    # prediction in every resample, where pandas' per-call overhead dominated the run time
    obj = values.to_numpy(dtype=object) if isinstance(values, pd.Series) else np.asarray(values, dtype=object)
    obj = obj.ravel()
    missing = np.asarray(pd.isna(obj), dtype=bool)
    keys = np.full(obj.size, None, dtype=object)
    present = np.flatnonzero(~missing)
    if present.size:
        lookup: dict = {}
        out = []
        for u in obj[present]:
            k = (type(u), u)  # 1, 1.0 and True are equal as dict keys but not as cells
            if k not in lookup:
                key = _canonical(u)
                lookup[k] = None if key.lower() in MISSING_TOKENS else key
            out.append(lookup[k])
        keys[present] = out
    missing = np.fromiter((k is None for k in keys), dtype=bool, count=keys.size)
    return keys, missing


def canonical_level(level: object) -> str:
    """The key :func:`level_keys` gives a single cell (for declared levels)."""
    return _canonical(level)


def natural_order(keys) -> list[str]:
    """Sort level keys with numbers first (numerically), then text (alphabetically)."""

    def sort_key(k: str):
        try:
            return (0, float(k), k)
        except ValueError:
            return (1, 0.0, k.lower())

    return sorted(keys, key=sort_key)


def level_order(seen, allowed=None) -> list[str]:
    """The order of a categorical or ordinal predictor's levels among the rows it is learned on.

    ``seen``: the level keys present (a set, or a dict of counts). The declared levels in their
    order (those absent left out), or, when none are declared, :func:`natural_order`.
    """
    return natural_order(seen) if allowed is None else [lv for lv in allowed if lv in seen]


def reference_level(order, reference: str | None = None) -> str | None:
    """The reference level: the one the study names, else the first level of ``order``."""
    if reference is not None:
        return reference
    return order[0] if len(order) else None


def describe_rows(mask: ArrayLike, index: pd.Index, ids: ArrayLike | None = None, limit: int = 8) -> str:
    """Human-readable list of the rows where ``mask`` is true.

    Parameters
    ----------
    mask : array-like of bool, shape (n,)
    index : pandas Index of length n
        Row labels of the table as the user passed it.
    ids : array-like of shape (n,), optional
        Patient identifiers, named beside the rows when given.
    limit : int
        At most this many rows are listed; the rest are counted.
    """
    pos = np.flatnonzero(np.asarray(mask, dtype=bool))
    shown = pos[:limit]
    labels = ", ".join(str(index[i]) for i in shown)
    text = f"row {labels}" if pos.size == 1 else f"rows {labels}"
    if isinstance(index, pd.RangeIndex) and index.start == 0 and index.step == 1:
        text += " (counting from 0)"
    if ids is not None:
        ids = np.asarray(ids)
        text += " (patient " + ", ".join(str(ids[i]) for i in shown) + ")"
    if pos.size > limit:
        text += f" and {pos.size - limit} more"
    return text


# ------------------------------------------------------------------ reading with messages


@dataclass(frozen=True)
class RowContext:
    """Row labels and patient ids of the table being read, for error messages."""

    index: pd.Index
    ids: np.ndarray | None = None

    def rows(self, mask) -> str:
        return describe_rows(mask, self.index, self.ids)

    def take(self, pos: np.ndarray) -> RowContext:
        return RowContext(self.index[pos], None if self.ids is None else self.ids[pos])

    @classmethod
    def plain(cls, n: int) -> RowContext:
        return cls(pd.RangeIndex(n), None)


def column_name(column: str, label: str = "") -> str:
    """``column 'crp' (C-reactive protein)`` for messages."""
    return f"column {column!r}" if label in ("", column) else f"column {column!r} ({label})"


def examples(values: np.ndarray, mask: np.ndarray, limit: int = 4) -> str:
    """The first few distinct offending values, quoted."""
    uniq = list(dict.fromkeys(str(v) for v in np.asarray(values, dtype=object)[mask]))
    return ", ".join(repr(u) for u in uniq[:limit]) + (" ..." if len(uniq) > limit else "")


def read_numbers(column: str, label: str, series: pd.Series, where: RowContext) -> ParsedMeasurements:
    """:func:`parse_measurements`, raising a clear error for unreadable cells."""
    parsed = parse_measurements(series)
    if parsed.invalid.any():
        raise CohortError(
            f"{column_name(column, label)} has values that are not numbers: "
            f"{examples(series.to_numpy(dtype=object), parsed.invalid)} in {where.rows(parsed.invalid)}. "
            "Expected a number, a value below a detection limit such as '<0.5', or an empty cell "
            "for missing. Correct these cells in the clinical table."
        )
    return parsed


def apply_detection_limit(
    column: str, label: str, parsed: ParsedMeasurements, limit: float | None, where: RowContext
) -> tuple[np.ndarray, np.ndarray]:
    """Values with below-limit cells set to the limit, and the below-limit mask.

    A cell is below the limit if written as ``"<x"`` or if its number is smaller
    than ``limit``. With ``limit=None``, a ``"<x"`` cell is an error: the
    predictor has not said how such values are to be modelled.
    """
    below = parsed.below_limit & ~parsed.missing
    if limit is None:
        if below.any():
            raise CohortError(
                f"{column_name(column, label)} has values below a detection limit "
                f"({examples(parsed.value, below)} after '<') in {where.rows(below)}, but its "
                "predictor does not say how to handle them. Set detection_limit = 'auto' (read the "
                "limit from the '<' values) or the limit as a number in the study file."
            )
        return parsed.value, below
    loose = below & (parsed.value > limit * (1 + 1e-12))
    if loose.any():
        warnings.warn(
            f"{column_name(column, label)}: {where.rows(loose)} state a detection limit above "
            f"{limit:.6g}, the limit the model uses; they are treated as below {limit:.6g}, which "
            "may not hold. Check the laboratory's limits.",
            DataQualityWarning,
            stacklevel=4,
        )
    with np.errstate(invalid="ignore"):
        below = below | (~parsed.missing & (parsed.value < limit))
    return np.where(below, limit, parsed.value), below


def check_positive(
    column: str, label: str, transform: str | None, value: np.ndarray, missing: np.ndarray, where: RowContext
) -> None:
    """Raise if a log transform would meet a value of zero or below."""
    if transform is None:
        return
    bad = ~missing & ~(value > 0)
    if bad.any():
        raise SpecError(
            f"{column_name(column, label)} has values of zero or below ({examples(value, bad)}) in "
            f"{where.rows(bad)}, which a {transform} transform cannot take. Check these values, or "
            "use no transform."
        )


def read_levels(
    column: str, label: str, series: pd.Series, allowed, unseen: str, where: RowContext, stage: str
) -> tuple[np.ndarray, np.ndarray]:
    """Level keys and missing mask, applying the unseen-level policy.

    ``unseen == "error"`` raises for a level outside ``allowed`` naming the
    column, the value and the rows; ``"missing"`` turns it into a missing value.
    """
    keys, missing = level_keys(series)
    unseen_mask = ~missing & ~np.isin(keys.astype(str), np.asarray(allowed, dtype=str))
    if unseen_mask.any():
        if unseen == "error":
            what = "the declared levels" if stage == "fit" else "the levels seen in the training patients"
            raise ModelError(
                f"{column_name(column, label)} has level(s) {examples(keys, unseen_mask)} in "
                f"{where.rows(unseen_mask)} that are not among {what} "
                f"({', '.join(map(repr, allowed))}). Correct or merge these values, or set "
                "unseen = 'missing' for this predictor to treat them as missing."
            )
        missing = missing | unseen_mask
    return keys, missing
