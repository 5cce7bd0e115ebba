"""Reduced, fast version of bench/bench_harmonisation_checks.py (the harmonisation checks).

Seeded simulation from the benchmark's own generator (invented data): three scanners,
40 correlated features depending on age and stage. The checks must report no scanner
effect on scanner-free data, detect a planted one and see it gone after ComBat, keep
the stage association, and flag scanner-stage confounding.
"""

from __future__ import annotations

import sys
import warnings
from pathlib import Path

import numpy as np
import pytest

sys.path.insert(0, str(Path(__file__).parents[2] / "bench"))
from bench_harmonisation_checks import simulate  # noqa: E402

from workbench.preprocess.harmonisation_checks import check_features, combat_refit, confounding  # noqa: E402

COLS = {"age": [0], "stage": [1]}
KINDS = {"age": "continuous", "stage": "categorical"}
COHORTS = 12


def test_scanner_free_data_show_no_scanner_effect():
    flagged, aucs, conf = 0, [], 0
    for c in range(COHORTS):
        X, b, C, clin, t, e = simulate(700 + c)
        chk = check_features(X, b, C, COLS, random_state=c)
        flagged += chk.location_share > 0 or chk.scale_share > 0
        aucs.append(chk.classifier_auc)
        conf += any(f.flagged for f in confounding(b, clin, kinds=KINDS))
    # BH at 0.05 under the global null: a cohort with any feature flagged has probability <= 0.05
    # per test (two tests); 3 or more of 12 would be far out (binomial tail about 0.02 at 0.1)
    assert flagged <= 2, flagged
    assert abs(np.mean(aucs) - 0.5) < 0.05, aucs  # SD of one AUC about 0.05, of the mean 0.015
    assert conf == 0


def test_planted_scanner_effect_is_detected_and_removed_by_combat():
    for c in range(4):
        X, b, C, *_ = simulate(800 + c, effect=True)
        before = check_features(X, b, C, COLS, random_state=c)
        after = check_features(X, b, C, COLS, harmonise=combat_refit(), random_state=c)
        assert before.location_share > 0.8 and before.scale_share > 0.5
        assert after.location_share == 0 and after.scale_share == 0
        assert abs(after.classifier_auc - 0.5) < 0.12  # within-fold harmonisation: no anti-learning
        # biology survives: the stage association (a protected covariate) is about unchanged
        assert abs(after.covariate_share["stage"] - before.covariate_share["stage"]) < 0.1
        assert after.covariate_share["stage"] > 0.5


def test_confounding_of_scanner_and_stage_is_flagged_with_advice():
    X, b, C, clin, t, e = simulate(900, confounded=True)
    found = {f.variable: f for f in confounding(b, clin, time=t, event=e, kinds=KINDS, protected=())}
    assert found["stage"].flagged and found["stage"].effect >= 0.3
    assert "protect stage" in found["stage"].message
    assert not found["age"].flagged
    prot = {f.variable: f for f in confounding(b, clin, kinds=KINDS, protected=("stage",))}
    assert prot["stage"].flagged and "hard to separate" in prot["stage"].message


def test_the_run_warns_on_confounding(monkeypatch):
    # the workflow's glue: a flagged confounder becomes a DataQualityWarning of the run
    from workbench.errors import DataQualityWarning
    from workbench.preprocess import harmonisation_checks as hc
    from workbench.workflow import _harmonisation_checks

    X, b, C, clin, t, e = simulate(901, confounded=True)
    found = [f.as_dict() for f in confounding(b, clin, kinds=KINDS)]
    monkeypatch.setattr(hc, "study_checks", lambda *a, **k: {"confounding": found, "development": {}})
    spec = type("Spec", (), {"seed": 1})()
    with pytest.warns(DataQualityWarning, match="Harmonisation: scanner and stage go together"):
        out = _harmonisation_checks({"combined": object()}, None, spec, None)
    assert out["model"] == "combined"
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        assert _harmonisation_checks({}, None, spec, None) is None
