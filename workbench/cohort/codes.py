"""Group codes (centre, scanner / batch) as the text the user wrote, in a natural order.

CSV and TSV tables are read as text, so a centre written ``10`` stays ``"10"``.
Parquet and Excel files can hold such codes as numbers, and a numeric column with
a gap or read through a float type turns ``10`` into ``10.0``; :func:`code_text`
writes whole numbers back without the decimal part, so the same code reads the
same from every file type. :func:`code_order` sorts codes that are all numbers by
value (1, 2, 10, not 1, 10, 2) and other codes as text.
"""

from __future__ import annotations

import numpy as np
import pandas as pd


def code_text(values: pd.Series) -> np.ndarray:
    """Codes as stripped text; whole numbers stored as floats lose their ``.0``."""
    if pd.api.types.is_numeric_dtype(values) and not pd.api.types.is_bool_dtype(values):
        x = values.to_numpy(dtype=float)
        if np.all(np.isfinite(x)) and np.all(x == np.round(x)):
            return np.array([str(int(v)) for v in x], dtype=object)
        return np.array([repr(float(v)) if not float(v).is_integer() else str(int(v)) for v in x], dtype=object)
    out = values.astype(str).str.strip()
    # "10.0" written by a float column in a text file is the code "10" as well
    return out.str.replace(r"^(-?\d+)\.0+$", r"\1", regex=True).to_numpy()


def _number(text: str) -> float | None:
    try:
        return float(text)
    except ValueError:
        return None


def code_order(codes) -> list[str]:
    """Distinct codes in natural order: by value when every code is a number, else as text."""
    u = sorted({str(c) for c in codes})
    nums = [_number(c) for c in u]
    if u and all(n is not None for n in nums):
        return [c for _, c in sorted(zip(nums, u, strict=True))]
    return u
