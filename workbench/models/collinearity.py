"""What adding imaging does to the clinical terms: collinearity with the signature, lost level order.

Two diagnostics of a fitted model that adds an imaging term to the clinical
terms (the combined model, or the clinical + volume model):

* :func:`signature_collinearity` -- the signature score's Pearson correlation
  with each clinical design column, and each column's variance inflation factor
  (VIF) without and with the signature in the design, on the cohort given (the
  development cohort in a run). A large VIF with the signature explains wide
  intervals and shrunken clinical effects in the combined model.
* :func:`level_order_changes` / :func:`warn_level_order` -- an ordered
  categorical predictor (levels declared in the study, at least three) whose
  level coefficients are monotone in the declared order in the clinical model
  but not in the model with imaging: the imaging term carries part of the
  predictor's information (tumour volume carrying stage, typically), and the
  combined model's level effects should not be read as the predictor's effect.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass

import numpy as np

from workbench.errors import LevelOrderWarning
from workbench.models.cox import SIGNATURE_TERM
from workbench.stats.collinearity import CollinearityTable, score_collinearity


def signature_collinearity(model, cohort) -> CollinearityTable | None:
    """Correlation and VIF of a combined model's signature score with its clinical design columns.

    None when the model has no signature or the signature kept no feature.
    """
    if not hasattr(model, "signature_score") or not tuple(getattr(model, "selected_features_", ())):
        return None
    tr = model.transformer_
    design = tr.transform(cohort)
    score = model.signature_score(cohort)[design.rows_used]
    terms = [next(t.column for t in tr.terms_ if c in t.columns) for c in tr.columns_]
    return score_collinearity(design.X, tr.columns_, score, terms=terms, score_name=SIGNATURE_TERM)


@dataclass(frozen=True)
class LevelOrderChange:
    """An ordered categorical term whose level effects lose their order in a second model.

    ``levels`` in the declared order; ``before`` and ``after`` the log hazard ratios
    of each level against the reference (0 at the reference) in the two models.
    """

    term: str
    label: str
    levels: tuple[str, ...]
    before: tuple[float, ...]
    after: tuple[float, ...]


def _level_effects(model, column: str):
    """(term, log hazard ratios per level in display order) of a categorical term, or None."""
    for t in model.transformer_.terms_:
        if t.column == column and t.kind == "categorical":
            coef = np.asarray(model.fit_.coef[t.start:t.stop], dtype=float)
            it = iter(coef)
            return t, tuple(0.0 if lv == t.reference else float(next(it)) for lv in t.levels)
    return None


def _monotone(values) -> bool:
    d = np.diff(np.asarray(values, dtype=float))
    return bool(np.all(d >= 0) or np.all(d <= 0))


def level_order_changes(clinical, other) -> tuple[LevelOrderChange, ...]:
    """Ordered categorical terms monotone in ``clinical`` but not in ``other`` (two fitted Cox models).

    A categorical predictor counts as ordered when the study declares its levels
    (``levels = [...]``) and at least three occur in training; the order is the
    declared one.
    """
    out = []
    for spec in getattr(clinical, "predictors", ()):
        if spec.kind != "categorical" or spec.levels is None:
            continue
        a, b = _level_effects(clinical, spec.column), _level_effects(other, spec.column)
        if a is None or b is None or len(a[0].levels) < 3 or a[0].levels != b[0].levels:
            continue
        if _monotone(a[1]) and not _monotone(b[1]):
            out.append(LevelOrderChange(spec.column, spec.label or spec.column, a[0].levels, a[1], b[1]))
    return tuple(out)


def _hr_list(levels, logs) -> str:
    return ", ".join(f"{lv} {np.exp(x):.2f}" for lv, x in zip(levels, logs, strict=True))


def warn_level_order(models: dict, labels: dict, baseline: str = "clinical") -> tuple[LevelOrderChange, ...]:
    """One :class:`LevelOrderWarning` per model and ordered term that loses its order against ``baseline``."""
    base = models.get(baseline)
    if base is None or not hasattr(base, "transformer_") or not hasattr(base, "fit_"):
        return ()
    found = []
    for name, m in models.items():
        if name == baseline or not hasattr(m, "transformer_") or not hasattr(m, "fit_"):
            continue
        what = ("the imaging signature carries part of this predictor's information (see the collinearity "
                "table)" if hasattr(m, "signature_score") else "the added imaging term carries part of this "
                "predictor's information")
        for ch in level_order_changes(base, m):
            found.append(ch)
            warnings.warn(
                f"{ch.label}: the hazard ratios follow the declared level order in the {labels.get(baseline, baseline)} "
                f"model ({_hr_list(ch.levels, ch.before)}) but not in the {labels.get(name, name)} model "
                f"({_hr_list(ch.levels, ch.after)}): {what}. Read that model's level effects as adjusted for "
                f"imaging, not as the effect of {ch.label}.", LevelOrderWarning, stacklevel=2)
    return tuple(found)
