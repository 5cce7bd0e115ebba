"""Shared fixtures of the competing-risks tests."""

from __future__ import annotations

import pytest


@pytest.fixture(scope="module")
def cgvhd_study(tmp_path_factory):
    """scikit-survival's load_cgvhd as a clinical-only competing study: (folder, study dict, clinical table)."""
    from sksurv.datasets import load_cgvhd

    X, y = load_cgvhd()
    folder = tmp_path_factory.mktemp("cgvhd")
    clin = X.astype({c: str for c in ("dx", "tx", "extent")}).assign(
        patient_id=[f"P{i:03d}" for i in range(len(X))], years=y["ftime"], status=y["status"].astype(str))
    clin.to_csv(folder / "clinical.csv", index=False)
    doc = {"study": {"name": "cgvhd", "horizons": [0.45, 0.65], "seed": 11},
           "data": {"clinical": "clinical.csv", "time": "years", "time_unit": "years", "event": "status",
                    "event_codes": ["1"], "competing_codes": ["2", "3"], "censor_codes": ["0"]},
           "predictor": [{"column": "age"}, {"column": "dx", "kind": "categorical", "reference": "CML"},
                         {"column": "extent", "kind": "categorical", "reference": "L"}]}
    return folder, doc, clin
