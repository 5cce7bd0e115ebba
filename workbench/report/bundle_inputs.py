"""The input columns a bundled model expects, as learned on the training rows.

:class:`ClinicalInput` (one clinical field: kind, levels, unit, transform, detection
limit, missing-value and unseen-level rules, training range), :class:`ModelInputs` (one
model's clinical fields, imaging features and scanners), :func:`describe_inputs` (read
off a fitted model) and :func:`_union_inputs` (the bundle-wide list in the manifest).
"""

from __future__ import annotations

from dataclasses import asdict, dataclass

from workbench.errors import BundleError
from workbench.models.cox import ClinicalCox, CombinedCox
from workbench.models.recalibrated import RecalibratedModel
from workbench.models.wide import ForestModel, PenalisedAllCox
from workbench.report.bundle_files import _jsonable
from workbench.study import StudySpec


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
