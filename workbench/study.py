"""The study file: what to fit and how to validate it, as frozen dataclasses.

A study file is TOML with our own layout (see ``docs/study-file.md``). Reading
checks every key and value and says, for a misspelt key, which key was probably
meant. Writing a :class:`StudySpec` back out and reading it again gives the same
spec; this is how the command line and the app hand studies to each other.

Relative file paths in ``[data]`` and ``[external]`` are resolved against the
folder of the study file when it is read, and written back relative to the
folder of the file being written when possible.
"""

from __future__ import annotations

import difflib
import os
import tomllib
from dataclasses import dataclass, field, fields, replace
from pathlib import Path

import tomli_w

from workbench.cohort.causes import check_competing_codes
from workbench.cohort.core import TIME_UNITS
from workbench.cohort.io import ColumnMap
from workbench.errors import SpecError, WorkbenchError
from workbench.models.stability import DEFAULT_MAX_FALSE, DEFAULT_PAIRS, DEFAULT_THRESHOLD
from workbench.preprocess.imaging_options import (
    COMBAT_PRIORS,
    DEFAULT_MIN_ICC,
    DEFAULT_MIN_NEW_BATCH,
    ICC_FORMS,
    UNSEEN_BATCH_POLICIES,
)
from workbench.preprocess.predictor_spec import PredictorSpec
from workbench.study_types import check_value, field_types

MODEL_NAMES = ("clinical", "combined", "penalised_all", "forest")
"""Models a study can fit: clinical-only Cox, clinical + signature Cox, penalised
Cox on clinical plus every imaging feature, random survival forest."""

VALIDATION_METHODS = ("bootstrap", "cv", "by_centre", "none")
BACKENDS = ("processes", "threads", "serial", "dask")
ESTIMATORS = ("auto", "optimism", "632plus", "oob")
INTERVALS = ("two-stage", "shifted-percentile")


@dataclass(frozen=True)
class DataSpec:
    """The input tables and what their columns mean (``features`` None: a clinical-only study)."""

    features: str | None = None
    clinical: str = ""
    id: str = "patient_id"
    time: str = "time"
    event: str = "event"
    time_unit: str = "months"
    event_codes: tuple[str, ...] | None = None
    censor_codes: tuple[str, ...] | None = None
    competing_codes: tuple[str, ...] | None = None  # codes of competing events (the competing-risks route)
    centre: str | None = None
    batch: str | None = None
    on_unmatched: str = "error"
    drop_unusable_features: bool = False
    features_sheet: str | None = None  # Excel: the sheet to read
    clinical_sheet: str | None = None
    take_from: tuple[tuple[str, str], ...] = ()  # column in both tables -> "clinical" or "features"
    repeats: str | None = None  # second measurements of some patients' features (reproducibility)
    repeats_sheet: str | None = None

    def __post_init__(self):
        object.__setattr__(self, "take_from", ColumnMap(take_from=dict(self.take_from or ())).take_from)

    def column_map(self) -> ColumnMap:
        return ColumnMap(
            id=self.id,
            time=self.time,
            event=self.event,
            time_unit=self.time_unit,
            event_codes=self.event_codes,
            censor_codes=self.censor_codes,
            competing_codes=self.competing_codes,
            centre=self.centre,
            batch=self.batch,
            take_from=self.take_from,
        )


@dataclass(frozen=True)
class ExternalSpec:
    """An external validation cohort with the same columns as the training data."""

    features: str | None = None
    clinical: str = ""
    features_sheet: str | None = None
    clinical_sheet: str | None = None


@dataclass(frozen=True)
class HarmoniseSpec:
    """ComBat harmonisation of imaging features by scanner / batch."""

    method: str = "combat"  # "combat" or "none"
    protect: tuple[str, ...] = ()  # clinical predictors whose effects must be preserved
    unseen_batch: str = "error"  # "error", "reference" or "estimate"
    empirical_bayes: str = "parametric"  # "parametric", "nonparametric" or "none"
    min_new_batch: int = DEFAULT_MIN_NEW_BATCH  # patients of an unseen scanner needed by "estimate"
    reference_scanner: str | None = None  # harmonise every scanner to this one (its rows unchanged)


@dataclass(frozen=True)
class ReduceSpec:
    """Filters applied to the imaging pool before penalised regression."""

    min_variance: float = 1e-8
    correlation: float = 0.90
    screen: bool = False
    screen_fdr: float = 0.10


@dataclass(frozen=True)
class PenaltySpec:
    """The LASSO / elastic-net Cox penalty and how it is chosen."""

    l1_ratio: float = 1.0
    rule: str = "1se"  # "1se" or "min"
    folds: int = 5
    n_alphas: int = 50
    path_stop_ratio: float = 0.05
    selection: str = "cv"  # "cv" (penalty chosen by cross-validation) or "stability" (stability selection)
    stability_pairs: int = DEFAULT_PAIRS  # complementary pairs of half-samples
    stability_threshold: float = DEFAULT_THRESHOLD  # selection probability a feature must reach
    stability_max_false: float = DEFAULT_MAX_FALSE  # bound on the expected number of false selections


@dataclass(frozen=True)
class ReproducibilitySpec:
    """[imaging.reproducibility]: features whose ICC on the [data] repeats table is below min_icc are removed."""

    form: str = "ICC(3,1)"  # "ICC(1,1)", "ICC(2,1)" (absolute agreement) or "ICC(3,1)" (consistency)
    min_icc: float = DEFAULT_MIN_ICC


@dataclass(frozen=True)
class ImagingSpec:
    """Which feature columns form the imaging pool and how the signature is built."""

    include: tuple[str, ...] = ("*",)  # glob patterns or prefixes such as "cm_*"
    exclude: tuple[str, ...] = ()
    volume_feature: str | None = None
    harmonise: HarmoniseSpec = field(default_factory=HarmoniseSpec)
    reduce: ReduceSpec = field(default_factory=ReduceSpec)
    penalty: PenaltySpec = field(default_factory=PenaltySpec)
    reproducibility: ReproducibilitySpec = field(default_factory=ReproducibilitySpec)


@dataclass(frozen=True)
class ForestSpec:
    trees: int = 200
    min_leaf: int = 15
    max_features: str = "sqrt"
    time_grid: int = 100


@dataclass(frozen=True)
class CombinedSpec:
    """[models.combined]: how the signature term of the combined model is estimated."""

    coefficient: str = "prevalidated"  # "prevalidated" (out-of-fold scores) or "in_sample"
    prevalidation_folds: int = 5
    shrinkage: str = "none"  # "none" or "cross_validated_slope"
    cross_fit: str = "refit"  # "refit" or "inner_folds" (the penalty choice's fold fits: cheaper, optimistic)


@dataclass(frozen=True)
class ModelsSpec:
    fit: tuple[str, ...] = ("clinical", "combined")
    baseline: str = "clinical"
    forest: ForestSpec = field(default_factory=ForestSpec)
    risk_groups: int = 3  # quantile groups of the training risk scores (figures, bundle, apply, estimate)
    combined: CombinedSpec = field(default_factory=CombinedSpec)


@dataclass(frozen=True)
class FiguresSpec:
    """[figures]: how the figures of a run are drawn."""

    min_at_risk: int = 10  # risk-group survival curves stop below this many patients at risk


@dataclass(frozen=True)
class AddedValueSpec:
    """[added_value]: the permutation test of imaging given the clinical model (0 = not run)."""

    permutations: int = 199
    folds: int = 5
    refits: str = "nested"  # "nested" or "inner_folds" (cheaper; its level failed in simulation)


@dataclass(frozen=True)
class ValidationSpec:
    method: str = "bootstrap"
    replicates: int = 200
    folds: int = 5
    repeats: int = 10
    forest_replicates: int = 25
    workers: int = 1
    backend: str = "processes"
    scheduler: str | None = None
    censoring: str = "auto"  # IPCW weights of external / held-out rows: auto, km, km_by_centre, cox
    pooling: str = "dl"  # random-effects pooling across centres/scanners: dl or reml
    uno_tau: float | None = None  # Uno's C truncation time; None: the last horizon

    @property
    def tau(self) -> float | None:
        return None if self.uno_tau is None else float(self.uno_tau)
    estimator: str = "auto"
    interval: str = "two-stage"
    outer_replicates: int = 100
    inner_replicates: int = 10


@dataclass(frozen=True)
class StudySpec:
    """Everything a study run needs, besides the data themselves."""

    name: str
    data: DataSpec
    predictors: tuple[PredictorSpec, ...]
    horizons: tuple[float, ...]
    seed: int = 20261202
    imaging: ImagingSpec = field(default_factory=ImagingSpec)
    models: ModelsSpec = field(default_factory=ModelsSpec)
    validation: ValidationSpec = field(default_factory=ValidationSpec)
    external: ExternalSpec | None = None
    anticipated_r2: float | None = None
    added_value: AddedValueSpec = field(default_factory=AddedValueSpec)
    figures: FiguresSpec = field(default_factory=FiguresSpec)

    def __post_init__(self):
        check_spec(self)


# ------------------------------------------------------------------ checks


def _choice(where: str, value, allowed) -> None:
    if value not in allowed:
        raise SpecError(f"{where} is {value!r}; choose one of {', '.join(repr(a) for a in allowed)}.")


def check_spec(spec: StudySpec) -> None:
    d = spec.data
    if not d.clinical:
        raise SpecError("[data] needs 'clinical', the table with follow-up time and event.")
    if d.features is None:
        check_clinical_only(spec)
    if d.competing_codes is not None:
        check_competing_codes(d.event_codes, d.censor_codes, d.competing_codes, SpecError, "[data] ")
    _choice("[data] time_unit", d.time_unit, tuple(TIME_UNITS))
    _choice("[data] on_unmatched", d.on_unmatched, ("error", "intersect"))
    if not spec.predictors:
        raise SpecError("the study lists no clinical predictors; add at least one [[predictor]] table.")
    cols = [p.column for p in spec.predictors]
    dup = sorted({c for c in cols if cols.count(c) > 1})
    if dup:
        raise SpecError(f"clinical predictors listed twice: {', '.join(dup)}.")
    if not spec.horizons:
        raise SpecError("[study] horizons is empty; give the times of interest, e.g. horizons = [12, 24, 36].")
    if any(h <= 0 for h in spec.horizons) or list(spec.horizons) != sorted(set(spec.horizons)):
        raise SpecError(f"[study] horizons must be positive and increasing; got {list(spec.horizons)}.")
    im = spec.imaging
    _choice("[imaging.harmonise] method", im.harmonise.method, ("combat", "none"))
    _choice("[imaging.harmonise] unseen_batch", im.harmonise.unseen_batch, UNSEEN_BATCH_POLICIES)
    _choice("[imaging.harmonise] empirical_bayes", im.harmonise.empirical_bayes, COMBAT_PRIORS)
    if int(im.harmonise.min_new_batch) < 3:
        raise SpecError(f"[imaging.harmonise] min_new_batch = {im.harmonise.min_new_batch}: a scanner's scale "
                        "needs at least 3 of its patients (the default is "
                        f"{DEFAULT_MIN_NEW_BATCH}).")
    missing = sorted(set(im.harmonise.protect) - set(cols))
    if missing:
        raise SpecError(
            f"[imaging.harmonise] protect names {', '.join(missing)}, which are not clinical predictors of the study."
        )
    if im.harmonise.method == "combat" and not d.batch:
        raise SpecError("[imaging.harmonise] method is 'combat' but [data] names no batch column; set batch = '...' or method = 'none'.")
    if not 0 < im.reduce.correlation <= 1:
        raise SpecError(f"[imaging.reduce] correlation must lie in (0, 1]; got {im.reduce.correlation}.")
    if not 0 < im.reduce.screen_fdr < 1:
        raise SpecError(f"[imaging.reduce] screen_fdr must lie in (0, 1); got {im.reduce.screen_fdr}.")
    _choice("[imaging.reproducibility] form", im.reproducibility.form, ICC_FORMS)
    if not 0 < im.reproducibility.min_icc < 1:
        raise SpecError(f"[imaging.reproducibility] min_icc must lie in (0, 1); got {im.reproducibility.min_icc}.")
    if d.repeats and d.features is None:
        raise SpecError("[data] repeats holds repeat measurements of imaging features, but the study has no "
                        "imaging table ([data] features).")
    pen = im.penalty
    _choice("[imaging.penalty] rule", pen.rule, ("1se", "min"))
    if not 0 < pen.l1_ratio <= 1:
        raise SpecError(f"[imaging.penalty] l1_ratio must lie in (0, 1] (1 = LASSO); got {pen.l1_ratio}.")
    if pen.folds < 3:
        raise SpecError(f"[imaging.penalty] folds must be at least 3; got {pen.folds}.")
    _choice("[imaging.penalty] selection", pen.selection, ("cv", "stability"))
    if not 0.5 < pen.stability_threshold <= 1:
        raise SpecError("[imaging.penalty] stability_threshold must lie in (0.5, 1] (a feature must be picked in "
                        f"more than half of the half-samples); got {pen.stability_threshold}.")
    if pen.stability_max_false <= 0 or pen.stability_pairs < 1:
        raise SpecError("[imaging.penalty] stability_max_false must be positive and stability_pairs at least 1; "
                        f"got {pen.stability_max_false} and {pen.stability_pairs}.")
    for m in spec.models.fit:
        _choice("[models] fit entry", m, MODEL_NAMES)
    if spec.models.baseline not in spec.models.fit:
        raise SpecError(f"[models] baseline {spec.models.baseline!r} is not among the fitted models {list(spec.models.fit)}.")
    if not isinstance(spec.models.risk_groups, int) or spec.models.risk_groups < 2:
        raise SpecError(f"[models] risk_groups must be a whole number of at least 2; got {spec.models.risk_groups!r}.")
    v = spec.validation
    _choice("[validation] method", v.method, VALIDATION_METHODS)
    _choice("[validation] backend", v.backend, BACKENDS)
    _choice("[validation] censoring", v.censoring, ("auto", "km", "km_by_centre", "cox"))
    _choice("[validation] pooling", v.pooling, ("dl", "reml"))
    if v.censoring == "km_by_centre" and not d.centre:
        raise SpecError("[validation] censoring 'km_by_centre' needs a centre column in [data] (centre = '...').")
    _choice("[validation] estimator", v.estimator, ESTIMATORS)
    _choice("[validation] interval", v.interval, INTERVALS)
    for name in ("outer_replicates", "inner_replicates"):
        if getattr(v, name) < 1:
            raise SpecError(f"[validation] {name} must be at least 1; got {getattr(v, name)}.")
    if v.method == "by_centre" and not d.centre:
        raise SpecError("[validation] method 'by_centre' needs a centre column in [data] (centre = '...').")
    if v.backend == "dask" and not v.scheduler:
        raise SpecError("[validation] backend 'dask' needs scheduler = 'tcp://host:8786' (or 'local' for a local cluster).")
    for name in ("replicates", "folds", "repeats", "workers"):
        if getattr(v, name) < 1:
            raise SpecError(f"[validation] {name} must be at least 1; got {getattr(v, name)}.")
    cm = spec.models.combined
    _choice("[models.combined] coefficient", cm.coefficient, ("prevalidated", "in_sample"))
    _choice("[models.combined] shrinkage", cm.shrinkage, ("none", "cross_validated_slope"))
    _choice("[models.combined] cross_fit", cm.cross_fit, ("refit", "inner_folds"))
    if cm.prevalidation_folds < 3:
        raise SpecError(f"[models.combined] prevalidation_folds must be at least 3; got {cm.prevalidation_folds}.")
    av = spec.added_value
    if av.permutations < 0:
        raise SpecError(f"[added_value] permutations must be 0 (test not run) or more; got {av.permutations}.")
    if av.folds < 2:
        raise SpecError(f"[added_value] folds must be at least 2; got {av.folds}.")
    _choice("[added_value] refits", av.refits, ("nested", "inner_folds"))
    if spec.figures.min_at_risk < 1:
        raise SpecError(f"[figures] min_at_risk must be at least 1 (a curve is drawn while that many patients "
                        f"remain at risk; 10 is common practice); got {spec.figures.min_at_risk}.")
    if v.uno_tau is not None and (isinstance(v.uno_tau, bool) or not isinstance(v.uno_tau, (int, float)) or v.uno_tau <= 0):
        raise SpecError(f"[validation] uno_tau must be a positive number of {d.time_unit} (Uno's C truncation time); "
                        f"got {v.uno_tau!r}. Leave it out to truncate at the last horizon.")
    if spec.anticipated_r2 is not None and not 0 < spec.anticipated_r2 < 1:
        raise SpecError(f"[study] anticipated_r2 must lie in (0, 1); got {spec.anticipated_r2}.")


def check_clinical_only(spec: StudySpec) -> None:
    """A study without a features table can fit the clinical model only."""
    imaging = [m for m in spec.models.fit if m != "clinical"]
    if imaging:
        raise SpecError(
            f"the study has no imaging table ([data] features is not given) but [models] fit lists "
            f"{', '.join(repr(m) for m in imaging)}, which need imaging features; use fit = ['clinical'] "
            "or add features = 'your_features.csv' to [data].")
    if spec.imaging.volume_feature:
        raise SpecError("[imaging] volume_feature is set but the study has no imaging table ([data] features); remove it.")
    if spec.data.batch and spec.imaging.harmonise.method == "combat":
        raise SpecError("[imaging.harmonise] method is 'combat' but the study has no imaging table to harmonise; "
                        "set method = 'none' or add [data] features.")
    if spec.external is not None and spec.external.features:
        raise SpecError("[external] names a features table but the study has none ([data] features); remove it.")


# ------------------------------------------------------------------ reading


def _take(table: dict, cls, where: str, nested: dict | None = None, base: Path | None = None, paths=()):
    """Build dataclass ``cls`` from a TOML table, refusing unknown keys with a suggestion."""
    if not isinstance(table, dict):
        raise SpecError(f"{where} must be a table of keys, not {type(table).__name__}.")
    names = [f.name for f in fields(cls)]
    types = field_types(cls)
    kwargs = {}
    for key, value in table.items():
        if key not in names:
            close = difflib.get_close_matches(key, names, n=1)
            hint = f" Did you mean {close[0]!r}?" if close else f" Known keys: {', '.join(names)}."
            raise SpecError(f"{where}: unknown key {key!r}.{hint}")
        if key == "take_from":
            value = _take_from(value, where)
        elif not (nested and key in nested):
            check_value(where, key, value, types[key])
        if nested and key in nested:
            sub_cls, sub_where = nested[key]
            value = _take(value, sub_cls, sub_where)
        elif isinstance(value, list):
            value = tuple(value)
        if key in paths and base is not None and isinstance(value, str):
            p = Path(value)
            value = os.path.normpath(p if p.is_absolute() else (base / p))
        kwargs[key] = value
    try:
        return cls(**kwargs)
    except TypeError as exc:
        raise SpecError(f"{where}: {exc}") from None


def _take_from(value, where: str) -> tuple[tuple[str, str], ...]:
    if not isinstance(value, dict) or not all(isinstance(v, str) for v in value.values()):
        raise SpecError(
            f"{where}: take_from must be a table such as [data.take_from] with lines like age = \"clinical\" "
            f"(or \"features\"); found {value!r}."
        )
    try:
        return ColumnMap(take_from=value).take_from
    except WorkbenchError as exc:
        raise SpecError(f"{where}: {exc}") from None


def read_study(path) -> StudySpec:
    """Read and check a study file."""
    p = Path(path)
    if not p.exists():
        raise SpecError(f"{p}: study file not found.")
    try:
        doc = tomllib.loads(p.read_text(encoding="utf-8"))
    except tomllib.TOMLDecodeError as exc:
        raise SpecError(f"{p}: not valid TOML ({exc}).") from None
    return study_from_dict(doc, base=p.resolve().parent, source=str(p))


def study_from_dict(doc: dict, *, base: Path | None = None, source: str = "study") -> StudySpec:
    known = {"study", "data", "predictor", "imaging", "models", "validation", "external", "added_value", "figures"}
    for key in doc:
        if key not in known:
            close = difflib.get_close_matches(key, sorted(known), n=1)
            hint = f" Did you mean [{close[0]}]?" if close else ""
            raise SpecError(f"{source}: unknown section [{key}].{hint}")
    for key in ("study", "data", "imaging", "models", "validation", "external", "added_value", "figures"):
        if key in doc and not isinstance(doc[key], dict):
            raise SpecError(f"{source}: [{key}] must be a section of keys (a table), not {doc[key]!r}.")
    study = dict(doc.get("study", {}))
    for key in ("name", "horizons"):
        if key not in study:
            raise SpecError(f"{source}: [study] needs '{key}'.")
    if "data" not in doc:
        raise SpecError(f"{source}: the [data] section is missing.")
    data = _take(doc["data"], DataSpec, f"{source} [data]", base=base, paths=("features", "clinical", "repeats"))
    if data.time_unit not in TIME_UNITS:
        raise SpecError(f"{source} [data] time_unit {data.time_unit!r}; choose one of {', '.join(TIME_UNITS)}.")
    preds = doc.get("predictor", [])
    if not isinstance(preds, list):
        raise SpecError(f"{source}: predictors are written as [[predictor]] tables.")
    predictors = tuple(_take(t, PredictorSpec, f"{source} [[predictor]] #{i + 1}") for i, t in enumerate(preds))
    imaging = _take(
        doc.get("imaging", {}),
        ImagingSpec,
        f"{source} [imaging]",
        nested={
            "harmonise": (HarmoniseSpec, f"{source} [imaging.harmonise]"),
            "reduce": (ReduceSpec, f"{source} [imaging.reduce]"),
            "penalty": (PenaltySpec, f"{source} [imaging.penalty]"),
            "reproducibility": (ReproducibilitySpec, f"{source} [imaging.reproducibility]"),
        },
    )
    if not data.batch and "method" not in doc.get("imaging", {}).get("harmonise", {}):
        # ComBat needs a batch column; without one the default is no harmonisation (the run log says so)
        imaging = replace(imaging, harmonise=replace(imaging.harmonise, method="none"))
    models = _take(doc.get("models", {}), ModelsSpec, f"{source} [models]", nested={"forest": (ForestSpec, f"{source} [models.forest]"),
                                                                                "combined": (CombinedSpec, f"{source} [models.combined]")})
    validation = _take(doc.get("validation", {}), ValidationSpec, f"{source} [validation]")
    added_value = _take(doc.get("added_value", {}), AddedValueSpec, f"{source} [added_value]")
    figures = _take(doc.get("figures", {}), FiguresSpec, f"{source} [figures]")
    if data.features is None and "fit" not in doc.get("models", {}):
        models = replace(models, fit=("clinical",))  # a clinical-only study fits the clinical model
    external = None
    if "external" in doc:
        external = _take(doc["external"], ExternalSpec, f"{source} [external]", base=base, paths=("features", "clinical"))
    extra = set(study) - {"name", "horizons", "seed", "anticipated_r2"}
    if extra:
        raise SpecError(f"{source} [study]: unknown key(s) {', '.join(sorted(extra))}.")
    study_types = {"name": str, "horizons": tuple[float, ...], "seed": int, "anticipated_r2": float | None}
    for key, value in study.items():
        check_value(f"{source} [study]", key, value, study_types[key])
    horizons = tuple(float(h) for h in study["horizons"])
    return StudySpec(
        name=str(study["name"]),
        data=data,
        predictors=predictors,
        horizons=horizons,
        seed=int(study.get("seed", 20261202)),
        imaging=imaging,
        models=models,
        validation=validation,
        external=external,
        anticipated_r2=study.get("anticipated_r2"),
        added_value=added_value,
        figures=figures,
    )


# ------------------------------------------------------------------ writing


def _plain(obj, defaults=None) -> dict:
    """Dataclass to a TOML-ready dict: tuples to lists, None values left out."""
    out = {}
    for f in fields(obj):
        v = getattr(obj, f.name)
        if v is None:
            continue
        if hasattr(v, "__dataclass_fields__"):
            v = _plain(v)
        elif isinstance(v, tuple):
            v = list(v)
        out[f.name] = v
    return out


def _rel(path: str, base: Path | None) -> str:
    if base is None:
        return path
    try:
        return Path(os.path.relpath(Path(path).resolve(), base.resolve())).as_posix()
    except ValueError:  # another drive on Windows
        return path


def study_to_dict(spec: StudySpec, *, base: Path | None = None) -> dict:
    study = {"name": spec.name, "horizons": list(spec.horizons), "seed": spec.seed}
    if spec.anticipated_r2 is not None:
        study["anticipated_r2"] = spec.anticipated_r2
    data = _plain(spec.data)
    if spec.data.features is not None:
        data["features"] = _rel(spec.data.features, base)
    data["clinical"] = _rel(spec.data.clinical, base)
    if spec.data.repeats is not None:
        data["repeats"] = _rel(spec.data.repeats, base)
    if spec.data.take_from:
        data["take_from"] = dict(spec.data.take_from)
    else:
        data.pop("take_from", None)
    doc = {"study": study, "data": data, "predictor": [_plain(p) for p in spec.predictors]}
    doc["imaging"] = _plain(spec.imaging)
    doc["models"] = _plain(spec.models)
    doc["validation"] = _plain(spec.validation)
    doc["added_value"] = _plain(spec.added_value)
    doc["figures"] = _plain(spec.figures)
    if spec.external is not None:
        doc["external"] = {**_plain(spec.external), "clinical": _rel(spec.external.clinical, base)}
        if spec.external.features is not None:
            doc["external"]["features"] = _rel(spec.external.features, base)
        else:
            doc["external"].pop("features", None)
    return doc


def dumps_study(spec: StudySpec, *, base: Path | None = None) -> str:
    return tomli_w.dumps(study_to_dict(spec, base=base))


def write_study(spec: StudySpec, path) -> Path:
    """Write ``spec`` as a study file; paths are stored relative to its folder."""
    p = Path(path)
    p.parent.mkdir(parents=True, exist_ok=True)
    p.write_text(dumps_study(spec, base=p.resolve().parent), encoding="utf-8")
    return p


def with_validation(spec: StudySpec, **changes) -> StudySpec:
    """A copy of ``spec`` with validation settings changed (e.g. fewer replicates)."""
    return replace(spec, validation=replace(spec.validation, **changes))
