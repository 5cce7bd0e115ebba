"""How test results are worded in figures, captions and the report: one place, our own words.

A chi-squared test reads "chi-squared = 160.3 with 1 degree of freedom, p < 0.001";
p-values below 0.001 are given as "p < 0.001", others with three decimals.
"""

from __future__ import annotations

import numpy as np

__all__ = ["chi_squared_text", "p_text"]


def p_text(p: float) -> str:
    """``"p < 0.001"`` or ``"p = 0.042"``."""
    p = float(p)
    if not np.isfinite(p):
        return "p not available"
    return "p < 0.001" if p < 0.001 else f"p = {p:.3f}"


def chi_squared_text(statistic: float, df: int, p: float) -> str:
    """``"chi-squared = 160.3 with 1 degree of freedom, p < 0.001"``."""
    df = int(df)
    return f"chi-squared = {float(statistic):.1f} with {df} degree{'s' if df != 1 else ''} of freedom, {p_text(p)}"
