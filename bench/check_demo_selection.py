"""Print the demo signature's selection (penalty, path index, features, coefficients) for seeds 0, 1, 2.

A before/after check for changes to the Cox path solver: run it on both versions and compare
the JSON files (the selections must not change; coefficients to solver tolerance). Invented
demo data (demo_cohort/). Measured 2026-12-03: identical features, penalties and path indices
(14, 13, 11 for seeds 0, 1, 2) and coefficients equal to 6 decimals before and after the
solver throughput changes.

Run: ``PYTHONPATH=. nice -n 19 python bench/check_demo_selection.py out.json`` (about a minute).
"""

from __future__ import annotations

import json
import sys
import warnings
from pathlib import Path

from workbench.models.registry import build_models
from workbench.prepare import prepare_cohort
from workbench.study import read_study
from workbench.validation.engine import _reseeded

DEMO = Path(__file__).parents[1] / "demo_cohort" / "study.toml"


def main(out_path: str) -> None:
    warnings.simplefilter("ignore")
    spec = read_study(DEMO)
    cohort = prepare_cohort(spec).cohort
    out = {}
    for name, m in build_models(spec).items():
        if getattr(m, "signature", None) is None:
            continue
        for seed in (0, 1, 2):
            fitted = _reseeded(m, seed).fit(cohort)
            sig, path = fitted.signature_, fitted.signature_.path_
            rec = {"features": list(sig.selected_features_),
                   "alpha": None if path is None else float(path.alpha),
                   "index": None if path is None else int(path.index),
                   "coef": [round(float(c), 6) for c in sig.coef_.to_numpy()]}
            out[f"{name} seed {seed}"] = rec
            print(f"{name} seed {seed}: index {rec['index']}, alpha {rec['alpha']}, "
                  f"{len(rec['features'])} features {rec['features']}", flush=True)
    Path(out_path).write_text(json.dumps(out, indent=1))


if __name__ == "__main__":
    main(sys.argv[1] if len(sys.argv) > 1 else "demo_selection.json")
