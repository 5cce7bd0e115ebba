"""The study file: what to fit and how to validate it, as frozen dataclasses.

A study file is TOML with our own layout (see ``docs/study-file.md``). Reading
checks every key and value and says, for a misspelt key, which key was probably
meant. Writing a :class:`StudySpec` back out and reading it again gives the same
spec; this is how the command line and the app hand studies to each other.

Relative file paths in ``[data]`` and ``[external]`` are resolved against the
folder of the study file when it is read, and written back relative to the
folder of the file being written when possible.

The spec's dataclasses are in ``study_spec.py`` (imported from here as before) and
the rules their values keep in ``study_rules.py``; this module reads and writes the file.
"""

from __future__ import annotations

import difflib
import os
import tomllib
from dataclasses import fields, replace
from pathlib import Path

import tomli_w

from workbench.cohort.core import TIME_UNITS
from workbench.cohort.io import ColumnMap
from workbench.errors import SpecError, WorkbenchError
from workbench.preprocess.predictor_spec import PredictorSpec
from workbench.study_spec import (
    AddedValueSpec,
    CombinedSpec,
    DataSpec,
    ExternalSpec,
    FiguresSpec,
    ForestSpec,
    HarmoniseSpec,
    ImagingSpec,
    ModelsSpec,
    PenaltySpec,
    ReduceSpec,
    ReproducibilitySpec,
    StudySpec,
    ValidationSpec,
)
from workbench.study_types import check_value, field_types

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
