"""The demo's reproducibility filter against the truth its generator wrote (demo_cohort/truth.json).

Invented data (demo only): 40 patients of the network segmented twice; truth.json lists each
feature's ICC(3,1) in a simulated cohort of 20,000 patients of the same design. With 40
patients an estimated ICC has an SD of about 0.03-0.1, so the check is made away from the
0.75 threshold: features well below it are removed, features well above it kept, and every
prognostic feature of the generating model survives.
"""

from __future__ import annotations

import json
from pathlib import Path

import pandas as pd

from workbench.prepare import prepare_cohort
from workbench.simulate import PROGNOSTIC_FEATURES
from workbench.study import read_study

DEMO = Path(__file__).parents[2] / "demo_cohort"


def test_demo_filter_removes_the_poorly_reproducible_features_and_keeps_the_signals():
    spec = read_study(DEMO / "study.toml")
    prep = prepare_cohort(spec)
    truth = json.loads((DEMO / "truth.json").read_text())["repeats"]
    population = pd.Series(truth["icc_population"]["values"])
    removed, kept = set(prep.unreproducible), set(prep.cohort.feature_names)
    assert kept | removed == set(population.index) and not kept & removed
    assert set(population.index[population < 0.6]) <= removed
    near_constant = {"morph_n_components", "stat_min"}  # their ICC is undefined or tiny with ties; also removed later
    assert set(population.index[population > 0.9]) - near_constant <= kept
    assert set(PROGNOSTIC_FEATURES) <= kept
    assert len(truth["poorly_reproducible"]) > 40 and prep.reproducibility["n"].eq(40).all()
    # the external cohort is prepared with the same pool: the models never saw the removed features
    assert prepare_cohort(spec, external=True).cohort.feature_names == prep.cohort.feature_names
