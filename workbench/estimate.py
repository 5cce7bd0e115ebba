"""Individual-patient estimates: survival with confidence limits, risk group and range checks.

:func:`estimate_patient` applies one fitted model to one patient's raw values
(clinical fields as typed, imaging features, scanner / batch) and returns a
frozen :class:`PatientEstimate`: the survival curve on a time grid, survival at
the horizons with pointwise confidence limits, the linear predictor, the
patient's risk group among the training tertiles, flags for every value outside
the training data, and the caution text every estimate carries.

:func:`check_patient` runs the input checks alone; :func:`read_patient_file`
reads a one-row CSV or Excel file; :func:`format_estimate` gives the plain text
the command line prints.
"""

from __future__ import annotations

import difflib
import warnings
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field, replace
from pathlib import Path

import numpy as np
import pandas as pd

from workbench.cohort.core import Cohort
from workbench.cohort.outcome import make_outcome
from workbench.cohort.summary import CAUTION
from workbench.errors import CohortError, ModelError, SpecError
from workbench.models.base import as_times, clone_model
from workbench.models.cox import ClinicalCox, CombinedCox
from workbench.preprocess.values import MISSING_TOKENS, canonical_level, parse_measurements
from workbench.report.bundle import (
    Bundle,
    ClinicalInput,
    TrainingSummary,
    describe_inputs,
)
from workbench.stats.riskgroups import assign_groups, group_labels
from workbench.units import time_phrase

METHODS = ("delta", "bootstrap")
MIN_BOOTSTRAP = 20  # fewer refits give unstable 2.5th / 97.5th percentiles (common practice)
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


@dataclass(frozen=True)
class HorizonEstimate:
    horizon: float
    survival: float
    lower: float
    upper: float


@dataclass(frozen=True)
class PatientEstimate:
    """An individual estimate (see :func:`estimate_patient`).

    ``lower``/``upper`` are NaN when the model and method give no interval;
    ``linear_predictor`` is NaN for the forest, whose ``risk_score`` is the
    ensemble cumulative hazard instead.
    """

    model: str
    time_unit: str
    times: np.ndarray
    survival: np.ndarray
    lower: np.ndarray
    upper: np.ndarray
    horizons: tuple[HorizonEstimate, ...]
    conf_level: float
    interval_method: str  # "delta", "bootstrap" or "none"
    n_bootstrap: int
    linear_predictor: float
    risk_score: float
    risk_group: str | None
    risk_cutpoints: tuple[float, ...] | None
    checks: PatientChecks
    notes: tuple[str, ...] = ()
    caution: str = CAUTION
    alive_at: float | None = None
    conditional: tuple[HorizonEstimate, ...] = ()
    """Survival to each later horizon given survival to ``alive_at`` (S(t)/S(s)), with the
    limits of the same interval method; empty without ``alive_at``."""

    @property
    def out_of_range(self) -> bool:
        return self.checks.out_of_range


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


# ---------------------------------------------------------------- estimate


def estimate_patient(model, patient, horizons, *, training_ranges: TrainingRanges | None = None,
                     conf_level: float = 0.95, method: str = "delta", bootstrap_models=None,
                     times=None, ignore: Sequence[str] = (), alive_at: float | None = None) -> PatientEstimate:
    """Survival estimate with confidence limits for one new patient.

    Parameters
    ----------
    model : fitted ClinicalCox, CombinedCox, PenalisedAllCox or ForestModel
    patient : dict or one-row DataFrame
        Raw values: clinical fields as typed (``"<0.5"`` allowed where the model
        has a detection limit), imaging features and the scanner / batch field.
    horizons : sequence of float
        Times (in the training time unit) for survival with confidence limits.
    training_ranges : TrainingRanges, optional
        From :func:`ranges_from_bundle` or :func:`ranges_from_model`; default
        :func:`ranges_from_model` of ``model`` alone (no imaging percentiles,
        no risk groups).
    conf_level : float
    method : {"delta", "bootstrap"}
        ``"delta"``: pointwise limits on the log cumulative hazard from the Cox
        model's covariance and baseline variance (Cox models only; the forest and
        the penalised model get no interval this way). For the combined model
        the signature score enters as one covariate, so the interval treats the
        signature's coefficients (and its harmonisation and feature selection)
        as fixed and is too narrow by the signature's own uncertainty.
        ``"bootstrap"``: percentile limits over ``bootstrap_models``, models of
        the same kind refitted on bootstrap samples of the training cohort (see
        :func:`refit_bootstrap`); this carries every fitted step's uncertainty.
    bootstrap_models : sequence of fitted models, optional
    times : array-like, optional
        Time grid of the curve; default 121 points from 0 to the last horizon.
    ignore : sequence of str
        Further fields of the patient's record to leave aside (for example an id).
    alive_at : float, optional
        A time the patient is known to have survived to (a follow-up visit): adds the
        conditional survival S(t | alive at s) = S(t) / S(s) at every later horizon, with
        limits from the same method ("delta": over (s, t] from the Cox model, see
        :func:`workbench.competing.conditional.conditional_survival_cox`; "bootstrap":
        percentiles of the refits' ratios; none for the forest and penalised model).

    Returns
    -------
    PatientEstimate

    References
    ----------
    .. [1] Link CL. Confidence intervals for the survival function using Cox's
       proportional hazard model with covariates. Biometrics 1984;40:601-9.
    .. [2] Efron B, Tibshirani RJ. An Introduction to the Bootstrap. Chapman &
       Hall, 1993, chapter 13 (percentile intervals).
    """
    if method not in METHODS:
        raise SpecError(f"method {method!r} is not known; choose 'delta' or 'bootstrap'.")
    if not 0 < conf_level < 1:
        raise SpecError(f"conf_level must lie between 0 and 1 (for example 0.95), not {conf_level}.")
    h = np.atleast_1d(np.asarray(horizons, dtype=float))
    if h.size == 0 or not np.all(np.isfinite(h)) or np.any(h <= 0):
        raise SpecError(f"horizons must be positive times, for example [12, 24, 36]; got {list(h)}.")
    ranges = training_ranges if training_ranges is not None else ranges_from_model(model)
    if alive_at is not None:
        a = float(alive_at)
        if not np.isfinite(a) or a <= 0 or a >= float(h.max()):
            unit = getattr(ranges, "time_unit", "") or ""
            raise SpecError(f"the time the patient is known to be alive (--alive-at) must be after 0 and before "
                            f"the last horizon ({time_phrase(h.max(), unit)}); got {a:g}.".replace(" )", ")"))
    cohort, checks, unestimable = _validate(patient, ranges, ignore)
    if unestimable:
        raise ModelError(
            f"{unestimable[0].message}. The model has no estimate for a level it never saw; correct or "
            "merge the value, or refit with unseen = 'missing' and missing = 'impute' for this predictor.")
    base = np.linspace(0.0, float(h.max()), 121) if times is None else np.asarray(times, dtype=float)
    grid = as_times(np.concatenate([base.ravel(), h]))
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        est = _predict(model, cohort, grid, h, conf_level, method, bootstrap_models, ranges, checks)
        if alive_at is not None:
            est = replace(est, alive_at=float(alive_at),
                          conditional=_conditional(model, cohort, h, float(alive_at), conf_level, est.interval_method,
                                                   bootstrap_models))
    # each prediction call re-encodes the patient; pass every distinct warning on once
    for msg in {(w.category, str(w.message)): w for w in caught}.values():
        warnings.warn(str(msg.message), msg.category, stacklevel=2)
    return est


def _predict(model, cohort, grid, h, conf_level, method, bootstrap_models, ranges, checks) -> PatientEstimate:
    notes = []
    nan = np.full(grid.size, np.nan)
    if method == "delta":
        if isinstance(model, (ClinicalCox, CombinedCox)):
            ci = model.predict_survival_with_ci(cohort, grid, conf_level)
            surv, lo, hi, how = ci.survival[0], ci.lower[0], ci.upper[0], "delta"
            if isinstance(model, CombinedCox):
                notes.append("The interval treats the imaging signature as fixed; it leaves out the "
                             "uncertainty of selecting and weighting its features.")
        else:
            surv, lo, hi, how = model.predict_survival(cohort, grid).probs[0], nan, nan, "none"
            notes.append("No closed-form interval for this model; use method='bootstrap' with refitted models.")
        n_boot = 0
    else:
        boots = list(bootstrap_models or ())
        if len(boots) < MIN_BOOTSTRAP:
            raise ModelError(
                f"method='bootstrap' needs at least {MIN_BOOTSTRAP} refitted models (bootstrap_models=); "
                f"got {len(boots)}. Build them with refit_bootstrap(model, training_cohort, 200, random_state=...).")
        surv = model.predict_survival(cohort, grid).probs[0]
        draws = np.vstack([m.predict_survival(cohort, grid).probs[0] for m in boots])
        a = 100 * (1 - conf_level) / 2
        lo, hi = np.percentile(draws, [a, 100 - a], axis=0)
        how, n_boot = "bootstrap", len(boots)
    idx = np.searchsorted(grid, h)
    hz = tuple(HorizonEstimate(float(t), float(surv[i]), float(lo[i]), float(hi[i])) for t, i in zip(h, idx, strict=True))
    late = h[h > ranges.last_event_time] if np.isfinite(ranges.last_event_time) else h[:0]
    if late.size:
        notes.append(f"Horizon(s) {', '.join(f'{t:g}' for t in late)} {ranges.time_unit} lie beyond the last "
                     f"training event ({ranges.last_event_time:g}); survival there is carried forward.")
    lp = float(model.linear_predictor(cohort)[0]) if hasattr(model, "linear_predictor") else float("nan")
    risk = float(model.predict_risk(cohort).values[0])
    cuts = tuple(ranges.risk_cutpoints) if ranges.risk_cutpoints else None
    group = None if cuts is None else group_labels(len(cuts) + 1)[int(assign_groups([risk], cuts)[0])]
    return PatientEstimate(
        model=str(getattr(model, "name", type(model).__name__)), time_unit=ranges.time_unit, times=grid,
        survival=surv, lower=np.asarray(lo, dtype=float), upper=np.asarray(hi, dtype=float), horizons=hz,
        conf_level=float(conf_level), interval_method=how, n_bootstrap=n_boot, linear_predictor=lp,
        risk_score=risk, risk_group=group, risk_cutpoints=cuts, checks=checks, notes=tuple(notes),
    )


def _conditional(model, cohort, h, since: float, conf_level: float, how: str, bootstrap_models):
    """S(t | alive at ``since``) at the horizons after it, with limits by the estimate's method."""
    later = h[h > since]
    if not later.size:
        return ()
    grid = as_times(np.concatenate([[since], later]))
    surv = model.predict_survival(cohort, grid).probs[0]
    if not surv[0] > 0:
        raise ModelError(f"the model gives no survival to {since:g}; conditional survival after it is undefined.")
    est = surv[1:] / surv[0]
    lo = hi = np.full(later.size, np.nan)
    if how == "delta":
        from workbench.competing.conditional import conditional_survival_cox

        cs = conditional_survival_cox(model.fit_, model._design(cohort), later, since, conf_level=conf_level)
        lo, hi = cs.lower[0], cs.upper[0]
    elif how == "bootstrap":
        from workbench.competing.conditional import refit_ratio_limits

        draws = np.vstack([m.predict_survival(cohort, grid).probs[0] for m in bootstrap_models])
        lo, hi = refit_ratio_limits(draws, conf_level)
    return tuple(HorizonEstimate(float(t), float(e), float(a_), float(b))
                 for t, e, a_, b in zip(later, est, lo, hi, strict=True))


def refit_bootstrap(model, cohort: Cohort, n_replicates: int = 200, *, random_state) -> list:
    """Unfitted copies of ``model`` fitted on ``n_replicates`` bootstrap samples of ``cohort``.

    Inner cross-validation of the signature groups rows by patient id, so the
    copies one bootstrap sample holds of a patient never straddle a fold.
    """
    if int(n_replicates) < 1:
        raise SpecError(f"n_replicates must be at least 1, not {n_replicates}.")
    rng = np.random.default_rng(random_state)
    return [clone_model(model).fit(cohort.take(rng.integers(0, cohort.n, cohort.n)))
            for _ in range(int(n_replicates))]


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


def _pct(x: float) -> str:
    return "n/a" if not np.isfinite(x) else f"{100 * x:.1f}%"


def format_estimate(est: PatientEstimate) -> str:
    """The estimate as plain text, ending with the caution."""
    u, lines = est.time_unit, [f"Individual estimate from model {est.model!r}", ""]
    label = {"delta": "delta method", "bootstrap": f"bootstrap, {est.n_bootstrap} refits", "none": ""}[est.interval_method]
    for hz in est.horizons:
        ci = (f" ({100 * est.conf_level:g}% CI {_pct(hz.lower)} to {_pct(hz.upper)}; {label})"
              if est.interval_method != "none" else " (no interval)")
        lines.append(f"  Survival at {time_phrase(hz.horizon, u)}: {_pct(hz.survival)}{ci}")
    if est.alive_at is not None:
        lines.append(f"  Alive at {time_phrase(est.alive_at, u)}: chance of being alive at")
        for hz in est.conditional:
            ci = (f" ({100 * est.conf_level:g}% CI {_pct(hz.lower)} to {_pct(hz.upper)})"
                  if np.isfinite(hz.lower) else " (no interval)")
            lines.append(f"    {time_phrase(hz.horizon, u)}: {_pct(hz.survival)}{ci}")
        if not est.conditional:
            lines.append("    (no horizon lies after it)")
    lines.append("")
    if np.isfinite(est.linear_predictor):
        lines.append(f"Linear predictor: {est.linear_predictor:.3f} (0 = average training patient)")
    else:
        lines.append(f"Risk score: {est.risk_score:.4g}")
    if est.risk_group is not None:
        cuts = " / ".join(f"{c:.3g}" for c in est.risk_cutpoints)
        lines.append(f"Risk group: {est.risk_group} of {len(est.risk_cutpoints) + 1} (training quantile groups, "
                     f"cut-points {cuts}; a score on a cut-point joins the lower group)")
    return "\n".join(lines + checks_lines(est.checks, est.notes, est.caution))


def checks_lines(ch, notes, caution: str) -> list[str]:
    """The closing lines of a printed estimate: values outside the training data, imputations,
    notes and the caution (shared with :mod:`workbench.estimate_competing`)."""
    lines = []
    if ch.out_of_range:
        lines += ["", "Values outside the training data:"]
        lines += [f"  {f.message}" for f in ch.flags]
        if ch.imaging_outside:
            lines.append(f"  {ch.imaging_outside} of {ch.imaging_checked} imaging features lie beyond the "
                         "training 1st-99th percentiles; furthest:")
            lines += [f"    {f.message}" for f in ch.imaging_worst]
    else:
        lines += ["", "All values lie within the training data."]
    if ch.imputed:
        lines += ["", "Imputed:"] + [f"  {t}" for t in ch.imputed]
    if notes:
        lines += ["", "Notes:"] + [f"  {t}" for t in notes]
    return lines + ["", f"Caution: {caution}"]
