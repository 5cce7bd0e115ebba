"""LevelOrderWarning: an ordered categorical effect that loses its order once imaging is added.

Data: German Breast Cancer Study Group 2 (Schumacher et al., J Clin Oncol 1994) as shipped
with scikit-survival. Tumour grade (tgrade, levels I < II < III) has hazard ratios rising with
grade in the clinical model (REFERENCE_VALUES.md: log HR II 0.64, III 0.78 with all eight
covariates). The second model's coefficients are set by hand where a case needs them.
"""

from __future__ import annotations

import copy
import warnings
from dataclasses import replace

import numpy as np
import pytest

from workbench.cli_console import ConsoleWarnings
from workbench.errors import LevelOrderWarning
from workbench.models.collinearity import level_order_changes, warn_level_order
from workbench.models.cox import ClinicalCox
from workbench.models.volume import VolumeCox
from workbench.preprocess.clinical import PredictorSpec

ORDERED = PredictorSpec("tgrade", kind="categorical", levels=("I", "II", "III"), reference="I", label="Grade")
SPECS = (PredictorSpec("horTh", kind="categorical", reference="no"), PredictorSpec("pnodes"), ORDERED)


@pytest.fixture(scope="module")
def gbsg2(gbsg2_cohort):
    return gbsg2_cohort(("horTh", "pnodes", "tgrade"), ("tsize",))[0]


def _with_grade(model, log_hr_ii: float, log_hr_iii: float):
    """A copy of a fitted model whose grade II and III log hazard ratios are replaced."""
    out = copy.copy(model)
    coef = model.fit_.coef.copy()
    names = list(model.fit_.names)
    coef[names.index("tgrade=II")], coef[names.index("tgrade=III")] = log_hr_ii, log_hr_iii
    out.fit_ = replace(model.fit_, coef=coef)
    return out


def test_fires_when_the_order_is_lost(gbsg2):
    clin = ClinicalCox(SPECS).fit(gbsg2)
    b = dict(zip(clin.fit_.names, clin.fit_.coef, strict=True))
    assert 0 < b["tgrade=II"] < b["tgrade=III"]  # monotone in the clinical model
    other = _with_grade(VolumeCox(SPECS, volume_feature="tsize").fit(gbsg2), np.log(0.90), np.log(1.12))
    changes = level_order_changes(clin, other)
    assert [c.term for c in changes] == ["tgrade"]
    assert changes[0].levels == ("I", "II", "III") and changes[0].after[0] == 0.0
    with pytest.warns(LevelOrderWarning, match=r"Grade: .*\(I 1\.00, II 0\.90, III 1\.12\)"):
        warn_level_order({"clinical": clin, "combined": other}, {"combined": "Clinical + imaging signature"})
    assert ConsoleWarnings.is_statistical("LevelOrderWarning")  # shown on the console like the others


def test_silent_when_the_order_holds_or_was_never_there(gbsg2):
    clin = ClinicalCox(SPECS).fit(gbsg2)
    vol = VolumeCox(SPECS, volume_feature="tsize").fit(gbsg2)  # the real fit: grade stays ordered
    v = dict(zip(vol.fit_.names, vol.fit_.coef, strict=True))
    assert v["tgrade=II"] <= v["tgrade=III"]
    with warnings.catch_warnings():
        warnings.simplefilter("error", LevelOrderWarning)
        assert warn_level_order({"clinical": clin, "clinical_volume": vol}, {}) == ()
    # a clinical model that is not monotone itself: nothing was lost
    assert level_order_changes(_with_grade(clin, 0.5, 0.2), _with_grade(vol, 0.1, 0.3)) == ()
    # shrinking towards the reference but keeping the order is not a loss
    assert level_order_changes(clin, _with_grade(vol, 0.01, 0.02)) == ()


def test_only_declared_orders_with_three_levels_count(gbsg2):
    nominal = (SPECS[0], SPECS[1], PredictorSpec("tgrade", kind="categorical", reference="I"))
    clin = ClinicalCox(nominal).fit(gbsg2)
    other = _with_grade(ClinicalCox(nominal).fit(gbsg2), np.log(0.9), np.log(1.1))
    assert level_order_changes(clin, other) == ()  # levels not declared: no order to lose
    two = (SPECS[1], PredictorSpec("horTh", kind="categorical", levels=("no", "yes"), reference="no"))
    c2 = ClinicalCox(two).fit(gbsg2)
    flipped = copy.copy(c2)
    flipped.fit_ = replace(c2.fit_, coef=-c2.fit_.coef)
    assert level_order_changes(c2, flipped) == ()  # two levels are always in order
