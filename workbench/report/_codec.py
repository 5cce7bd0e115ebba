"""Encode fitted workbench objects as JSON plus numeric arrays, and back, without pickle.

Every class the bundle may contain is listed in :data:`CODECS`, an explicit
table from class name to its encoder and decoder. An encoded object is a JSON
tree; numeric arrays are replaced by references (``{"$array": "a3"}``) into a
separate dictionary of arrays, which the bundle writes to an ``.npz`` file and
reads back with ``allow_pickle=False``. Decoding builds objects only from this
table: a class name that is not in it is refused, so reading a bundle never runs
code that the bundle itself supplies.

Estimators are rebuilt by calling their constructor with the stored arguments
(``__init__`` only stores them, by the project's rules) and then setting the
learned attributes named in the table, one by one. The encoder refuses an
object that carries a learned attribute (``name_``) missing from the table, so
that a new attribute cannot be dropped silently from a saved model.

The random survival forest is the one special case: its trees (our own
:class:`~workbench.models.survtree.SurvivalTree`, or scikit-learn ``Tree``
objects, whose only serialisation is pickle, when grown with
``builder="library"``) are stored, for all trees at once, as what prediction
needs: the node arrays (children, split feature, threshold), each node's leaf
number and the leaf curves on the time grid. They are rebuilt as
:class:`StoredTree` (the same class as ``SurvivalTree``), with the same
``apply`` rule (go left when ``x[feature] <= threshold``, comparing the float32
input in double precision as scikit-learn does).
"""

from __future__ import annotations

import dataclasses
import inspect
import math
from collections.abc import Callable, Mapping
from dataclasses import dataclass
from types import MappingProxyType

import numpy as np
import pandas as pd

from workbench.errors import BundleError
from workbench.models.cox import ClinicalCox, CombinedCox
from workbench.models.forest import SurvivalForest
from workbench.models.penalized import PenalizedPathResult
from workbench.models.recalibrated import RecalibratedModel
from workbench.models.signature import ClinicalPlusImagingCox, ImagingSignature
from workbench.models.stability import StabilityResult
from workbench.models.survtree import SurvivalTree
from workbench.models.wide import ForestModel, PenalisedAllCox
from workbench.preprocess.clinical import ClinicalTransformer, PredictorSpec, TermInfo
from workbench.preprocess.harmonize import ComBat
from workbench.preprocess.reduce import (
    CoxScreen,
    NearZeroVarianceFilter,
    RedundancyFilter,
    Standardizer,
    StepRecord,
)
from workbench.stats.coxph import ChiSquareTest, CoxPHFit

_NUMERIC_KINDS = "biufU"  # bool, integers, floats and fixed-width text; never object


class ArrayStore:
    """Numeric arrays of one encoded object tree, keyed ``a0``, ``a1``, ..."""

    def __init__(self, arrays: Mapping[str, np.ndarray] | None = None):
        self.arrays: dict[str, np.ndarray] = dict(arrays or {})

    def put(self, a: np.ndarray) -> dict:
        a = np.asarray(a)
        if a.dtype.kind not in _NUMERIC_KINDS:
            raise BundleError(f"an array of type {a.dtype} cannot be saved without pickle.")
        key = f"a{len(self.arrays)}"
        self.arrays[key] = np.ascontiguousarray(a)
        return {"$array": key}

    def get(self, key: str, where: str) -> np.ndarray:
        if key not in self.arrays:
            raise BundleError(f"{where}: the array {key!r} is missing from the bundle's array file.")
        a = self.arrays[key]
        if a.dtype.kind not in _NUMERIC_KINDS:
            raise BundleError(f"{where}: the array {key!r} has type {a.dtype}, which a bundle may not hold.")
        return a


# ---------------------------------------------------------------- plain values


def encode_value(v, store: ArrayStore, where: str = "value"):
    """A JSON-ready form of ``v``; arrays go to ``store``."""
    if v is None or isinstance(v, (bool, str)):
        return v
    if isinstance(v, np.generic):
        return encode_value(v.item(), store, where)
    if isinstance(v, int):
        return v
    if isinstance(v, float):
        return v if math.isfinite(v) else {"$float": repr(v)}
    if isinstance(v, tuple):
        return {"$tuple": [encode_value(x, store, where) for x in v]}
    if isinstance(v, list):
        return [encode_value(x, store, where) for x in v]
    if isinstance(v, dict):
        bad = [k for k in v if not isinstance(k, str)]
        if bad:
            raise BundleError(f"{where}: dictionary keys must be text to be saved; found {bad[:3]}.")
        return {"$dict": {k: encode_value(x, store, f"{where}[{k!r}]") for k, x in v.items()}}
    if isinstance(v, np.ndarray):
        if v.dtype.kind in _NUMERIC_KINDS:
            return store.put(v)
        if v.dtype.kind == "O" and all(isinstance(x, str) for x in v.ravel()):
            return {"$text_array": [str(x) for x in v.ravel()], "shape": list(v.shape)}
        raise BundleError(f"{where}: an array of type {v.dtype} cannot be saved safely.")
    if isinstance(v, pd.Series):
        index = [str(i) for i in v.index]
        if list(v.index) != index:
            raise BundleError(f"{where}: only series labelled by text can be saved.")
        return {"$series": {"values": store.put(v.to_numpy()), "index": index,
                            "name": None if v.name is None else str(v.name)}}
    codec = CODECS.get(type(v).__name__)
    if codec is not None and type(v) is codec.cls:
        return codec.encode(v, store)
    raise BundleError(
        f"{where}: an object of type {type(v).__module__}.{type(v).__name__} cannot be saved in a "
        "bundle; only the workbench's own model classes are supported."
    )


def decode_value(v, store: ArrayStore, where: str = "value"):
    """Inverse of :func:`encode_value`; refuses anything not in :data:`CODECS`."""
    if v is None or isinstance(v, (bool, int, float, str)):
        return v
    if isinstance(v, list):
        return [decode_value(x, store, where) for x in v]
    if not isinstance(v, dict) or len(v) == 0:
        raise BundleError(f"{where}: unreadable entry {str(v)[:60]!r}.")
    if "$float" in v:
        text = v["$float"]
        if text not in ("nan", "inf", "-inf"):
            raise BundleError(f"{where}: {text!r} is not a special number.")
        return float(text)
    if "$tuple" in v:
        return tuple(decode_value(x, store, where) for x in _list(v["$tuple"], where))
    if "$dict" in v:
        d = v["$dict"]
        if not isinstance(d, dict):
            raise BundleError(f"{where}: a dictionary entry is malformed.")
        return {str(k): decode_value(x, store, f"{where}[{k!r}]") for k, x in d.items()}
    if "$array" in v:
        return store.get(str(v["$array"]), where)
    if "$text_array" in v:
        items = _list(v["$text_array"], where)
        if not all(isinstance(x, str) for x in items):
            raise BundleError(f"{where}: a text array holds something other than text.")
        a = np.empty(len(items), dtype=object)
        a[:] = items
        return a.reshape(tuple(int(s) for s in v.get("shape", [len(items)])))
    if "$series" in v:
        s = v["$series"]
        values = store.get(str(s["values"]["$array"]), where)
        index = _list(s["index"], where)
        if len(index) != values.shape[0]:
            raise BundleError(f"{where}: a series has {values.shape[0]} values but {len(index)} labels.")
        return pd.Series(values, index=[str(i) for i in index], name=s.get("name"))
    name = v.get("$object") or v.get("$dataclass")
    if name is None:
        raise BundleError(f"{where}: unreadable entry with keys {sorted(v)[:4]}.")
    codec = CODECS.get(name)
    if codec is None:
        raise BundleError(
            f"{where}: the bundle contains an object of class {name!r}, which this version of the "
            "workbench does not know how to read; it is refused rather than guessed. Use the "
            "workbench version that wrote the bundle, or export the model again."
        )
    return codec.decode(v, store)


def _list(x, where: str) -> list:
    if not isinstance(x, list):
        raise BundleError(f"{where}: expected a list in the bundle, found {type(x).__name__}.")
    return x


# ---------------------------------------------------------------- codecs


@dataclass(frozen=True)
class Codec:
    """How one class is written and read back."""

    cls: type
    encode: Callable
    decode: Callable


def init_params(obj) -> dict:
    """Constructor arguments of ``obj``, read from the attributes ``__init__`` stored."""
    sig = inspect.signature(type(obj).__init__)
    kinds = (inspect.Parameter.POSITIONAL_OR_KEYWORD, inspect.Parameter.KEYWORD_ONLY)
    return {p.name: getattr(obj, p.name) for p in sig.parameters.values()
            if p.name != "self" and p.kind in kinds}


def learned_attributes(obj) -> list[str]:
    """Public attributes ending in ``_`` (the scikit-learn marker of learned state)."""
    return [k for k in vars(obj) if k.endswith("_") and not k.startswith("_")]


def _check_state(obj, known: tuple[str, ...]) -> None:
    unknown = [k for k in learned_attributes(obj) if k not in known]
    if unknown:
        raise BundleError(
            f"{type(obj).__name__} carries learned attribute(s) {unknown} that the bundle format does "
            "not know, so a saved copy would predict differently. The table in "
            "workbench/report/_codec.py must list them before this model can be saved."
        )


def _estimator_codec(cls: type, state: tuple[str, ...]) -> Codec:
    def encode(obj, store):
        _check_state(obj, state)
        name = cls.__name__
        params = {k: encode_value(v, store, f"{name}.{k}") for k, v in init_params(obj).items()}
        learned = {k: encode_value(getattr(obj, k), store, f"{name}.{k}") for k in state if hasattr(obj, k)}
        return {"$object": name, "params": params, "state": learned}

    def decode(d, store):
        name = cls.__name__
        params, learned = d.get("params", {}), d.get("state", {})
        if not isinstance(params, dict) or not isinstance(learned, dict):
            raise BundleError(f"{name}: the stored parameters are malformed.")
        allowed = set(inspect.signature(cls.__init__).parameters) - {"self"}
        extra = sorted(set(params) - allowed) + sorted(set(learned) - set(state))
        if extra:
            raise BundleError(f"{name}: the bundle stores unknown entries {extra[:5]}; refusing to guess.")
        obj = cls(**{k: decode_value(v, store, f"{name}.{k}") for k, v in params.items()})
        for k, v in learned.items():
            setattr(obj, k, decode_value(v, store, f"{name}.{k}"))
        return obj

    return Codec(cls, encode, decode)


def _dataclass_codec(cls: type) -> Codec:
    names = tuple(f.name for f in dataclasses.fields(cls))

    def encode(obj, store):
        return {"$dataclass": cls.__name__,
                "fields": {k: encode_value(getattr(obj, k), store, f"{cls.__name__}.{k}") for k in names}}

    def decode(d, store):
        fields = d.get("fields")
        if not isinstance(fields, dict) or set(fields) - set(names):
            raise BundleError(f"{cls.__name__}: the stored fields do not match this version's fields {names}.")
        values = {k: decode_value(v, store, f"{cls.__name__}.{k}") for k, v in fields.items()}
        for v in values.values():
            if isinstance(v, np.ndarray):
                v.setflags(write=False)  # frozen records keep read-only arrays, as when fitted
        try:
            return cls(**values)
        except (TypeError, ValueError) as exc:
            raise BundleError(f"{cls.__name__}: the stored record is not valid ({exc}).") from None

    return Codec(cls, encode, decode)


# ---------------------------------------------------------------- forest


# Predict-only trees rebuilt from their node arrays: the forest's own tree class
# (go left when x[feature] <= threshold, float32 input compared in double precision).
StoredTree = SurvivalTree


_FOREST_PLAIN = ("tree_seeds_", "time_grid_", "first_event_time_", "last_event_time_", "n_features_in_",
                 "feature_names_in_", "n_train_", "training_fingerprint_", "oob_score_", "oob_risk_")
_FOREST_STATE = (*_FOREST_PLAIN, "trees_", "node_to_leaf_", "leaf_survival_", "leaf_risk_")


def _encode_forest(obj: SurvivalForest, store: ArrayStore) -> dict:
    _check_state(obj, _FOREST_STATE)
    params = {k: encode_value(v, store, f"SurvivalForest.{k}") for k, v in init_params(obj).items()}
    state = {k: encode_value(getattr(obj, k), store, f"SurvivalForest.{k}")
             for k in _FOREST_PLAIN if hasattr(obj, k)}
    if hasattr(obj, "trees_"):
        trees = obj.trees_
        state["trees"] = {
            "node_counts": store.put(np.array([t.node_count for t in trees], dtype=np.int64)),
            "leaf_counts": store.put(np.array([s.shape[0] for s in obj.leaf_survival_], dtype=np.int64)),
            "children_left": store.put(np.concatenate([t.children_left for t in trees]).astype(np.int64)),
            "children_right": store.put(np.concatenate([t.children_right for t in trees]).astype(np.int64)),
            "feature": store.put(np.concatenate([t.feature for t in trees]).astype(np.int64)),
            "threshold": store.put(np.concatenate([t.threshold for t in trees]).astype(np.float64)),
            "node_to_leaf": store.put(np.concatenate(obj.node_to_leaf_).astype(np.int64)),
            "leaf_survival": store.put(np.concatenate(obj.leaf_survival_, axis=0)),
            "leaf_risk": store.put(np.concatenate(obj.leaf_risk_)),
        }
    return {"$object": "SurvivalForest", "params": params, "state": state}


def _split(a: np.ndarray, counts: np.ndarray) -> list[np.ndarray]:
    return np.split(a, np.cumsum(counts)[:-1])


def _decode_forest(d: dict, store: ArrayStore) -> SurvivalForest:
    where = "SurvivalForest"
    params, state = d.get("params", {}), dict(d.get("state", {}))
    allowed = set(inspect.signature(SurvivalForest.__init__).parameters) - {"self"}
    extra = sorted(set(params) - allowed) + sorted(set(state) - {*_FOREST_PLAIN, "trees"})
    if extra:
        raise BundleError(f"{where}: the bundle stores unknown entries {extra[:5]}; refusing to guess.")
    forest = SurvivalForest(**{k: decode_value(v, store, f"{where}.{k}") for k, v in params.items()})
    trees = state.pop("trees", None)
    for k, v in state.items():
        setattr(forest, k, decode_value(v, store, f"{where}.{k}"))
    if trees is None:
        return forest
    arr = {k: decode_value(v, store, f"{where}.trees.{k}") for k, v in trees.items()}
    need = ("node_counts", "leaf_counts", "children_left", "children_right", "feature", "threshold",
            "node_to_leaf", "leaf_survival", "leaf_risk")
    if any(k not in arr for k in need):
        raise BundleError(f"{where}: the stored trees are incomplete.")
    nodes, leaves = arr["node_counts"], arr["leaf_counts"]
    n_nodes, n_leaves = int(nodes.sum()), int(leaves.sum())
    grid = np.asarray(forest.time_grid_)
    shapes_ok = (
        nodes.size == leaves.size and np.all(nodes >= 1) and np.all(leaves >= 1)
        and all(arr[k].shape == (n_nodes,) for k in ("children_left", "children_right", "feature",
                                                      "threshold", "node_to_leaf"))
        and arr["leaf_survival"].shape == (n_leaves, grid.size) and arr["leaf_risk"].shape == (n_leaves,)
    )
    if not shapes_ok:
        raise BundleError(f"{where}: the stored tree arrays have inconsistent sizes; the bundle is damaged.")
    rebuilt, to_leaf = [], []
    for cl, cr, ft, th, nl, k in zip(
        *(_split(arr[key], nodes) for key in ("children_left", "children_right", "feature", "threshold",
                                             "node_to_leaf")), leaves, strict=True):
        internal = cl != -1
        idx = np.arange(cl.size)
        # children come after their parent in the depth-first numbering, so a walk always ends
        valid = (
            np.all((cl[internal] > idx[internal]) & (cl[internal] < cl.size))
            and np.all((cr[internal] > idx[internal]) & (cr[internal] < cl.size))
            and np.all(cr[~internal] == -1)
            and np.all((ft[internal] >= 0) & (ft[internal] < int(forest.n_features_in_)))
            and np.array_equal(nl[~internal], np.arange(int(k))) and np.all(nl[internal] == -1)
        )
        if not valid:
            raise BundleError(f"{where}: a stored tree is not a valid tree; the bundle is damaged.")
        rebuilt.append(StoredTree(cl, cr, ft, th))
        to_leaf.append(nl.astype(np.int32))
    forest.trees_ = rebuilt
    forest.node_to_leaf_ = to_leaf
    forest.leaf_survival_ = _split(arr["leaf_survival"], leaves)
    forest.leaf_risk_ = _split(arr["leaf_risk"], leaves)
    return forest


# ---------------------------------------------------------------- the table

_COX_STATE = ("transformer_", "fit_", "loglik_", "n_params_", "n_train_", "n_events_")
_WIDE_STATE = ("transformer_", "feature_names_in_", "feature_medians_", "combat_", "n_train_", "n_events_")
_STEP_STATE = ("feature_names_in_", "support_", "record_")

CODECS: Mapping[str, Codec] = MappingProxyType({
    # models behind the protocol
    "ClinicalCox": _estimator_codec(ClinicalCox, _COX_STATE),
    "CombinedCox": _estimator_codec(
        CombinedCox, (*_COX_STATE, "feature_medians_", "signature_", "selected_features_",
                      "coefficient_source_", "signature_coef_in_sample_", "shrinkage_factor_")),
    "PenalisedAllCox": _estimator_codec(
        PenalisedAllCox, (*_WIDE_STATE, "model_", "selected_features_", "lp_mean_", "baseline_")),
    "ForestModel": _estimator_codec(ForestModel, (*_WIDE_STATE, "columns_", "forest_")),
    # their parts
    "ClinicalTransformer": _estimator_codec(
        ClinicalTransformer, ("terms_", "columns_", "n_train_", "n_dropped_train_", "n_imputed_train_")),
    "ImagingSignature": _estimator_codec(
        ImagingSignature, ("feature_names_in_", "combat_", "scaler_", "filters_", "path_", "stability_", "steps_",
                           "selected_features_", "coef_", "coef_original_", "intercept_original_",
                           "selected_index_")),
    "ClinicalPlusImagingCox": _estimator_codec(
        ClinicalPlusImagingCox, ("scaler_", "path_", "feature_names_in_", "coef_", "selected_features_")),
    "ComBat": _estimator_codec(
        ComBat, ("batches_", "grand_mean_", "var_pooled_", "beta_", "gamma_hat_", "delta_hat_",
                 "gamma_star_", "delta_star_", "passthrough_", "n_iter_", "n_features_in_",
                 "n_covariates_", "feature_names_in_")),
    "Standardizer": _estimator_codec(Standardizer, (*_STEP_STATE, "mean_", "scale_")),
    "NearZeroVarianceFilter": _estimator_codec(
        NearZeroVarianceFilter, (*_STEP_STATE, "freq_ratio_", "percent_unique_")),
    "RedundancyFilter": _estimator_codec(RedundancyFilter, (*_STEP_STATE, "representativeness_", "association_")),
    "CoxScreen": _estimator_codec(CoxScreen, (*_STEP_STATE, "z_", "p_value_", "q_value_")),
    "SurvivalForest": Codec(SurvivalForest, _encode_forest, _decode_forest),
    "RecalibratedModel": _estimator_codec(RecalibratedModel, ("centre_", "fit_", "slope_", "slope_se_")),
    # frozen records
    "PredictorSpec": _dataclass_codec(PredictorSpec),
    "TermInfo": _dataclass_codec(TermInfo),
    "CoxPHFit": _dataclass_codec(CoxPHFit),
    "ChiSquareTest": _dataclass_codec(ChiSquareTest),
    "PenalizedPathResult": _dataclass_codec(PenalizedPathResult),
    "StepRecord": _dataclass_codec(StepRecord),
    "StabilityResult": _dataclass_codec(StabilityResult),
})
"""Every class a bundle may contain: class name -> (class, encoder, decoder)."""


def classes_in(tree) -> set[str]:
    """Class names referenced anywhere in an encoded tree."""
    found: set[str] = set()
    stack = [tree]
    while stack:
        v = stack.pop()
        if isinstance(v, dict):
            for key in ("$object", "$dataclass"):
                if isinstance(v.get(key), str):
                    found.add(v[key])
            stack.extend(v.values())
        elif isinstance(v, list):
            stack.extend(v)
    return found


def encode_model(model) -> tuple[dict, dict[str, np.ndarray]]:
    """Encode one fitted model: (JSON tree, arrays)."""
    store = ArrayStore()
    tree = encode_value(model, store, type(model).__name__)
    return tree, store.arrays


def decode_model(tree: dict, arrays: Mapping[str, np.ndarray]):
    """Rebuild a model from :func:`encode_model`'s output."""
    unknown = sorted(classes_in(tree) - set(CODECS))
    if unknown:
        raise BundleError(
            f"the bundle contains object(s) of class {unknown}, which this version of the workbench "
            "does not know how to read; they are refused rather than guessed."
        )
    return decode_value(tree, ArrayStore(arrays), "model")
