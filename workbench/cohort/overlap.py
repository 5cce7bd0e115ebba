"""Where the two input tables meet: patient ids and column names found in both.

* Spaces around patient ids are removed (the same patient typed ``"P01 "`` in
  one table and ``"P01"`` in the other is one patient) and the count is said.
* A column name found in both tables, other than the id, would be read twice:
  once as a clinical field and once as an imaging feature. It is an error unless
  the study says which table's copy to use (``take_from``). A centre or batch
  column may sit in both tables when the two copies agree for every patient.
"""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd

from workbench.cohort.schema import rows_text
from workbench.errors import CohortError, InputFormatWarning

TAKE_FROM_HINT = (
    "say which table's column to use (study file: [data.take_from] {col} = \"clinical\" or \"features\"; "
    "command line: --take-from {col}=clinical), or rename one of them"
)


def strip_ids(df: pd.DataFrame, source, id_col: str) -> pd.DataFrame:
    """Patient ids without surrounding spaces; says how many had them."""
    raw = df[id_col].astype(str)
    clean = raw.str.strip()
    changed = np.flatnonzero((raw != clean).to_numpy())
    if changed.size:
        examples = ", ".join(repr(v) for v in raw.iloc[changed[:3]])
        warnings.warn(
            f"{source}, column {id_col!r}: spaces around {changed.size} patient id(s) were removed "
            f"({rows_text(changed, 5)}; e.g. {examples}).",
            InputFormatWarning,
            stacklevel=3,
        )
    return df.assign(**{id_col: clean})


def split_shared_columns(feats: pd.DataFrame, clin: pd.DataFrame, fpath, cpath, columns):
    """Drop the copy of each shared column that ``columns.take_from`` leaves aside.

    Returns the two tables and the centre / batch columns found in both (to be
    compared row by row once the tables are aligned). Raises for a shared name
    the study does not resolve.
    """
    take = dict(columns.take_from)
    roles = {columns.centre, columns.batch} - {None}
    shared = [c for c in feats.columns if c in set(clin.columns) and c != columns.id]
    unknown = sorted(set(take) - set(shared))
    if unknown:
        raise CohortError(
            f"take_from names {', '.join(map(repr, unknown))}, which is not a column of both {fpath} and {cpath}."
        )
    unresolved = [c for c in shared if c not in take and c not in roles]
    if unresolved:
        cols = ", ".join(repr(c) for c in unresolved[:8]) + (" ..." if len(unresolved) > 8 else "")
        raise CohortError(
            f"column(s) {cols} appear in both {cpath} and {fpath}; each would be used twice (as a clinical "
            f"field and as an imaging feature). For each, {TAKE_FROM_HINT.format(col=unresolved[0])}."
        )
    drop_f = [c for c in shared if take.get(c) == "clinical"]
    drop_c = [c for c in shared if take.get(c) == "features"]
    both_roles = [c for c in shared if c in roles and c not in take]
    return feats.drop(columns=drop_f), clin.drop(columns=drop_c), both_roles


def check_role_agreement(col: str, clin_values, feat_values, cpath, fpath, rows) -> None:
    """A centre / batch column present in both tables must hold the same code for every patient."""
    a = pd.Series(clin_values).astype(str).str.strip().to_numpy()
    b = pd.Series(feat_values).astype(str).str.strip().to_numpy()
    differ = np.flatnonzero(a != b)
    if differ.size:
        i = differ[0]
        raise CohortError(
            f"column {col!r} is in both {cpath} and {fpath} and the two disagree for {differ.size} patient(s) "
            f"({cpath}: {rows_text(np.asarray(rows)[differ], 5)}; first: {a[i]!r} vs {b[i]!r}). Correct one "
            f"of them, or {TAKE_FROM_HINT.format(col=col)}."
        )
