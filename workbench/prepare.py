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
import warnings
from dataclasses import dataclass, replace
from importlib import metadata

import numpy as np
import pandas as pd
from scipy.stats import rankdata

from workbench.cohort.core import Cohort
from workbench.cohort.io import read_cohort
from workbench.cohort.schema import parse_features
from workbench.errors import CohortError, DataQualityWarning, PostOutcomeWarning, SpecError
from workbench.study import StudySpec

PROVENANCE_PACKAGES = (
    "survival-workbench", "numpy", "pandas", "scipy", "scikit-learn", "scikit-survival",
    "lifelines", "matplotlib", "joblib", "numba",
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
    reproducibility: pd.DataFrame | None = None  # ICC per feature of the pool (preprocess/reproducibility.py)
    unreproducible: tuple[str, ...] = ()  # features removed for an ICC below [imaging.reproducibility] min_icc


def _matches(name: str, patterns) -> bool:
    return any(fnmatch.fnmatchcase(name, p) for p in patterns)


def select_pool(cohort: Cohort, include=("*",), exclude=()) -> tuple[Cohort, tuple[str, ...]]:
    """Keep the imaging features whose names match ``include`` and not ``exclude``."""
    names = cohort.feature_names
    if not names:  # a clinical-only study: no pool to select from
        return cohort, ()
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


POST_OUTCOME_AUC = 0.95
"""A column that separates patients with and without the event this well (AUC of the
column for the event flag, either direction) is suspicious (common practice threshold)."""


def check_post_outcome(cohort: Cohort, predictors=(), *, min_missing: int = 5) -> tuple[str, ...]:
    """Warn about predictors that look as if they were recorded after the outcome.

    Two patterns, each a :class:`PostOutcomeWarning` naming the column:

    * missing only for patients who had the event (at least ``min_missing`` of them),
      as when a value is recorded at a follow-up visit the patient did not live to;
    * a column that separates patients with and without the event almost perfectly
      (AUC >= 0.95 in either direction for numeric columns; a level of at least 10
      patients in which everyone, or no one, had the event for categorical columns).

    Only flags, never changes the data. Returns the messages.
    """
    event = cohort.event
    n1, n0 = int(event.sum()), int((~event).sum())
    msgs = []
    clinical_cols = [p.column for p in predictors if p.column in cohort.clinical.columns]
    for col in clinical_cols:
        v = cohort.clinical[col]
        miss = v.isna().to_numpy() | (v.astype(str).str.strip() == "").to_numpy()
        if miss.sum() >= min_missing and event[miss].all():
            msgs.append(
                f"clinical column {col!r} is missing for {int(miss.sum())} patients, all of whom had the event: "
                "it may have been recorded after the outcome (e.g. at a later visit). Check how it was collected."
            )
        num = pd.to_numeric(v.astype(str).str.replace("<", "", regex=False), errors="coerce")
        if num.notna().mean() < 0.9:
            keys = v[~miss].astype(str).str.strip()
            ev = pd.Series(event[~miss], index=keys.index)
            for level, grp in ev.groupby(keys):
                if grp.size >= 10 and grp.mean() in (0.0, 1.0):
                    word = "every" if grp.mean() == 1.0 else "no"
                    msgs.append(
                        f"clinical column {col!r}: {word} patient with value {level!r} ({grp.size} patients) had the "
                        "event; a value that predicts the outcome perfectly may have been recorded after it."
                    )
    X = cohort.features
    if n1 and n0 and X.shape[1]:
        A = X.to_numpy(dtype=float)
        A = np.where(np.isnan(A), np.nanmedian(A, axis=0), A)
        ranks = rankdata(A, axis=0)
        auc = (ranks[event].sum(axis=0) - n1 * (n1 + 1) / 2.0) / (n1 * n0)
        for j in np.flatnonzero(np.maximum(auc, 1 - auc) >= POST_OUTCOME_AUC):
            msgs.append(
                f"imaging feature {X.columns[j]!r} separates patients with and without the event almost perfectly "
                f"(AUC {max(auc[j], 1 - auc[j]):.2f}); a measurement taken after the outcome, or one derived from it, "
                "would look like this. Check its source before using it."
            )
        holes = X.isna().to_numpy()
        for j in np.flatnonzero((holes.sum(axis=0) >= min_missing) & ~(holes & ~event[:, None]).any(axis=0)):
            msgs.append(
                f"imaging feature {X.columns[j]!r} is missing only for patients who had the event "
                f"({int(holes[:, j].sum())}); it may have been recorded after the outcome."
            )
    for m in msgs:
        warnings.warn(m, PostOutcomeWarning, stacklevel=2)
    return tuple(msgs)


def prepare_cohort(spec: StudySpec, *, external: bool = False, unreproducible=None) -> PreparedCohort:
    """Read the study's (training or external) cohort and make it ready for modelling.

    ``unreproducible`` (external only): the features the training run's reproducibility
    filter removed, when the caller has them; otherwise they are recomputed from the
    training tables.
    """
    d = spec.data
    if external:
        if spec.external is None:
            raise SpecError("the study has no [external] section.")
        src = spec.external
    else:
        src = d
    cohort = read_cohort(
        src.features, src.clinical, d.column_map(), on_unmatched=d.on_unmatched,
        drop_unusable_features=d.drop_unusable_features,
        features_sheet=src.features_sheet, clinical_sheet=src.clinical_sheet,
    )
    n_read = cohort.n
    cohort, excluded = select_pool(cohort, spec.imaging.include, spec.imaging.exclude)
    icc_table, removed = None, ()
    if d.repeats and not external:
        cohort, icc_table, removed = filter_reproducible(cohort, spec)
    if not external:
        check_post_outcome(cohort, spec.predictors)
    cohort, incomplete, by_col = drop_incomplete(cohort, spec.predictors)
    prepared = PreparedCohort(cohort, n_read, incomplete, by_col, tuple(cohort.feature_names), excluded,
                              icc_table, removed)
    if d.repeats and external:
        # the models never saw the features the training run removed for poor reproducibility
        removed = _training_unreproducible(spec) if unreproducible is None else unreproducible
        prepared = without_unreproducible(prepared, removed)
    return prepared


def _training_unreproducible(spec: StudySpec) -> tuple[str, ...]:
    """The features the study's reproducibility filter removes from the training pool."""
    d = spec.data
    cohort = read_cohort(d.features, d.clinical, d.column_map(), on_unmatched=d.on_unmatched,
                         drop_unusable_features=d.drop_unusable_features, features_sheet=d.features_sheet,
                         clinical_sheet=d.clinical_sheet)
    cohort, _ = select_pool(cohort, spec.imaging.include, spec.imaging.exclude)
    return filter_reproducible(cohort, spec)[2]


def without_unreproducible(prepared: PreparedCohort, removed) -> PreparedCohort:
    """A new cohort's prepared tables without the features the training run removed for poor reproducibility."""
    gone = set(removed)
    if not gone:
        return prepared
    c = prepared.cohort
    keep = [f for f in c.feature_names if f not in gone]
    return replace(prepared, cohort=replace(c, features=c.features[keep]), pool=tuple(keep))


def filter_reproducible(cohort: Cohort, spec: StudySpec) -> tuple[Cohort, pd.DataFrame, tuple[str, ...]]:
    """Remove pool features whose ICC on the repeat table is below the study's threshold.

    Uses no outcome (see :mod:`workbench.preprocess.reproducibility`), so it is done once
    on the whole cohort. Returns the cohort with the kept features, the ICC table and the
    removed features; an error if none is kept.
    """
    from workbench.cohort.readers import read_table
    from workbench.preprocess.reproducibility import feature_icc, reproducible_features

    d, r = spec.data, spec.imaging.reproducibility
    table = read_table(d.repeats, sheet=d.repeats_sheet)
    if d.id not in table.columns:
        raise CohortError(f"{d.repeats}: the repeat table has no patient id column {d.id!r} (the [data] id).")
    table[d.id] = table[d.id].astype(str).str.strip()
    pool = list(cohort.feature_names)
    missing = [c for c in pool if c not in table.columns]
    if missing:
        raise CohortError(f"{d.repeats}: the repeat table lacks {len(missing)} imaging feature column(s) of the "
                          f"pool (e.g. {', '.join(missing[:5])}); it must hold the same features.")
    # the imaging table's own parsing rules and messages (numbers, decimal commas, magnitudes); a column
    # constant or empty among the repeats is numeric too and is put back (its ICC is undefined: removed)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", DataQualityWarning)
        parsed = parse_features(table[pool], d.repeats, table.index.to_numpy(), drop_unusable=True)
    values = pd.DataFrame({c: parsed[c] if c in parsed else pd.to_numeric(table[c], errors="coerce") for c in pool})
    values = values.set_axis(pd.Index(table[d.id]), axis=0)
    first = pd.DataFrame(cohort.features[pool].to_numpy(float), index=pd.Index(cohort.ids.astype(str)), columns=pool)
    try:
        icc_table = feature_icc(first, values, r.form)
    except CohortError as exc:
        raise CohortError(f"{d.repeats}: {exc}") from None
    kept, removed = reproducible_features(icc_table, r.min_icc)
    if not kept:
        raise CohortError(f"{d.repeats}: no imaging feature reaches {r.form} >= {r.min_icc:g} (highest "
                          f"{icc_table['icc'].max():.2f}); lower [imaging.reproducibility] min_icc or check the "
                          "repeat measurements.")
    return replace(cohort, features=cohort.features[kept]), icc_table, tuple(removed)


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
