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

This module holds the format (manifest, checksums, versions), saving and loading;
the training summary is in ``bundle_training.py``, the expected inputs in
``bundle_inputs.py`` and the folder / .zip handling in ``bundle_files.py``.

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
import warnings
from dataclasses import dataclass
from datetime import UTC, datetime
from pathlib import Path

import numpy as np

import workbench
from workbench.errors import BundleError, WorkbenchWarning
from workbench.models.registry import MODEL_LABELS, offered_models
from workbench.prepare import package_versions
from workbench.report._codec import CODECS, classes_in, decode_model, encode_model
from workbench.report.bundle_files import MANIFEST, _jsonable, _no_constants, _reader, _write
from workbench.report.bundle_inputs import (
    ClinicalInput,  # noqa: F401  (re-exported: estimate.py and estimate_competing.py import it from here)
    ModelInputs,
    _union_inputs,
    describe_inputs,
)
from workbench.report.bundle_training import (
    TrainingSummary,
    _as_training,
    summarise_training,  # noqa: F401  (re-exported: the app's patient page and exports read it from this module)
)
from workbench.stats.riskgroups import group_labels
from workbench.study import StudySpec, study_from_dict, study_to_dict

FORMAT_NAME = "survival-workbench model bundle"
FORMAT_VERSION = 1
KNOWN_FORMAT_VERSIONS = (1,)
RISK_GROUPS = group_labels(3)
"""Names of the default three risk groups (training tertiles); see :mod:`workbench.stats.riskgroups`."""


class BundleVersionWarning(WorkbenchWarning):
    """A bundle was written with other versions of the supporting libraries."""


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
