"""Write the invented demo cohort: three network hospitals plus one external hospital.

Synthetic data only; no real patient is behind any row. Run from the repository root::

    python demo_cohort/generate.py

Rerunning reproduces every file byte for byte (fixed seeds, fixed number formats).
"""

from __future__ import annotations

import json
import sys
from pathlib import Path

import pandas as pd

from workbench.simulate import EXTERNAL_HOSPITALS, NETWORK_HOSPITALS, simulate_cohort
from workbench.simulate_competing import add_competing_death
from workbench.simulate_repeats import population_icc, simulate_repeats

HERE = Path(__file__).resolve().parent
TRAINING_SEED = 20240
EXTERNAL_SEED = 20241
N_TRAINING = 500
N_EXTERNAL = 150
REPEAT_SEED = 20242
# Deaths from other causes: a stream of their own, so every earlier column is unchanged
COMPETING_SEED = 20243
EXTERNAL_COMPETING_SEED = 20244
N_REPEATS = 40  # patients segmented a second time (reproducibility)
FEATURE_FORMAT = "%.5g"  # five significant digits keep the files small


def _csv(frame: pd.DataFrame, float_format: str) -> str:
    return frame.to_csv(index=False, float_format=float_format, lineterminator="\n")


def build_files() -> dict[str, str]:
    """Return the text of every demo file, keyed by file name."""
    train = simulate_cohort(N_TRAINING, random_state=TRAINING_SEED, hospitals=NETWORK_HOSPITALS)
    ext = simulate_cohort(N_EXTERNAL, random_state=EXTERNAL_SEED, hospitals=EXTERNAL_HOSPITALS)
    if set(train.clinical["patient_id"]) & set(ext.clinical["patient_id"]):
        raise RuntimeError("patient identifiers collide between the training and external cohorts.")
    if train.truth["model"] != ext.truth["model"]:
        raise RuntimeError("the training and external cohorts were drawn from different models.")
    train_clinical, train_cr = add_competing_death(train, random_state=COMPETING_SEED)
    ext_clinical, ext_cr = add_competing_death(ext, random_state=EXTERNAL_COMPETING_SEED)
    repeats, repeat_truth = simulate_repeats(train, N_REPEATS, random_state=REPEAT_SEED)
    icc = population_icc(20000, random_state=REPEAT_SEED + 1).round(4)
    repeat_truth = {**repeat_truth,
                    "icc_population": {"form": "ICC(3,1)", "n_patients": 20000, "values": icc.to_dict()},
                    "poorly_reproducible": sorted(icc.index[icc < 0.75])}
    truth = {
        "synthetic": True,
        "description": "Invented cohort for demonstration and testing; no real patients.",
        "model": train.truth["model"],
        "scanner_shifts": {**train.truth["scanner_shifts"], **ext.truth["scanner_shifts"]},
        "scanner_sensitivity": train.truth["scanner_sensitivity"],
        "cohorts": {
            "training": {"files": ["clinical.csv", "imaging.csv"], **train.truth["cohort"]},
            "external": {"files": ["external_clinical.csv", "external_imaging.csv"],
                         **ext.truth["cohort"]},
        },
        "repeats": {"file": "repeats.csv", "seed": REPEAT_SEED, **repeat_truth},
        "competing": {
            **{k: v for k, v in train_cr.items() if k not in ("seed", "counts")},
            "cohorts": {"training": {"seed": train_cr["seed"], "counts": train_cr["counts"]},
                        "external": {"seed": ext_cr["seed"], "counts": ext_cr["counts"]}},
        },
    }
    return {
        "clinical.csv": _csv(train_clinical, "%.1f"),
        "imaging.csv": _csv(train.imaging, FEATURE_FORMAT),
        "external_clinical.csv": _csv(ext_clinical, "%.1f"),
        "external_imaging.csv": _csv(ext.imaging, FEATURE_FORMAT),
        "repeats.csv": _csv(repeats, FEATURE_FORMAT),
        "truth.json": json.dumps(truth, indent=2) + "\n",
    }


def main(out_dir: Path = HERE) -> None:
    for name, text in build_files().items():
        (out_dir / name).write_text(text, encoding="utf-8", newline="\n")


if __name__ == "__main__":
    main(Path(sys.argv[1]) if len(sys.argv) > 1 else HERE)
