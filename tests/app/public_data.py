"""Tables split from public datasets shipped with scikit-survival, written as a new user would have them.

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


CGVHD_CODES = {0: "censored", 1: "cgvhd", 2: "relapse", 3: "death"}


def cgvhd_frames() -> tuple[pd.DataFrame, pd.DataFrame, np.ndarray]:
    """scikit-survival's ``load_cgvhd`` (chronic graft-versus-host disease after transplant, 100
    patients; Pintilie, Competing Risks: A Practical Perspective, Wiley 2006) as a new user's two
    tables: age and its logarithm as the "imaging" table; follow-up in years and the status as text
    codes (censored, cgvhd, relapse, death) in the clinical table. Also the status codes as shipped."""
    from sksurv.datasets import load_cgvhd

    x, y = load_cgvhd()
    ids = [f"C{i:03d}" for i in range(len(x))]
    age = x["age"].to_numpy(float)
    features = pd.DataFrame({"patient_id": ids, "age": age, "log_age": np.log(age)})
    clinical = pd.DataFrame({"patient_id": ids, "years": y["ftime"],
                             "status": [CGVHD_CODES[int(s)] for s in y["status"]],
                             "dx": x["dx"].astype(str).to_numpy(), "tx": x["tx"].astype(str).to_numpy(),
                             "extent": x["extent"].astype(str).to_numpy()})
    return features, clinical, np.asarray(y["status"], int)


def cgvhd_study(folder: Path):
    """The cgvhd tables written to ``folder`` and a competing-risks study of them (chronic GVHD the
    event of interest, relapse and death competing; horizons 0.5 and 1 year; seed 3)."""
    from workbench.study import study_from_dict

    features, clinical, _ = cgvhd_frames()
    folder.mkdir(parents=True, exist_ok=True)
    features.to_csv(folder / "f.csv", index=False)
    clinical.to_csv(folder / "c.csv", index=False)
    doc = {"study": {"name": "cgvhd", "horizons": [0.5, 1.0], "seed": 3},
           "data": {"features": "f.csv", "clinical": "c.csv", "id": "patient_id", "time": "years",
                    "time_unit": "years", "event": "status", "event_codes": ["cgvhd"],
                    "competing_codes": ["relapse", "death"], "censor_codes": ["censored"]},
           "predictor": [{"column": "dx", "kind": "categorical", "reference": "CML"},
                         {"column": "extent", "kind": "categorical", "reference": "L"}]}
    return study_from_dict(doc, base=folder)
