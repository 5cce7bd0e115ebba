"""A competing-risks study whose signature keeps no feature says so, on a public dataset.

scikit-survival's ``load_cgvhd`` (chronic graft-versus-host disease after transplant; 100
patients, status 1 the event, 2 relapse and 3 death competing) with age and its logarithm
as a two-column "imaging" table: the signature of the cause of interest keeps neither, so
the clinical + signature arm is the clinical arm. Found by running this table through
``workbench competing``: the difference rows read 0.000 with no word of why.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from workbench.competing.analysis import run_competing
from workbench.study import study_from_dict


def test_empty_signature_is_named_and_the_arm_equals_the_clinical_arm(cgvhd_study):
    folder, doc, clin = cgvhd_study
    feats = pd.DataFrame({"patient_id": clin["patient_id"], "age_feature": clin["age"].astype(float),
                          "log_age_feature": np.log(clin["age"].astype(float))})
    feats.to_csv(folder / "features_age.csv", index=False)
    study = {**doc, "data": {**doc["data"], "features": "features_age.csv"},
             "predictor": [p for p in doc["predictor"] if p["column"] != "age"]}
    spec = study_from_dict(study, base=folder)
    result = run_competing(spec, replicates=0)
    arm = result.arms[("cause", "combined")]
    assert arm.signature is not None and arm.n_selected == 0  # the case this test is about
    empty = [m for m in result.warnings if "signature kept no imaging feature" in str(m)]
    assert empty and "equals the clinical arm" in str(empty[0])
    h = (0.45, 0.65)
    for how in ("cause_specific", "fine_gray"):
        np.testing.assert_allclose(arm.predict(result.cohort, h, how).risks,
                                   result.arms[("cause", "clinical")].predict(result.cohort, h, how).risks,
                                   atol=1e-12)
