"""The Design page's typed inputs turned into study values, and back.

The clinical-predictor table shown for editing (one row per clinical column, filled
from the current study or suggested from the data) and the :class:`PredictorSpec`
tuple read back from the edited table; pattern lines and horizons typed as text.
No Streamlit calls: pure pandas, testable alone.
"""

from __future__ import annotations

from dataclasses import replace

import pandas as pd

from workbench.errors import WorkbenchError
from workbench.preprocess.predictor_spec import PredictorSpec
from workbench.preprocess.values import level_keys, level_order, reference_level
from workbench.study import StudySpec


def _is_numeric(values: pd.Series) -> bool:
    v = values.dropna().astype(str).str.strip().str.lstrip("<")
    v = v[v != ""]
    return not v.empty and pd.to_numeric(v, errors="coerce").notna().mean() > 0.9


LEVELLED = ("categorical", "ordinal")


def reference_used(values: pd.Series, kind: str, levels=None, reference: str | None = None) -> str:
    """The reference level the clinical transformer takes on these rows (the one named, else the first
    level in declared or natural order: workbench.preprocess.values), or "" (not a levelled kind)."""
    if kind not in LEVELLED:
        return ""
    keys, missing = level_keys(values)
    seen = set(keys[~missing].astype(str))
    return str(reference_level(level_order(seen, tuple(levels) if levels else None), reference) or "")


def _predictor_table(cohort, template: StudySpec | None, data) -> pd.DataFrame:
    chosen = {p.column: p for p in (template.predictors if template else ())}
    every = template is None  # a new study: every clinical column is suggested, the user unticks
    skip = {data.centre, data.batch}
    rows = []
    for col in cohort.clinical.columns:
        if col in skip:
            continue
        p = chosen.get(col)
        numeric = _is_numeric(cohort.clinical[col])
        if p is None:
            p = PredictorSpec(column=col, kind="linear" if numeric else "categorical")
        rows.append({
            "use": every or col in chosen,
            "column": col,
            "kind": p.kind,
            "transform": p.transform or "",
            "missing": p.missing,
            "reference": reference_used(cohort.clinical[col], p.kind, p.levels, p.reference),
            "levels": ", ".join(p.levels or ()),
            "detection_limit": "" if p.detection_limit is None else str(p.detection_limit),
            "knots": int(p.knots) if p.knots else None,
            "label": p.label if p.label and p.label != col else "",
            "unit": p.unit or "",
        })
    return pd.DataFrame(rows)


def _predictors_from(table: pd.DataFrame, template: StudySpec | None, cohort=None) -> tuple[PredictorSpec, ...]:
    """Predictor specs from the edited table; settings the table does not show are kept from the template.

    A reference level equal to the one the transformer takes by itself (shown in the table, see
    :func:`reference_used`) is left unnamed unless the template named it: the study keeps
    following the levels' order."""
    known = {p.column: p for p in (template.predictors if template else ())}
    out = []
    for i, r in table.iterrows():
        if not bool(r["use"]):
            continue
        col = str(r["column"])
        limit = str(r.get("detection_limit") or "").strip()
        if limit and limit != "auto":
            try:
                limit = float(limit)
            except ValueError:
                raise WorkbenchError(
                    f"predictor {col!r} (row {i + 1}): detection limit {limit!r} is neither 'auto' nor a number."
                ) from None
        levels = tuple(x.strip() for x in str(r.get("levels") or "").split(",") if x.strip())
        knots = r.get("knots")
        reference = str(r.get("reference") or "").strip() or None
        if (reference is not None and cohort is not None and col in cohort.clinical.columns
                and (col not in known or known[col].reference is None)
                and reference == reference_used(cohort.clinical[col], str(r["kind"]), levels)):
            reference = None
        fields = dict(
            kind=str(r["kind"] or "linear"),
            transform=str(r["transform"]) or None,
            knots=int(knots) if knots is not None and pd.notna(knots) and r["kind"] == "spline" else None,
            reference=reference,
            levels=levels or None,
            detection_limit=limit or None,
            missing=str(r["missing"] or "complete_case"),
            label=str(r.get("label") or "").strip() or col,
            unit=str(r.get("unit") or "").strip(),
        )
        out.append(replace(known[col], **fields) if col in known else PredictorSpec(column=col, **fields))
    return tuple(out)


def _lines(text: str) -> tuple[str, ...]:
    return tuple(x.strip() for x in text.replace(",", "\n").splitlines() if x.strip())


def _horizons(text: str) -> tuple[float, ...]:
    try:
        return tuple(float(x) for x in text.replace(";", ",").split(",") if x.strip())
    except ValueError:
        raise WorkbenchError(
            f"horizons must be numbers separated by commas, such as 12, 24, 36; got {text!r}."
        ) from None
