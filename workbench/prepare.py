"""From a study file to the analysis cohort: read, choose the imaging pool, handle missing values.

Everything here is decided before any resampling and without looking at the
outcome, so doing it once on the whole cohort leaks nothing: which columns form
the imaging pool (by name pattern) and which patients are complete cases for
the predictors handled by complete-case analysis.
"""

from __future__ import annotations

import fnmatch
import hashlib
import platform
from dataclasses import dataclass, replace
from importlib import metadata

import numpy as np

from workbench.cohort.core import Cohort
from workbench.cohort.io import read_cohort
from workbench.errors import CohortError, SpecError
from workbench.study import StudySpec

PROVENANCE_PACKAGES = (
    "survival-workbench", "numpy", "pandas", "scipy", "scikit-learn", "scikit-survival",
    "lifelines", "matplotlib", "joblib",
)


@dataclass(frozen=True)
class PreparedCohort:
    """The analysis cohort and what was set aside on the way."""

    cohort: Cohort
    n_read: int
    incomplete_ids: tuple[str, ...]
    incomplete_by_column: dict
    pool: tuple[str, ...]
    excluded_features: tuple[str, ...]


def _matches(name: str, patterns) -> bool:
    return any(fnmatch.fnmatchcase(name, p) for p in patterns)


def select_pool(cohort: Cohort, include=("*",), exclude=()) -> tuple[Cohort, tuple[str, ...]]:
    """Keep the imaging features whose names match ``include`` and not ``exclude``."""
    names = cohort.feature_names
    keep = [c for c in names if _matches(c, include) and not _matches(c, exclude)]
    if not keep:
        raise SpecError(
            f"[imaging] include {list(include)} / exclude {list(exclude)} leave no imaging feature; "
            f"feature names start like {', '.join(names[:5])}."
        )
    dropped = tuple(c for c in names if c not in keep)
    return replace(cohort, features=cohort.features[keep]), dropped


def drop_incomplete(cohort: Cohort, predictors) -> tuple[Cohort, tuple[str, ...], dict]:
    """Remove patients missing a predictor handled by complete-case analysis.

    Blank cells count as missing; ``"<0.5"``-style values are not missing.
    """
    missing_cols = [p.column for p in predictors if p.column not in cohort.clinical.columns]
    if missing_cols:
        raise SpecError(
            f"clinical predictor(s) {', '.join(missing_cols)} are not columns of the clinical table "
            f"(columns: {', '.join(map(str, cohort.clinical.columns))})."
        )
    drop = np.zeros(cohort.n, dtype=bool)
    by_col = {}
    for p in predictors:
        if p.missing != "complete_case":
            continue
        v = cohort.clinical[p.column]
        miss = v.isna().to_numpy() | (v.astype(str).str.strip() == "").to_numpy()
        if miss.any():
            by_col[p.column] = int(miss.sum())
        drop |= miss
    if drop.all():
        raise CohortError("every patient misses at least one complete-case predictor; nothing is left to model.")
    ids = tuple(cohort.ids[drop])
    return (cohort.mask(~drop) if drop.any() else cohort), ids, by_col


def prepare_cohort(spec: StudySpec, *, external: bool = False) -> PreparedCohort:
    """Read the study's (training or external) cohort and make it ready for modelling."""
    d = spec.data
    if external:
        if spec.external is None:
            raise SpecError("the study has no [external] section.")
        fpath, cpath = spec.external.features, spec.external.clinical
    else:
        fpath, cpath = d.features, d.clinical
    cohort = read_cohort(
        fpath, cpath, d.column_map(), on_unmatched=d.on_unmatched, drop_unusable_features=d.drop_unusable_features
    )
    n_read = cohort.n
    cohort, excluded = select_pool(cohort, spec.imaging.include, spec.imaging.exclude)
    cohort, incomplete, by_col = drop_incomplete(cohort, spec.predictors)
    return PreparedCohort(cohort, n_read, incomplete, by_col, tuple(cohort.feature_names), excluded)


def package_versions() -> dict:
    out = {"python": platform.python_version()}
    for name in PROVENANCE_PACKAGES:
        try:
            out[name] = metadata.version(name)
        except metadata.PackageNotFoundError:
            out[name] = "not installed"
    return out


def spec_digest(text: str) -> str:
    return hashlib.sha256(text.encode()).hexdigest()
