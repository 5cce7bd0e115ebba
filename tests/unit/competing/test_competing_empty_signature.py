"""A competing-risks study whose signature keeps no feature says so, on a public dataset.

scikit-survival's ``load_cgvhd`` (chronic graft-versus-host disease after transplant; 100
patients, status 1 the event, 2 relapse and 3 death competing) with age and its logarithm
as a two-column "imaging" table: the signature of the cause of interest keeps neither, so
the clinical + signature arm is the clinical arm. Found by running this table through
``workbench competing``: the difference rows read 0.000 with no word of why, and every
figure drew the same points, curve and nomogram twice.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from workbench.competing.analysis import run_competing
from workbench.report.competing_figures import (
    EMPTY_NOTE,
    competing_figures,
    nomogram_scales_by_model,
)
from workbench.study import study_from_dict


@pytest.fixture(scope="module")
def empty_result(cgvhd_study):
    folder, doc, clin = cgvhd_study
    age = clin["age"].astype(float)
    pd.DataFrame({"patient_id": clin["patient_id"], "age_feature": age, "log_age_feature": np.log(age)}).to_csv(
        folder / "features_age.csv", index=False)
    study = {**doc, "data": {**doc["data"], "features": "features_age.csv"},
             "predictor": [p for p in doc["predictor"] if p["column"] != "age"]}
    result = run_competing(study_from_dict(study, base=folder), replicates=0)
    arm = result.arms[("cause", "combined")]
    assert arm.signature is not None and arm.n_selected == 0  # the case these tests are about
    return result


def test_empty_signature_is_named_and_the_arm_equals_the_clinical_arm(empty_result):
    empty = [m for m in empty_result.warnings if "signature kept no imaging feature" in str(m)]
    assert empty and "equals the clinical arm" in str(empty[0])
    h = (0.45, 0.65)
    for how in ("cause_specific", "fine_gray"):
        np.testing.assert_allclose(empty_result.arms[("cause", "combined")].predict(empty_result.cohort, h, how).risks,
                                   empty_result.arms[("cause", "clinical")].predict(empty_result.cohort, h, how).risks,
                                   atol=1e-12)


def test_figures_draw_the_clinical_arm_once_and_say_why(empty_result):
    scales = nomogram_scales_by_model(empty_result)
    assert list(scales) == ["clinical"] and EMPTY_NOTE in scales["clinical"].model
    figs = competing_figures(empty_result, "single")
    legend = [t.get_text() for t in figs["incidence_calibration"].legends[0].get_texts()]
    assert len(legend) == 1 and EMPTY_NOTE in legend[0]
    fig = figs["incidence_decision_curve"]
    curves = [t.get_text() for lg in [*fig.legends, *(ax.get_legend() for ax in fig.axes)] if lg is not None
              for t in lg.get_texts()]
    assert sum(EMPTY_NOTE in c for c in curves) == 1 and not any("signature (" in c for c in curves)
