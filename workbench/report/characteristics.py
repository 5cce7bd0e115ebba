"""Patient characteristics by centre and for the external cohort (the report's table of cohorts).

One column per development centre (when the study names a centre column), one for the
whole development cohort and one for the external cohort. Rows: patients, events,
median follow-up by the reverse Kaplan-Meier method (Schemper and Smith 1996), each
clinical predictor of the study (numeric: median and interquartile range; categorical
and ordinal: count and percentage per level) and its missing values. Counts are of the
analysed patients (after the complete-case exclusions shown in the patient flow).

References
----------
.. [1] Schemper M, Smith TL. A note on quantifying follow-up in studies of failure
   time. Control Clin Trials 1996;17:343-6.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from workbench.cohort.codes import code_order
from workbench.stats.km import reverse_kaplan_meier_median_followup


def reverse_km_median(time, event) -> float:
    """Median follow-up by the reverse Kaplan-Meier method (NaN when not reached)."""
    fu = reverse_kaplan_meier_median_followup(np.asarray(time, float), np.asarray(event, bool))
    return float(fu.median) if fu.median is not None else float("nan")


def _numeric(v: pd.Series) -> pd.Series:
    # "<0.5"-style cells count at their limit (the value the model enters for them)
    return pd.to_numeric(v.astype(str).str.replace("<", "", regex=False).str.strip(), errors="coerce")


def _missing(v: pd.Series) -> np.ndarray:
    return (v.isna() | (v.astype(str).str.strip() == "")).to_numpy()


def _fmt(x: float, digits: int = 1) -> str:
    return "n/a" if not np.isfinite(x) else f"{x:.{digits}f}"


def _followup(x: float) -> str:
    return NOT_REACHED if not np.isfinite(x) else f"{x:.1f}"


NOT_REACHED = "not reached†"


def followup_notes(cells) -> list[str]:
    """The note under the table when a group's median follow-up is not reached (its cell is marked †)."""
    if NOT_REACHED not in cells:
        return []
    return ["† Median follow-up not reached: more than half of these patients were still under follow-up at their "
            "longest follow-up (few were censored), so the reverse Kaplan-Meier curve never fell to one half."]


def _groups(result) -> list[tuple[str, object]]:
    """(column heading, cohort) pairs: development centres, development, external."""
    out = []
    c = result.cohort
    if c.centre is not None and len(set(map(str, c.centre))) > 1:
        centre = np.asarray(c.centre).astype(str)
        for lev in code_order(c.centre):
            out.append((f"Centre {lev}", c.mask(centre == lev)))
    out.append(("Development, all", c))
    if result.external_prepared is not None:
        out.append(("External", result.external_prepared.cohort))
    return out


def characteristics_table(result) -> dict:
    """Headings, rows and notes of the characteristics table (plain data for the template and tests).

    Returns
    -------
    dict
        ``columns``: column headings; ``rows``: dicts with ``label``, ``cells`` (strings,
        one per column) and ``level`` (True for a category level row, indented);
        ``notes``: what the numbers are.
    """
    unit = result.spec.data.time_unit
    groups = _groups(result)
    rows = [
        {"label": "Patients", "cells": [str(c.n) for _, c in groups], "level": False},
        {"label": "Events (%)", "cells": [f"{c.n_events} ({100 * c.n_events / c.n:.0f}%)" for _, c in groups],
         "level": False},
        {"label": f"Median follow-up, reverse Kaplan-Meier ({unit})",
         "cells": [_followup(reverse_km_median(c.time, c.event)) for _, c in groups], "level": False},
    ]
    for p in result.spec.predictors:
        name = p.label or p.column
        unit_txt = f", {p.unit}" if p.unit else ""
        cols = [c.clinical[p.column] if p.column in c.clinical.columns else pd.Series([np.nan] * c.n)
                for _, c in groups]
        if p.kind in ("linear", "spline"):
            cells = []
            for v in cols:
                x = _numeric(v).dropna()
                cells.append("n/a" if x.empty else
                             f"{x.median():.3g} ({x.quantile(0.25):.3g} to {x.quantile(0.75):.3g})")
            rows.append({"label": f"{name}{unit_txt}, median (IQR)", "cells": cells, "level": False})
        else:
            levels = list(p.levels) if getattr(p, "levels", None) else code_order(
                pd.concat([v[~_missing(v)].astype(str).str.strip() for v in cols]).to_numpy())
            rows.append({"label": f"{name}, n (%)", "cells": [""] * len(groups), "level": False})
            for lev in levels:
                cells = []
                for v in cols:
                    ok = ~_missing(v)
                    k = int((v[ok].astype(str).str.strip() == str(lev)).sum())
                    cells.append(f"{k} ({100 * k / max(int(ok.sum()), 1):.0f}%)")
                rows.append({"label": str(lev), "cells": cells, "level": True})
        miss = [int(_missing(v).sum()) for v in cols]
        if any(miss):
            rows.append({"label": f"{name}: missing, n (%)",
                         "cells": [f"{k} ({100 * k / len(v):.0f}%)" for k, v in zip(miss, cols, strict=True)],
                         "level": True})
    notes = ["Analysed patients (after the complete-case exclusions of the patient flow). Numeric predictors: "
             "median and interquartile range of the recorded values (values below a detection limit counted at "
             "the limit); percentages of the patients with a recorded value. Missing values are those left for "
             "imputation inside each fit."]
    notes += followup_notes(rows[2]["cells"])  # the follow-up row
    cols = [g for g, _ in groups]
    parts = (["by centre"] if cols[0].startswith("Centre ") else []) + (["for the external cohort"]
                                                                         if "External" in cols else [])
    caption = "Patient characteristics" + (" " + " and ".join(parts) if parts else "")
    return {"columns": cols, "rows": rows, "notes": notes, "caption": caption}
