"""A patient's raw values checked against the training data: ranges, flags, the one-row cohort.

:class:`TrainingRanges` (from a fitted model or a saved bundle) holds what the training
patients showed; :func:`check_patient` turns one patient's values as typed (clinical fields,
imaging features, scanner / batch) into :class:`PatientChecks` naming every value outside
them, and :func:`patient_cohort` into the one-row cohort a model scores. Patient files are
read here too (:func:`read_patient_rows`, :func:`read_patient_file`). Used by
:mod:`workbench.estimate` (survival), :mod:`workbench.estimate_competing` and the app;
:mod:`workbench.estimate` still offers every public name.
"""

from __future__ import annotations

import difflib
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from workbench.cohort.core import Cohort
from workbench.cohort.outcome import make_outcome
from workbench.errors import CohortError
from workbench.preprocess.values import MISSING_TOKENS, canonical_level, parse_measurements
from workbench.report.bundle import (
    Bundle,
    ClinicalInput,
    TrainingSummary,
    describe_inputs,
)

N_WORST = 5  # imaging features named in the out-of-range report


# ---------------------------------------------------------------- records


@dataclass(frozen=True)
class RangeFlag:
    """One input value outside what the training patients showed."""

    field: str
    kind: str  # "continuous", "categorical", "imaging" or "batch"
    value: str
    expected: str
    message: str


@dataclass(frozen=True)
class PatientChecks:
    """Outcome of the input checks for one patient.

    ``flags`` covers clinical fields and the batch; imaging features are
    reported as a count beyond the 1st-99th training percentiles plus the
    ``imaging_worst`` few (furthest outside, relative to that percentile span).
    """

    flags: tuple[RangeFlag, ...] = ()
    imaging_checked: int = 0
    imaging_outside: int = 0
    imaging_worst: tuple[RangeFlag, ...] = ()
    imputed: tuple[str, ...] = ()

    @property
    def out_of_range(self) -> bool:
        return bool(self.flags) or self.imaging_outside > 0


@dataclass(frozen=True)
class TrainingRanges:
    """What the training cohort looked like, for checking a new patient.

    Build it with :func:`ranges_from_bundle` or :func:`ranges_from_model`.
    """

    clinical: tuple[ClinicalInput, ...]
    imaging_features: tuple[str, ...] = ()
    imaging_p01: dict = field(default_factory=dict)
    imaging_p99: dict = field(default_factory=dict)
    harmonised: bool = False
    batches: tuple[str, ...] = ()
    batch_column: str = "batch"
    risk_cutpoints: tuple[float, ...] | None = None
    last_event_time: float = float("nan")
    time_unit: str = "months"
    known_columns: frozenset = frozenset()


# ---------------------------------------------------------------- training ranges


def ranges_from_model(model, training: TrainingSummary | None = None, *, name: str | None = None,
                      batch_column: str = "batch", time_unit: str | None = None) -> TrainingRanges:
    """Training ranges from a fitted model, completed by a training summary when given.

    The model itself knows its clinical ranges and levels and its known batches;
    the imaging percentiles, risk-group cut-points and last event time come from
    ``training`` (:func:`workbench.report.bundle.summarise_training`), looked up
    under ``name`` (default ``model.name``). Fields of the training imaging pool
    and the batch field are accepted (and left aside) even when this model
    does not read them.
    """
    inp = describe_inputs(model)
    key = name or getattr(model, "name", "")
    t = training
    return TrainingRanges(
        clinical=inp.clinical, imaging_features=inp.imaging_features,
        imaging_p01=dict(t.imaging_p01) if t else {}, imaging_p99=dict(t.imaging_p99) if t else {},
        harmonised=inp.harmonised, batches=inp.batches, batch_column=batch_column,
        risk_cutpoints=t.risk_cutpoints.get(key) if t else None,
        last_event_time=t.last_event_time if t else float("nan"),
        time_unit=time_unit or (t.time_unit if t else "months"),
        # the whole imaging pool is known even to a model that reads none of it
        known_columns=frozenset(t.imaging_p01) | {batch_column} if t else frozenset(),
    )


def ranges_from_bundle(bundle: Bundle, name: str) -> TrainingRanges:
    """Training ranges of model ``name`` of a loaded bundle."""
    inp, t = bundle.inputs(name), bundle.training
    return TrainingRanges(
        clinical=inp.clinical, imaging_features=inp.imaging_features,
        imaging_p01=dict(t.imaging_p01), imaging_p99=dict(t.imaging_p99), harmonised=inp.harmonised,
        batches=inp.batches, batch_column=bundle.spec.data.batch or "batch",
        risk_cutpoints=t.risk_cutpoints.get(name), last_event_time=t.last_event_time,
        time_unit=bundle.time_unit, known_columns=bundle.known_columns,
    )


# ---------------------------------------------------------------- input checks


def _is_missing(v) -> bool:
    if v is None:
        return True
    if isinstance(v, (float, np.floating)) and np.isnan(v):
        return True
    return isinstance(v, str) and v.strip().lower() in MISSING_TOKENS


def _one_row(patient) -> dict:
    if isinstance(patient, pd.DataFrame):
        if len(patient) != 1:
            raise CohortError(
                f"a patient estimate needs exactly one patient; the table has {len(patient)} rows. "
                "Give one row per estimate.")
        return {str(k).strip(): v for k, v in patient.iloc[0].items()}
    if isinstance(patient, Mapping):
        return {str(k).strip(): v for k, v in patient.items()}
    raise CohortError(f"the patient's values must be a dict or a one-row table, not {type(patient).__name__}.")


def _describe(c: ClinicalInput) -> str:
    unit = f" {c.unit}" if c.unit else ""
    if c.kind in ("categorical", "ordinal"):
        return "one of " + ", ".join(repr(lv) for lv in c.levels)
    return f"a number in{unit or ' the training unit'} (training range {c.train_min:g} to {c.train_max:g}{unit})"


def _clinical(c: ClinicalInput, v, flags: list, imputed: list):
    """The value to pass on (None = missing, to be imputed), adding flags; raises on bad input."""
    where = f"field {c.column!r}" + (f" ({c.label})" if c.label and c.label != c.column else "")
    if _is_missing(v):
        if c.missing == "impute":
            imputed.append(f"{c.column}: missing, the training value {c.impute_value!r} was filled in")
            return None
        raise CohortError(f"{where} is empty for this patient; the model needs {_describe(c)}. Fill it in.")
    if c.kind in ("categorical", "ordinal"):
        level = canonical_level(v)
        if level not in c.levels:
            flags.append(RangeFlag(c.column, "categorical", level, _describe(c),
                                   f"{where} = {level!r} was not seen among the training patients ({_describe(c)})"))
            if c.unseen == "missing" and c.missing == "impute":
                imputed.append(f"{c.column}: unseen level {level!r} treated as missing, the training value "
                               f"{c.impute_value!r} was filled in")
                return None
        return v
    parsed = parse_measurements(pd.Series([v], dtype=object))
    if parsed.invalid[0]:
        raise CohortError(f"{where} is {v!r}, which is not a number; expected {_describe(c)}.")
    x, below = float(parsed.value[0]), bool(parsed.below_limit[0])
    if below and c.detection_limit is None:
        raise CohortError(f"{where} is {v!r}, a value below a detection limit, but the model has no "
                          f"detection limit for this field; expected {_describe(c)}.")
    modelled_low = c.has_limit_indicator and (below or x < c.detection_limit)
    if not modelled_low and (x < c.train_min or x > c.train_max):
        side = "below" if x < c.train_min else "above"
        flags.append(RangeFlag(c.column, "continuous", f"{x:g}", f"{c.train_min:g} to {c.train_max:g}",
                               f"{where} = {x:g} is {side} the training range {c.train_min:g} to "
                               f"{c.train_max:g}{' ' + c.unit if c.unit else ''}; the model extrapolates"))
    return v


def _imaging(names, row: dict, p01: dict, p99: dict):
    absent = [f for f in names if f not in row or _is_missing(row[f])]
    if absent:
        raise CohortError(
            f"{len(absent)} imaging feature(s) are missing or empty for this patient (first: "
            f"{', '.join(map(repr, absent[:5]))}); the model needs all {len(names)} imaging features "
            "of its training pool, as produced by the same extraction settings.")
    values, bad = np.empty(len(names)), []
    for j, f in enumerate(names):
        v = row[f]
        try:
            if isinstance(v, (bool, np.bool_)):
                raise ValueError
            values[j] = float(v.strip() if isinstance(v, str) else v)
        except (TypeError, ValueError):
            bad.append(f"{f} = {v!r}")
    if bad or not np.all(np.isfinite(values)):
        bad = bad or [f"{f} = {row[f]!r}" for f, x in zip(names, values, strict=True) if not np.isfinite(x)]
        raise CohortError(f"imaging feature(s) hold values that are not finite numbers: {'; '.join(bad[:5])}. "
                          "Correct them in the patient's file.")
    outside = []
    for f, x in zip(names, values, strict=True):
        lo, hi = p01.get(f), p99.get(f)
        if lo is None or hi is None or not (x < lo or x > hi):
            continue
        span = max(hi - lo, 1e-12 * max(abs(hi), abs(lo), 1.0))
        excess = (lo - x) / span if x < lo else (x - hi) / span
        outside.append((excess, RangeFlag(
            f, "imaging", f"{x:.6g}", f"{lo:.6g} to {hi:.6g}",
            f"{f} = {x:.6g} lies {excess:.2f} percentile spans beyond the training 1st-99th "
            f"percentiles ({lo:.6g} to {hi:.6g})")))
    outside.sort(key=lambda t: -t[0])
    checked = sum(1 for f in names if f in p01 and f in p99)
    return values, checked, len(outside), tuple(fl for _, fl in outside[:N_WORST])


def _validate(patient, ranges: TrainingRanges, ignore) -> tuple[Cohort, PatientChecks, list]:
    row = _one_row(patient)
    clinical_cols = [c.column for c in ranges.clinical]
    batch_keys = {ranges.batch_column, "batch"} if ranges.harmonised else set()
    allowed = set(clinical_cols) | set(ranges.imaging_features) | batch_keys | set(ranges.known_columns)
    allowed |= {str(x) for x in ignore}
    unknown = [k for k in row if k not in allowed]
    if unknown:
        hints = []
        for k in unknown[:5]:
            close = difflib.get_close_matches(k, sorted(allowed), n=1)
            hints.append(f"{k!r}" + (f" (did you mean {close[0]!r}?)" if close else ""))
        raise CohortError(
            f"the patient's values include field(s) the model does not know: {', '.join(hints)}"
            f"{' and more' if len(unknown) > 5 else ''}. Remove or rename them (clinical fields expected: "
            f"{', '.join(clinical_cols)}), or skip them (command line: --ignore "
            f"{','.join(unknown[:5])}; Python: ignore=[...]).")
    flags, imputed = [], []
    values = {c.column: _clinical(c, row.get(c.column), flags, imputed) for c in ranges.clinical}
    batch = None
    if ranges.harmonised:
        key = next((k for k in (ranges.batch_column, "batch") if k in row and not _is_missing(row[k])), None)
        if key is None:
            raise CohortError(
                f"field {ranges.batch_column!r} (scanner / batch) is empty or absent; the model harmonises "
                f"imaging features by batch and needs it (known: {', '.join(ranges.batches)}).")
        batch = str(row[key]).strip()
        if batch not in ranges.batches:
            flags.append(RangeFlag(ranges.batch_column, "batch", batch, ", ".join(ranges.batches),
                                   f"batch {batch!r} was not among the training batches "
                                   f"({', '.join(ranges.batches)})"))
    feats = ranges.imaging_features
    vals, checked, n_out, worst = _imaging(feats, row, ranges.imaging_p01, ranges.imaging_p99) if feats \
        else (np.empty(0), 0, 0, ())
    cohort = Cohort(
        ids=np.array(["patient"]), y=make_outcome([0.0], [False]),
        clinical=pd.DataFrame({k: pd.Series([v], dtype=object) for k, v in values.items()}),
        features=pd.DataFrame(vals[None, :], columns=list(feats)) if feats else pd.DataFrame(index=range(1)),
        time_unit=ranges.time_unit, batch=None if batch is None else np.array([batch]),
    )
    # an unseen level that could not become a missing value has no coefficient to use
    unestimable = [f for f in flags if f.kind == "categorical" and values[f.field] is not None]
    return cohort, PatientChecks(tuple(flags), checked, n_out, worst, tuple(imputed)), unestimable


def check_patient(patient, training_ranges: TrainingRanges, *, ignore: Sequence[str] = ()) -> PatientChecks:
    """Check one patient's raw values against the training data, without predicting.

    A categorical level the training patients never had is flagged here;
    :func:`estimate_patient` refuses it unless the predictor treats unseen
    levels as missing and imputes them.

    Raises
    ------
    CohortError
        For missing values the model cannot impute, unknown fields, text in
        numeric fields; each message names the field.
    """
    return _validate(patient, training_ranges, ignore)[1]


def patient_cohort(patient, training_ranges: TrainingRanges, *, ignore: Sequence[str] = ()):
    """One patient's checked raw values as a one-row :class:`Cohort`, with the checks and the
    categorical flags that have no coefficient (for routes other than :func:`estimate_patient`,
    such as :mod:`workbench.estimate_competing`)."""
    return _validate(patient, training_ranges, ignore)


# ---------------------------------------------------------------- files and text


def read_patient_rows(path) -> list[dict]:
    """Read patients' raw values from a CSV, TSV or Excel file (header row first, one row per patient)."""
    p = Path(path)
    if not p.is_file():
        raise CohortError(f"{p}: patient file not found.")
    suffix = p.suffix.lower()
    try:
        if suffix in (".csv", ".txt", ".tsv"):
            df = pd.read_csv(p, dtype=str, keep_default_na=False, sep="\t" if suffix == ".tsv" else ",")
        elif suffix in (".xlsx", ".xls"):
            df = pd.read_excel(p, dtype=object)
        else:
            raise CohortError(f"{p}: a patient file must be .csv, .tsv or .xlsx, not {suffix or 'without extension'}.")
    except (ValueError, OSError, pd.errors.ParserError) as exc:
        raise CohortError(f"{p}: could not be read as a table ({exc}).") from None
    df = df.dropna(how="all")
    if df.empty:
        raise CohortError(f"{p} has no data rows; give a header row and one row per patient.")
    return [_one_row(df.iloc[[i]]) for i in range(len(df))]


def read_patient_file(path) -> dict:
    """Read one patient's raw values from a one-row CSV, TSV or Excel file (header row first)."""
    rows = read_patient_rows(path)
    if len(rows) != 1:
        raise CohortError(f"{path} has {len(rows)} data rows; a patient file holds one patient (a header row and "
                          "one row).")
    return rows[0]
