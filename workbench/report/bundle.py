"""The model bundle: fitted models saved to a folder or .zip that loads without running code.

A bundle holds everything needed to apply fitted models to new patients, and
nothing about the training patients beyond summary numbers:

* ``manifest.json`` -- format version, package versions, the study (as the
  study-file dictionary), a summary of the training cohort (counts, follow-up,
  survival at the horizons, risk-group cut-points, imaging percentiles; no
  patient identifiers), the expected input columns, the time unit, and the
  SHA-256 checksum of every other file plus one of the manifest itself;
* ``models/NN_<name>.json`` -- each model's parameters and learned state as JSON;
* ``models/NN_<name>.npz`` -- its numeric arrays, read with ``allow_pickle=False``.

There is no pickle anywhere: objects are rebuilt only from the explicit class
table in :mod:`workbench.report._codec`, and an unknown class is refused. The
format is documented in ``docs/bundle.md``.

The checksums detect damage and accidental or casual edits; they are not a
signature, since anyone who can edit the files can recompute them. The safety
of loading an untrusted bundle rests on the format itself: JSON and plain
numeric arrays, interpreted by the workbench's own code.
"""

from __future__ import annotations

import hashlib
import io
import json
import re
import shutil
import warnings
import zipfile
from dataclasses import asdict, dataclass, field, replace
from datetime import UTC, datetime
from pathlib import Path, PurePosixPath

import numpy as np

import workbench
from workbench.cohort.core import Cohort
from workbench.cohort.summary import CAUTION, CohortSummary, HorizonSurvival, summarise_cohort
from workbench.errors import BundleError, WorkbenchWarning
from workbench.models.cox import ClinicalCox, CombinedCox
from workbench.models.recalibrated import RecalibratedModel
from workbench.models.registry import MODEL_LABELS, offered_models
from workbench.models.wide import ForestModel, PenalisedAllCox
from workbench.prepare import package_versions
from workbench.report._codec import CODECS, classes_in, decode_model, encode_model
from workbench.stats.riskgroups import group_labels, learn_cutpoints
from workbench.study import StudySpec, study_from_dict, study_to_dict

FORMAT_NAME = "survival-workbench model bundle"
FORMAT_VERSION = 1
KNOWN_FORMAT_VERSIONS = (1,)
MANIFEST = "manifest.json"
RISK_GROUPS = group_labels(3)
"""Names of the default three risk groups (training tertiles); see :mod:`workbench.stats.riskgroups`."""


class BundleVersionWarning(WorkbenchWarning):
    """A bundle was written with other versions of the supporting libraries."""


# ---------------------------------------------------------------- training summary


@dataclass(frozen=True)
class TrainingSummary:
    """What a bundle records about its training cohort: numbers only, no patients.

    Attributes
    ----------
    n_patients, n_events, n_censored : int
    time_unit : str
    median_followup : float
        Reverse Kaplan-Meier median follow-up.
    max_followup, last_event_time : float
        Longest follow-up and latest event time (predictions beyond the last
        event carry the last estimate forward).
    horizons : tuple of HorizonSurvival
        Kaplan-Meier survival with 95% CI and numbers at risk at the horizons.
    centres, batches : dict of str to int
        Patients per centre and per scanner / batch.
    imaging_p01, imaging_p99 : dict of str to float
        1st and 99th training percentiles of each imaging feature (raw values,
        before harmonisation), for out-of-range flags on new patients.
    risk_cutpoints : dict of str to tuple of float
        Per model, the cut-points of the training risk scores (higher = worse;
        tertiles by default); a patient exactly on a cut-point joins the lower
        group (:mod:`workbench.stats.riskgroups`).
    caution : str
    """

    n_patients: int
    n_events: int
    n_censored: int
    time_unit: str
    median_followup: float
    max_followup: float
    last_event_time: float
    horizons: tuple[HorizonSurvival, ...] = ()
    centres: dict = field(default_factory=dict)
    batches: dict = field(default_factory=dict)
    imaging_p01: dict = field(default_factory=dict)
    imaging_p99: dict = field(default_factory=dict)
    risk_cutpoints: dict = field(default_factory=dict)
    caution: str = CAUTION

    def to_dict(self) -> dict:
        """A JSON-ready dictionary (missing numbers as null)."""
        return _jsonable(asdict(self))

    @classmethod
    def from_dict(cls, d: dict) -> TrainingSummary:
        try:
            hz = tuple(HorizonSurvival(**{k: _num(v) if k != "at_risk" else int(v) for k, v in h.items()})
                       for h in d.get("horizons", ()))
            return cls(
                n_patients=int(d["n_patients"]), n_events=int(d["n_events"]), n_censored=int(d["n_censored"]),
                time_unit=str(d["time_unit"]), median_followup=_num(d["median_followup"]),
                max_followup=_num(d["max_followup"]), last_event_time=_num(d["last_event_time"]),
                horizons=hz,
                centres={str(k): int(v) for k, v in d.get("centres", {}).items()},
                batches={str(k): int(v) for k, v in d.get("batches", {}).items()},
                imaging_p01={str(k): _num(v) for k, v in d.get("imaging_p01", {}).items()},
                imaging_p99={str(k): _num(v) for k, v in d.get("imaging_p99", {}).items()},
                risk_cutpoints={str(k): tuple(_num(x) for x in v) for k, v in d.get("risk_cutpoints", {}).items()},
                caution=str(d.get("caution", CAUTION)),
            )
        except (KeyError, TypeError, ValueError, AttributeError) as exc:
            raise BundleError(f"the bundle's training summary is incomplete or malformed ({exc}).") from None

    @classmethod
    def from_cohort_summary(cls, s: CohortSummary) -> TrainingSummary:
        """Counts, follow-up and horizons of a :class:`CohortSummary` (patient ids are left out).

        Without the cohort itself there are no risk-group cut-points or imaging
        percentiles; use :func:`summarise_training` to have them.
        """
        return cls(
            n_patients=s.n_patients, n_events=s.n_events, n_censored=s.n_censored, time_unit=s.time_unit,
            median_followup=s.median_followup, max_followup=s.max_followup, last_event_time=float("nan"),
            horizons=tuple(s.horizons), centres=dict(s.centres), batches=dict(s.batches),
        )


def summarise_training(cohort: Cohort, models: dict | None = None, horizons=(), groups=3) -> TrainingSummary:
    """Summarise the training cohort for a bundle, including what new-patient checks need.

    Parameters
    ----------
    cohort : Cohort
        The rows the models were fitted on.
    models : dict of str to fitted model, optional
        Their training risk scores give the cut-points of the risk groups
        (:func:`workbench.stats.riskgroups.learn_cutpoints`, the rule every route uses).
    groups : int, str or sequence of float, default 3
        Number of quantile groups (or a named method, or given cut-points).
    horizons : sequence of float
        Times for Kaplan-Meier survival (the study's horizons).
    """
    s = summarise_cohort(cohort, horizons)
    feats = cohort.features
    p01, p99 = {}, {}
    if feats.shape[1]:
        A = feats.to_numpy(dtype=float)
        lo, hi = np.nanpercentile(A, [1.0, 99.0], axis=0)
        p01 = {str(c): float(v) for c, v in zip(feats.columns, lo, strict=True)}
        p99 = {str(c): float(v) for c, v in zip(feats.columns, hi, strict=True)}
    cuts = {}
    for name, model in offered_models(models or {}).items():
        risk = model.predict_risk(cohort).values
        cuts[str(name)] = tuple(float(v) for v in learn_cutpoints(risk, groups))
    ev = cohort.time[cohort.event]
    return replace(
        TrainingSummary.from_cohort_summary(s),
        last_event_time=float(ev.max()) if ev.size else float("nan"),
        imaging_p01=p01, imaging_p99=p99, risk_cutpoints=cuts,
    )


# ---------------------------------------------------------------- expected inputs


@dataclass(frozen=True)
class ClinicalInput:
    """One clinical field a model reads, as learned on the training rows."""

    column: str
    label: str
    kind: str
    unit: str
    transform: str | None
    levels: tuple[str, ...]
    reference: str | None
    detection_limit: float | None
    has_limit_indicator: bool
    missing: str
    unseen: str
    impute_value: float | str | None
    train_min: float | None
    train_max: float | None


@dataclass(frozen=True)
class ModelInputs:
    """The input columns one fitted model expects."""

    clinical: tuple[ClinicalInput, ...]
    imaging_features: tuple[str, ...]
    harmonised: bool
    batches: tuple[str, ...]

    def to_dict(self) -> dict:
        return _jsonable(asdict(self))

    @classmethod
    def from_dict(cls, d: dict) -> ModelInputs:
        try:
            clin = tuple(ClinicalInput(**{**c, "levels": tuple(c["levels"])}) for c in d["clinical"])
            return cls(clin, tuple(d["imaging_features"]), bool(d["harmonised"]), tuple(d["batches"]))
        except (KeyError, TypeError) as exc:
            raise BundleError(f"the bundle's list of expected inputs is malformed ({exc}).") from None


def describe_inputs(model) -> ModelInputs:
    """Clinical fields (with kinds, levels, units, training ranges), imaging features and batches."""
    if isinstance(model, RecalibratedModel):
        return describe_inputs(model.base)
    if isinstance(model, CombinedCox):
        tr, feats, combat = model.transformer_, model.signature_.feature_names_in_, model.signature_.combat_
    elif isinstance(model, ClinicalCox):
        tr, feats, combat = model.transformer_, (), None
    elif isinstance(model, (PenalisedAllCox, ForestModel)):
        tr, feats, combat = model.transformer_, model.feature_names_in_, model.combat_
    else:
        raise BundleError(f"a model of type {type(model).__name__} cannot be described for a bundle.")
    clinical = tuple(
        ClinicalInput(
            column=t.column, label=t.label, kind=t.kind, unit=t.unit, transform=t.transform,
            levels=tuple(t.levels), reference=t.reference, detection_limit=t.detection_limit,
            has_limit_indicator=t.has_limit_indicator, missing=t.missing, unseen=t.unseen,
            impute_value=t.impute_value, train_min=t.train_min, train_max=t.train_max,
        )
        for t in tr.terms_
    )
    batches = () if combat is None else tuple(str(b) for b in combat.batches_)
    return ModelInputs(clinical, tuple(str(f) for f in feats), combat is not None, batches)


# ---------------------------------------------------------------- the bundle


@dataclass(frozen=True)
class Bundle:
    """A loaded bundle: fitted models, the study and the manifest."""

    models: dict
    spec: StudySpec
    manifest: dict

    @property
    def training(self) -> TrainingSummary:
        return TrainingSummary.from_dict(self.manifest["training"])

    @property
    def time_unit(self) -> str:
        return str(self.manifest["time_unit"])

    def inputs(self, name: str) -> ModelInputs:
        """Expected inputs of model ``name``."""
        if name not in self.models:
            raise BundleError(f"the bundle has no model {name!r}; it has {', '.join(self.models)}.")
        return ModelInputs.from_dict(self.manifest["models"][name]["inputs"])

    @property
    def known_columns(self) -> frozenset[str]:
        """Every input column some model of the bundle reads, plus the id and batch columns."""
        inp = self.manifest["inputs"]
        cols = {c["column"] for c in inp["clinical"]} | set(inp["imaging_features"])
        cols |= {c for c in (inp.get("batch_column"), inp.get("id_column")) if c}
        return frozenset(cols)


def manifest_checksum(manifest: dict) -> str:
    """SHA-256 of the manifest's canonical JSON text, without its own checksum entry."""
    body = {k: v for k, v in manifest.items() if k != "manifest_sha256"}
    text = json.dumps(body, sort_keys=True, separators=(",", ":"), ensure_ascii=True, allow_nan=False)
    return hashlib.sha256(text.encode("ascii")).hexdigest()


def save_bundle(models: dict, spec: StudySpec, training_summary, path, *, extra: dict | None = None,
                overwrite: bool = False) -> Path:
    """Save fitted models as a bundle folder, or as a .zip when ``path`` ends in ``.zip``.

    Parameters
    ----------
    models : dict of str to fitted model
        ClinicalCox, CombinedCox, PenalisedAllCox or ForestModel, fitted. Comparison models
        (``registry.COMPARISON_MODELS``: clinical + tumour volume) are left out.
    spec : StudySpec
        The study the models come from.
    training_summary : TrainingSummary or CohortSummary
        From :func:`summarise_training` (preferred: it carries the risk-group
        cut-points and imaging percentiles) or
        :func:`~workbench.cohort.summary.summarise_cohort`.
    path : str or Path
        A new (or empty) folder, or a file name ending in ``.zip``.
    extra : dict, optional
        Further JSON-ready information to keep in the manifest (for example
        validation results).
    overwrite : bool
        Replace an existing bundle at ``path`` (a folder is replaced only if it
        is a bundle).

    Returns
    -------
    Path
    """
    path = Path(path)
    # comparison models (clinical + tumour volume) answer a question about the study; they are not for use
    models = offered_models(models or {})
    if not models:
        raise BundleError("save_bundle was given no models; pass a dict such as {'clinical': fitted_model}.")
    training = _as_training(training_summary)
    if training.time_unit != spec.data.time_unit:
        raise BundleError(
            f"the training summary counts time in {training.time_unit} but the study in "
            f"{spec.data.time_unit}; summarise the cohort the models were fitted on."
        )
    try:
        extra_json = json.loads(json.dumps(extra or {}, allow_nan=False))
    except (TypeError, ValueError) as exc:
        raise BundleError(f"extra must hold only JSON-ready values (text, numbers, lists, dicts): {exc}.") from None
    anchor = path.resolve().parent
    files: dict[str, bytes] = {}
    entries = {}
    for i, (name, model) in enumerate(models.items()):
        name = str(name)
        stem = f"models/{i:02d}_{re.sub(r'[^A-Za-z0-9_-]', '_', name)}"
        tree, arrays = encode_model(model)
        buf = io.BytesIO()
        np.savez_compressed(buf, **arrays)
        files[f"{stem}.json"] = json.dumps(tree, allow_nan=False, separators=(",", ":")).encode("utf-8")
        files[f"{stem}.npz"] = buf.getvalue()
        entries[name] = {
            "class": type(model).__name__,
            "label": MODEL_LABELS.get(name, name),
            "state": f"{stem}.json",
            "arrays": f"{stem}.npz",
            "classes": sorted(classes_in(tree)),
            "inputs": describe_inputs(model).to_dict(),
        }
    manifest = {
        "format": FORMAT_NAME,
        "format_version": FORMAT_VERSION,
        "created_utc": datetime.now(UTC).strftime("%Y-%m-%dT%H:%M:%SZ"),
        "workbench_version": workbench.__version__,
        "packages": package_versions(),
        "time_unit": spec.data.time_unit,
        "study": _jsonable(study_to_dict(spec, base=anchor)),
        "training": training.to_dict(),
        "inputs": _union_inputs(entries, spec),
        "models": entries,
        "extra": extra_json,
        "files": {name: hashlib.sha256(data).hexdigest() for name, data in files.items()},
    }
    manifest["manifest_sha256"] = manifest_checksum(manifest)
    files[MANIFEST] = json.dumps(manifest, indent=2, sort_keys=True, allow_nan=False).encode("utf-8")
    _write(files, path, overwrite)
    return path


def load_bundle(path) -> Bundle:
    """Load a bundle folder or .zip, checking format, versions and checksums first.

    Raises
    ------
    BundleError
        If the bundle is missing or damaged, a checksum does not match (a file
        was changed), the format version is unknown, the workbench version
        differs in major.minor, or it holds a class this version cannot read.

    Warns
    -----
    BundleVersionWarning
        When other libraries (numpy, scikit-learn, ...) have other versions
        than when the bundle was written.
    """
    path = Path(path)
    read = _reader(path)
    try:
        manifest = json.loads(read(MANIFEST).decode("utf-8"), parse_constant=_no_constants)
    except (UnicodeDecodeError, json.JSONDecodeError, ValueError) as exc:
        raise BundleError(f"{path}: manifest.json is not valid JSON ({exc}); the bundle is damaged.") from None
    if not isinstance(manifest, dict) or manifest.get("format") != FORMAT_NAME:
        raise BundleError(f"{path} is not a workbench model bundle (its manifest does not say so).")
    if manifest.get("manifest_sha256") != manifest_checksum(manifest):
        raise BundleError(
            f"{path}: manifest.json was changed after the bundle was written (its checksum does not "
            "match). Do not edit bundles by hand; export the model again from the original study run."
        )
    version = manifest.get("format_version")
    if version not in KNOWN_FORMAT_VERSIONS:
        raise BundleError(
            f"{path} uses bundle format version {version!r}; this workbench ({workbench.__version__}) reads "
            f"version(s) {', '.join(map(str, KNOWN_FORMAT_VERSIONS))}. Use a matching workbench version."
        )
    try:
        _check_versions(manifest, path)
        return _read_models(manifest, read, path)
    except (KeyError, TypeError, ValueError, AttributeError, IndexError) as exc:
        raise BundleError(
            f"{path}: the bundle's contents are malformed ({type(exc).__name__}: {exc}); it cannot be used. "
            "Export the model again from the original study run."
        ) from None


def _read_models(manifest: dict, read, path: Path) -> Bundle:
    data = {}
    for name, digest in manifest["files"].items():
        blob = read(name)
        if hashlib.sha256(blob).hexdigest() != digest:
            raise BundleError(
                f"{path}: the file {name} was changed or damaged after the bundle was written (its "
                "checksum does not match). Do not use this bundle; export the model again."
            )
        data[name] = blob
    models = {}
    for name, entry in manifest["models"].items():
        unknown = sorted(set(entry.get("classes", [])) - set(CODECS))
        if unknown:
            raise BundleError(
                f"{path}: model {name!r} contains class(es) {unknown} that this workbench cannot read; "
                "they are refused. Use the workbench version that wrote the bundle."
            )
        tree = json.loads(data[entry["state"]].decode("utf-8"), parse_constant=_no_constants)
        with np.load(io.BytesIO(data[entry["arrays"]]), allow_pickle=False) as npz:
            arrays = {k: npz[k] for k in npz.files}
        models[name] = decode_model(tree, arrays)
    spec = study_from_dict(manifest["study"], base=path.resolve().parent, source=f"{path} (study)")
    return Bundle(models, spec, manifest)


# ---------------------------------------------------------------- helpers


def _as_training(s) -> TrainingSummary:
    if isinstance(s, TrainingSummary):
        return s
    if isinstance(s, CohortSummary):
        return TrainingSummary.from_cohort_summary(s)
    raise BundleError(
        f"training_summary must be a TrainingSummary (from summarise_training) or a CohortSummary, "
        f"not {type(s).__name__}."
    )


def _num(v) -> float:
    return float("nan") if v is None else float(v)


def _jsonable(v):
    if isinstance(v, dict):
        return {str(k): _jsonable(x) for k, x in v.items()}
    if isinstance(v, (list, tuple)):
        return [_jsonable(x) for x in v]
    if isinstance(v, np.generic):
        v = v.item()
    if isinstance(v, float) and not np.isfinite(v):
        return None
    return v


def _no_constants(name: str):
    raise ValueError(f"{name} is not allowed in a bundle")


def _union_inputs(entries: dict, spec: StudySpec) -> dict:
    clinical, seen, imaging, batches = [], set(), [], []
    for e in entries.values():
        inp = e["inputs"]
        for c in inp["clinical"]:
            if c["column"] not in seen:
                seen.add(c["column"])
                clinical.append(c)
        imaging += [f for f in inp["imaging_features"] if f not in set(imaging)]
        batches += [b for b in inp["batches"] if b not in set(batches)]
    return {"clinical": clinical, "imaging_features": imaging, "batch_column": spec.data.batch,
            "batches": batches, "id_column": spec.data.id}


def _major_minor(v) -> tuple[int, int] | None:
    m = re.match(r"^(\d+)\.(\d+)", str(v))
    return (int(m.group(1)), int(m.group(2))) if m else None


def _check_versions(manifest: dict, path: Path) -> None:
    saved = manifest.get("workbench_version")
    here = workbench.__version__
    if _major_minor(saved) is None or _major_minor(saved) != _major_minor(here):
        raise BundleError(
            f"{path} was written by workbench {saved}; this is workbench {here}. Bundles are read only by "
            "the same major.minor version, because the model classes may differ. Install workbench "
            f"{saved} to use it, or refit and export the model with this version."
        )
    now = package_versions()
    changed = [f"{k} {v} -> {now.get(k, 'not installed')}" for k, v in manifest.get("packages", {}).items()
               if k != "survival-workbench" and now.get(k, "not installed") != v]
    if changed:
        warnings.warn(
            f"{path} was written with other library versions ({'; '.join(changed)}). The bundle holds no "
            "library objects, so predictions should not change, but check a few against the original run.",
            BundleVersionWarning, stacklevel=3,
        )


def _safe_name(name: str) -> bool:
    p = PurePosixPath(name)
    return bool(name) and not p.is_absolute() and ".." not in p.parts and "\\" not in name


def _reader(path: Path):
    if not path.exists():
        raise BundleError(f"{path}: no bundle here; give the folder or .zip written by save_bundle.")
    if path.is_dir():
        def read(name: str) -> bytes:
            if not _safe_name(name) or not (path / name).is_file():
                raise BundleError(f"{path}: the bundle lacks {name}; it is incomplete.")
            return (path / name).read_bytes()
        return read
    if not zipfile.is_zipfile(path):
        raise BundleError(f"{path} is neither a bundle folder nor a .zip file.")
    with zipfile.ZipFile(path) as zf:
        members = {i.filename: zf.read(i) for i in zf.infolist() if not i.is_dir() and _safe_name(i.filename)}

    def read_zip(name: str) -> bytes:
        if name not in members:
            raise BundleError(f"{path}: the bundle lacks {name}; it is incomplete.")
        return members[name]
    return read_zip


def _write(files: dict[str, bytes], path: Path, overwrite: bool) -> None:
    if path.suffix.lower() == ".zip":
        if path.exists() and not overwrite:
            raise BundleError(f"{path} exists already; choose another name or pass overwrite=True.")
        path.parent.mkdir(parents=True, exist_ok=True)
        with zipfile.ZipFile(path, "w", compression=zipfile.ZIP_DEFLATED) as zf:
            for name, data in sorted(files.items()):
                zf.writestr(name, data)
        return
    if path.exists() and (not path.is_dir() or any(path.iterdir())):
        if not (overwrite and path.is_dir() and (path / MANIFEST).is_file()):
            raise BundleError(
                f"{path} exists and is not empty; choose a new folder, or pass overwrite=True to replace "
                "a bundle saved there before."
            )
        (path / MANIFEST).unlink()
        shutil.rmtree(path / "models", ignore_errors=True)
    for name, data in files.items():
        target = path / name
        target.parent.mkdir(parents=True, exist_ok=True)
        target.write_bytes(data)
