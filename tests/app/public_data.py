"""Two tables split from a public dataset shipped with scikit-survival, written as a new user would have them.

GBSG2 (German Breast Cancer Study Group 2; 686 patients; Schumacher et al. 1994), from
``sksurv.datasets.load_gbsg2``: recurrence-free survival in days. The hormone-receptor
measurements (progrec, estrec) stand in for the "imaging features" table and age, tumour size
and positive nodes form the clinical table; the event is written as text codes
("recurred" / "event-free") so that the suggested codes are exercised.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd


def gbsg2_frames() -> tuple[pd.DataFrame, pd.DataFrame]:
    from sksurv.datasets import load_gbsg2

    x, y = load_gbsg2()
    pid = [f"G{i:04d}" for i in range(1, len(x) + 1)]
    clinical = pd.DataFrame({
        "pid": pid,
        "rfs_days": y["time"].astype(float),
        "status": np.where(y["cens"], "recurred", "event-free"),
        "age": x["age"].astype(float).to_numpy(),
        "tsize": x["tsize"].astype(float).to_numpy(),
        "pnodes": x["pnodes"].astype(float).to_numpy(),
    })
    features = pd.DataFrame({
        "pid": pid,
        "progrec": x["progrec"].astype(float).to_numpy(),
        "estrec": x["estrec"].astype(float).to_numpy(),
    })
    return features, clinical


def write_gbsg2(folder: Path) -> tuple[Path, Path]:
    """``gbsg2_features.csv`` and ``gbsg2_clinical.csv`` in ``folder``."""
    folder.mkdir(parents=True, exist_ok=True)
    features, clinical = gbsg2_frames()
    f, c = folder / "gbsg2_features.csv", folder / "gbsg2_clinical.csv"
    features.to_csv(f, index=False)
    clinical.to_csv(c, index=False)
    return f, c
