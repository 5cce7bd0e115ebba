"""Reading the two input tables and joining them into a :class:`Cohort`.

Users bring a table of imaging features and a table of clinical fields with
follow-up. Both are read as text first, so that values such as ``"<0.5"`` or
``"0042"`` survive untouched and every conversion problem can be reported with
the file, column and row it came from. Input files are only ever read.
"""

from __future__ import annotations

import hashlib
import warnings
from dataclasses import dataclass, field
from pathlib import Path

import pandas as pd

from workbench.cohort.causes import check_competing_codes, parse_cause
from workbench.cohort.codes import code_text
from workbench.cohort.core import TIME_UNITS, Cohort, CohortSource
from workbench.cohort.followup import check_followup
from workbench.cohort.outcome import make_outcome
from workbench.cohort.overlap import check_role_agreement, split_shared_columns, strip_ids
from workbench.cohort.readers import READERS, file_digest, read_table  # noqa: F401  (re-exported)
from workbench.cohort.schema import (
    check_events,
    check_ids,
    check_required_columns,
    parse_event,
    parse_features,
    parse_time,
    rows_text,
)
from workbench.errors import CohortError, DataQualityWarning


@dataclass(frozen=True)
class ColumnMap:
    """Which columns of the input tables carry what.

    Attributes
    ----------
    id : str
        Patient identifier, present in both tables.
    time : str
        Follow-up time (clinical table).
    event : str
        Event indicator (clinical table): 0/1, true/false, or codes listed in
        ``event_codes`` / ``censor_codes``.
    time_unit : {"days", "weeks", "months", "years"}
    event_codes, censor_codes : tuple of str, optional
        Explicit codes, e.g. ``("dead",)`` and ``("alive",)``. When only
        ``event_codes`` is given, every other non-missing value is refused rather
        than guessed; give both lists to be explicit.
    centre : str, optional
        Hospital or centre (either table), for leave-one-centre-out validation.
    batch : str, optional
        Scanner or acquisition batch (either table), for harmonisation.
    competing_codes : tuple of str, optional
        Codes of the event column that mark a competing event (e.g. ``("other",)``
        next to ``event_codes = ("cancer",)``): the cohort then carries a cause per
        patient (0 censored, 1 event, 2 competing) and ``y`` censors competing events.
        Needs ``event_codes``.
    take_from : dict (or pairs) of column name to {"clinical", "features"}, optional
        For a column name found in both tables (other than the id), which
        table's column to use; the other copy is left aside. Without an entry
        such a column is an error, because it would be read twice (once as a
        clinical field, once as an imaging feature).
    """

    id: str = "patient_id"
    time: str = "time"
    event: str = "event"
    time_unit: str = "months"
    event_codes: tuple[str, ...] | None = None
    censor_codes: tuple[str, ...] | None = None
    centre: str | None = None
    batch: str | None = None
    take_from: tuple[tuple[str, str], ...] = field(default=(), repr=False)
    # repr=False keeps the data hash of studies without competing events as it was
    competing_codes: tuple[str, ...] | None = field(default=None, repr=False)

    def __post_init__(self):
        if self.time_unit not in TIME_UNITS:
            raise CohortError(
                f"time unit {self.time_unit!r} is not recognised; use one of "
                f"{', '.join(TIME_UNITS)}."
            )
        for name in ("event_codes", "censor_codes", "competing_codes"):
            v = getattr(self, name)
            if v is not None:
                object.__setattr__(self, name, tuple(str(c).strip() for c in v))
        if self.competing_codes is not None:
            check_competing_codes(self.event_codes, self.censor_codes, self.competing_codes, CohortError)
        pairs = dict(self.take_from or ())
        for col, table in pairs.items():
            if table not in ("clinical", "features"):
                raise CohortError(
                    f"take_from[{col!r}] is {table!r}; it says which table's {col!r} column to use: "
                    "'clinical' or 'features'."
                )
        object.__setattr__(self, "take_from", tuple(sorted((str(k), str(v)) for k, v in pairs.items())))


def read_cohort(
    features_path,
    clinical_path,
    columns: ColumnMap,
    *,
    on_unmatched: str = "error",
    drop_unusable_features: bool = False,
    min_events: int = 10,
    features_sheet: str | None = None,
    clinical_sheet: str | None = None,
) -> Cohort:
    """Read, validate and join the imaging-feature and clinical tables.

    Parameters
    ----------
    features_path, clinical_path : path-like
        The two tables. Every column of the features table other than the id,
        centre and batch columns is an imaging feature and must be numeric.
        ``features_path`` None reads a clinical-only cohort (no imaging features).
    columns : ColumnMap
        Column roles and the time unit.
    on_unmatched : {"error", "intersect"}
        What to do with patient ids found in only one table: stop with a message
        (default) or keep the patients found in both and record the others in
        ``cohort.source.dropped_ids``.
    drop_unusable_features : bool
        Constant or all-missing feature columns stop the run by default; with
        True they are dropped with a :class:`DataQualityWarning` listing them.
    min_events : int
        Fewer events than this is an error (default 10, common practice: no
        survival model can be fitted or checked honestly below it).
    features_sheet, clinical_sheet : str, optional
        Excel workbooks: the sheet to read (needed when several sheets hold data).

    Returns
    -------
    Cohort
    """
    if on_unmatched not in ("error", "intersect"):
        raise CohortError(f"on_unmatched must be 'error' or 'intersect', not {on_unmatched!r}.")
    # a clinical-only study has no features table: the join is the clinical table with itself
    clinical_only = features_path is None
    cpath = Path(clinical_path)
    fpath = cpath if clinical_only else Path(features_path)
    clin = read_table(cpath, sheet=clinical_sheet)
    feats = (clin[[columns.id]].copy() if clinical_only and columns.id in clin
             else read_table(fpath, sheet=features_sheet))

    check_required_columns(clin, cpath, {"patient id": columns.id, "time": columns.time, "event": columns.event})
    check_required_columns(feats, fpath, {"patient id": columns.id})
    for role in ("centre", "batch"):
        col = getattr(columns, role)
        if col is not None and col not in clin.columns and col not in feats.columns:
            check_required_columns(clin, f"{cpath} or {fpath}", {role: col}, pool=list(clin.columns) + list(feats.columns))

    feats, clin, both_roles = split_shared_columns(feats, clin, fpath, cpath, columns)
    check_ids(clin, cpath, columns.id)
    check_ids(feats, fpath, columns.id)
    clin = strip_ids(clin, cpath, columns.id)
    feats = strip_ids(feats, fpath, columns.id)

    dropped = _match_ids(feats, clin, fpath, cpath, columns.id, on_unmatched)
    only_clin = tuple(sorted(dropped - set(feats[columns.id]))) if dropped and not clinical_only else ()
    only_feat = tuple(sorted(dropped - set(clin[columns.id]))) if dropped else ()
    if dropped:
        keep = set(feats[columns.id]) & set(clin[columns.id])
        feats = feats[feats[columns.id].isin(keep)]
        clin = clin[clin[columns.id].isin(keep)]

    # Order by the clinical table; remember original file rows for messages.
    clin = clin.reset_index(names="_row")
    feats = feats.reset_index(names="_row")
    merged_rows = clin[[columns.id]].merge(feats[[columns.id, "_row"]], on=columns.id, how="left")
    feats = feats.set_index("_row").loc[merged_rows["_row"].to_numpy()].reset_index()
    clin_rows = clin["_row"].to_numpy()

    time = parse_time(clin[columns.time], cpath, columns.time, clin_rows)
    cause = None
    if columns.competing_codes:
        cause = parse_cause(clin[columns.event], cpath, columns.event, clin_rows, columns.event_codes,
                            columns.competing_codes, columns.censor_codes)
        event = cause == 1
    else:
        event = parse_event(
            clin[columns.event], cpath, columns.event, clin_rows, columns.event_codes, columns.censor_codes
        )
    check_events(event, cpath, columns.event, min_events)
    check_followup(time, event, columns.time_unit, cpath, columns.time, clin_rows)
    for col in both_roles:
        check_role_agreement(col, clin[col], feats[col], cpath, fpath, clin_rows)

    def pick(col):
        if col is None:
            return None
        if col in clin.columns:
            src, frame, rows = cpath, clin, clin_rows
        else:
            src, frame, rows = fpath, feats, feats["_row"].to_numpy()
        v = frame[col]
        if v.isna().any():
            bad = rows[v.isna().to_numpy()]
            raise CohortError(f"{src}, column {col!r}: missing values in {rows_text(bad)}; every patient needs one.")
        return code_text(v)

    centre = pick(columns.centre)
    batch = pick(columns.batch)

    skip = {columns.id, "_row", columns.centre, columns.batch}
    feature_cols = [c for c in feats.columns if c not in skip]
    if clinical_only:
        feature_cols = []
    elif not feature_cols:
        raise CohortError(f"{fpath}: no imaging feature columns found besides the id/centre/batch columns.")
    X = parse_features(feats[feature_cols], fpath, feats["_row"].to_numpy(), drop_unusable_features)
    if clinical_only:
        X = pd.DataFrame(index=pd.RangeIndex(len(feats)))

    clin_cols = [c for c in clin.columns if c not in {"_row", columns.time, columns.event}]
    clinical = clin[clin_cols].reset_index(drop=True)
    ids = clinical[columns.id].to_numpy().astype(str)
    clinical = clinical.drop(columns=[columns.id])

    n_missing_feat = int(X.isna().sum().sum())
    if n_missing_feat:
        cols = X.columns[X.isna().any()].tolist()
        warnings.warn(
            f"{fpath}: {n_missing_feat} missing imaging values in {len(cols)} column(s) "
            f"(first: {', '.join(cols[:5])}); they will be imputed from training rows inside each fit.",
            DataQualityWarning,
            stacklevel=2,
        )

    digest = hashlib.sha256()
    parts = ["" if clinical_only else file_digest(fpath), file_digest(cpath), repr(columns), on_unmatched,
             str(drop_unusable_features)]
    # settings added later enter only when used, so earlier hashes of the same study stay valid
    parts += [f"{k}={v}" for k, v in (("take_from", columns.take_from), ("features_sheet", features_sheet),
                                      ("clinical_sheet", clinical_sheet),
                                      ("competing_codes", columns.competing_codes)) if v]
    for part in parts:
        digest.update(part.encode())
    source = CohortSource(
        feature_file="" if clinical_only else str(fpath),
        clinical_file=str(cpath),
        id_column=columns.id,
        time_column=columns.time,
        event_column=columns.event,
        time_unit=columns.time_unit,
        centre_column=columns.centre,
        batch_column=columns.batch,
        data_hash=digest.hexdigest(),
        dropped_ids=tuple(sorted(dropped)),
        only_in_clinical=only_clin,
        only_in_features=only_feat,
    )
    return Cohort(
        ids=ids,
        y=make_outcome(time, event),
        clinical=clinical,
        features=X.reset_index(drop=True),
        time_unit=columns.time_unit,
        centre=centre,
        batch=batch,
        source=source,
        cause=cause,
    )


def _match_ids(feats, clin, fpath, cpath, id_col, on_unmatched) -> set[str]:
    f_ids, c_ids = set(feats[id_col]), set(clin[id_col])
    only_f = sorted(f_ids - c_ids)
    only_c = sorted(c_ids - f_ids)
    if not only_f and not only_c:
        return set()
    both = len(f_ids & c_ids)
    parts = []
    if only_f:
        parts.append(f"{len(only_f)} id(s) only in {fpath} (first: {', '.join(only_f[:5])})")
    if only_c:
        parts.append(f"{len(only_c)} id(s) only in {cpath} (first: {', '.join(only_c[:5])})")
    msg = f"patient ids do not match between the two tables: {'; '.join(parts)}; {both} ids are in both."
    if on_unmatched == "error" or both == 0:
        hint = (
            " No id is shared: check that the id column is the same in both files."
            if both == 0
            else " Fix the tables, or keep only the patients found in both (on_unmatched='intersect', "
            "command-line option --keep-matched)."
        )
        raise CohortError(msg + hint)
    warnings.warn(msg + f" Keeping the {both} matched patients.", DataQualityWarning, stacklevel=3)
    return set(only_f) | set(only_c)

