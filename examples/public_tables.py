"""Write a features table and a clinical table from a public survival dataset.

The workbench reads two tables joined on a patient id: one of numeric features
(the imaging pool) and one clinical table with follow-up time and event. These
public datasets ship with registry packages (scikit-survival, lifelines); this
script splits one of them into the two tables so you can try the workbench on
real, openly available data before using your own.

    python examples/public_tables.py gbsg2 --out my_study
    workbench inspect --features my_study/features.csv --clinical my_study/clinical.csv \
        --id patient_id --time time --event event --time-unit days
    workbench run my_study/study.toml --out my_study/results --replicates 20

Datasets (numbers of patients and events as shipped):

- ``gbsg2``: German Breast Cancer Study Group 2, 686 patients, recurrence-free
  survival in days (scikit-survival ``load_gbsg2``). Features: tumour size, positive
  nodes, progesterone and oestrogen receptors, and tumour volume computed from the
  size as a sphere; clinical: age, hormone therapy, menopausal status, grade.
- ``veterans``: Veterans' Administration lung cancer trial, 137 patients, survival
  in days (scikit-survival ``load_veterans_lung_cancer``). Features: Karnofsky score
  and months from diagnosis (with their logarithms); clinical: age, cell type,
  prior therapy, treatment.
- ``rossi``: recidivism after release from prison, 432 people, weeks to arrest
  (lifelines ``load_rossi``). Features: prior convictions and its logarithm;
  clinical: financial aid, age, race, work experience, marital status, parole.

The "features" of these datasets are measurements, not radiomic features; the
derived columns (logarithms, the sphere volume) are computed from the shipped
values only, so that a signature has more than one column to choose from.
"""

from __future__ import annotations

import argparse
from pathlib import Path

import numpy as np
import pandas as pd

DATASETS = ("gbsg2", "veterans", "rossi")


def load_public(name: str) -> tuple[pd.DataFrame, pd.DataFrame, dict]:
    """The features table, the clinical table and study settings of a public dataset."""
    if name == "gbsg2":
        from sksurv.datasets import load_gbsg2

        X, y = load_gbsg2()
        ids = [f"G{i + 1:03d}" for i in range(len(X))]
        feats = pd.DataFrame(
            {
                "patient_id": ids,
                "tsize_mm": X["tsize"].to_numpy(float),
                "pnodes": X["pnodes"].to_numpy(float),
                "log_pnodes": np.log1p(X["pnodes"].to_numpy(float)),
                "progrec": X["progrec"].to_numpy(float),
                "log_progrec": np.log1p(X["progrec"].to_numpy(float)),
                "estrec": X["estrec"].to_numpy(float),
                "log_estrec": np.log1p(X["estrec"].to_numpy(float)),
                # a sphere of the recorded diameter, in cubic centimetres
                "tumour_volume_cc": np.pi / 6 * (X["tsize"].to_numpy(float) / 10) ** 3,
            }
        )
        clin = pd.DataFrame(
            {
                "patient_id": ids,
                "time": y["time"],
                "event": y["cens"].astype(int),
                "age": X["age"].to_numpy(float),
                "horTh": X["horTh"].astype(str).to_numpy(),
                "menostat": X["menostat"].astype(str).to_numpy(),
                "tgrade": X["tgrade"].astype(str).to_numpy(),
            }
        )
        settings = {
            "time_unit": "days",
            "horizons": [730.0, 1095.0, 1825.0],
            "predictors": [
                {"column": "age", "kind": "linear", "label": "Age", "unit": "years"},
                {"column": "horTh", "kind": "categorical", "reference": "no", "label": "Hormone therapy"},
                {"column": "menostat", "kind": "categorical", "reference": "Pre", "label": "Menopausal status"},
                {"column": "tgrade", "kind": "ordinal", "levels": ["I", "II", "III"], "label": "Tumour grade"},
            ],
            "volume_feature": "tumour_volume_cc",
        }
    elif name == "veterans":
        from sksurv.datasets import load_veterans_lung_cancer

        X, y = load_veterans_lung_cancer()
        ids = [f"V{i + 1:03d}" for i in range(len(X))]
        karn = X["Karnofsky_score"].to_numpy(float)
        months = X["Months_from_Diagnosis"].to_numpy(float)
        feats = pd.DataFrame(
            {
                "patient_id": ids,
                "karnofsky": karn,
                "log_karnofsky": np.log(karn),
                "months_from_diagnosis": months,
                "log_months_from_diagnosis": np.log1p(months),
            }
        )
        clin = pd.DataFrame(
            {
                "patient_id": ids,
                "time": y["Survival_in_days"],
                "event": y["Status"].astype(int),
                "age": X["Age_in_years"].to_numpy(float),
                "celltype": X["Celltype"].astype(str).to_numpy(),
                "prior_therapy": X["Prior_therapy"].astype(str).to_numpy(),
                "treatment": X["Treatment"].astype(str).to_numpy(),
            }
        )
        settings = {
            "time_unit": "days",
            "horizons": [90.0, 180.0, 365.0],
            "predictors": [
                {"column": "age", "kind": "linear", "label": "Age", "unit": "years"},
                {"column": "celltype", "kind": "categorical", "reference": "squamous", "label": "Cell type"},
                {"column": "treatment", "kind": "categorical", "reference": "standard", "label": "Treatment"},
            ],
            "volume_feature": None,
        }
    elif name == "rossi":
        from lifelines.datasets import load_rossi

        d = load_rossi()
        ids = [f"R{i + 1:03d}" for i in range(len(d))]
        prio = d["prio"].to_numpy(float)
        feats = pd.DataFrame({"patient_id": ids, "prio": prio, "log_prio": np.log1p(prio)})
        clin = pd.DataFrame(
            {
                "patient_id": ids,
                "week": d["week"].to_numpy(float),
                "arrest": d["arrest"].to_numpy(int),
                "fin": np.where(d["fin"] == 1, "yes", "no"),
                "age": d["age"].to_numpy(float),
                "race": d["race"].astype(str).to_numpy(),
                "wexp": np.where(d["wexp"] == 1, "yes", "no"),
                "mar": np.where(d["mar"] == 1, "yes", "no"),
                "paro": np.where(d["paro"] == 1, "yes", "no"),
            }
        )
        settings = {
            "time_unit": "weeks",
            "horizons": [13.0, 26.0, 39.0],
            "time": "week",
            "event": "arrest",
            "predictors": [
                {"column": "fin", "kind": "categorical", "reference": "no", "label": "Financial aid"},
                {"column": "age", "kind": "linear", "label": "Age", "unit": "years"},
                {"column": "wexp", "kind": "categorical", "reference": "no", "label": "Work experience"},
                {"column": "paro", "kind": "categorical", "reference": "no", "label": "Parole"},
            ],
            "volume_feature": None,
        }
    else:
        raise ValueError(f"unknown dataset {name!r}; choose one of {', '.join(DATASETS)}")
    return feats, clin, settings


def study_text(name: str, settings: dict, *, replicates: int = 50) -> str:
    """A study file for the two tables written next to it."""
    lines = [
        f"# {name}: a public dataset split into a features and a clinical table",
        "[study]",
        f'name = "{name} (public dataset)"',
        f"horizons = {settings['horizons']}",
        "",
        "[data]",
        'features = "features.csv"',
        'clinical = "clinical.csv"',
        'id = "patient_id"',
        f'time = "{settings.get("time", "time")}"',
        f'event = "{settings.get("event", "event")}"',
        f'time_unit = "{settings["time_unit"]}"',
        "",
    ]
    for p in settings["predictors"]:
        lines.append("[[predictor]]")
        for k, v in p.items():
            lines.append(f"{k} = {v!r}".replace("'", '"'))
        lines.append("")
    lines.append("[imaging]")
    if settings.get("volume_feature"):
        lines.append(f'volume_feature = "{settings["volume_feature"]}"')
    lines += ["", "[validation]", 'method = "bootstrap"', f"replicates = {replicates}", ""]
    return "\n".join(lines)


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("dataset", choices=DATASETS)
    ap.add_argument("--out", required=True, help="folder for features.csv, clinical.csv and study.toml")
    args = ap.parse_args(argv)
    feats, clin, settings = load_public(args.dataset)
    out = Path(args.out)
    out.mkdir(parents=True, exist_ok=True)
    feats.to_csv(out / "features.csv", index=False)
    clin.to_csv(out / "clinical.csv", index=False)
    (out / "study.toml").write_text(study_text(args.dataset, settings), encoding="utf-8")
    print(f"wrote {out / 'features.csv'}, {out / 'clinical.csv'} and {out / 'study.toml'}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
