"""Plain JSON from the workbench's result objects.

:func:`jsonable` turns dataclasses, numpy values, data frames and tuple-keyed dicts into
the plain types ``json.dumps`` writes (NaN and infinities become null). Every builder of
``results.json`` and its sibling files goes through it.
"""

from __future__ import annotations

import dataclasses
import math

import numpy as np
import pandas as pd


def jsonable(obj):
    """Dataclasses, numpy values and tuple-keyed dicts to plain JSON types (NaN/inf to null)."""
    if dataclasses.is_dataclass(obj) and not isinstance(obj, type):
        return {f.name: jsonable(getattr(obj, f.name)) for f in dataclasses.fields(obj)}
    if isinstance(obj, dict):
        return {(" vs ".join(map(str, k)) if isinstance(k, tuple) else str(k)): jsonable(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [jsonable(v) for v in obj]
    if isinstance(obj, np.ndarray):
        return [jsonable(v) for v in obj.tolist()]
    if isinstance(obj, (np.bool_, bool)):
        return bool(obj)
    if isinstance(obj, (np.integer, int)):
        return int(obj)
    if isinstance(obj, (np.floating, float)):
        x = float(obj)
        return x if math.isfinite(x) else None
    if isinstance(obj, pd.DataFrame):
        return jsonable(obj.to_dict(orient="records"))
    if obj is None or isinstance(obj, str):
        return obj
    return str(obj)
