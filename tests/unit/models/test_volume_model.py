"""The clinical + tumour volume Cox model (VolumeCox) and when a study gets it.

Reference: lifelines' CoxPHFitter (Efron ties) on the same design. Data: German Breast
Cancer Study Group 2 (Schumacher et al., J Clin Oncol 1994) as shipped with
scikit-survival; its tumour size (tsize, mm) stands in for the imaging volume feature.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from lifelines import CoxPHFitter

from workbench.cohort import Cohort
from workbench.errors import ModelError
from workbench.models.base import clone_model
from workbench.models.registry import COMPARISON_MODELS, build_models, offered_models
from workbench.models.volume import VOLUME_MODEL, VolumeCox
from workbench.preprocess.clinical import PredictorSpec
from workbench.study import study_from_dict

SPECS = (
    PredictorSpec("horTh", kind="categorical", reference="no"),
    PredictorSpec("pnodes"),
    PredictorSpec("tgrade", kind="categorical", levels=("I", "II", "III"), reference="I"),
)


@pytest.fixture(scope="module")
def gbsg2(gbsg2_cohort):
    return gbsg2_cohort(("horTh", "pnodes", "tgrade"), ("tsize", "progrec"))


def _lifelines(design: pd.DataFrame, y) -> CoxPHFitter:
    df = design.assign(T=y["time"], E=y["cens"].astype(int))
    return CoxPHFitter().fit(df, "T", "E")  # Efron ties, unpenalised (lifelines' defaults)


def test_coefficients_equal_lifelines_on_the_same_design(gbsg2):
    cohort, y = gbsg2
    m = VolumeCox(SPECS, volume_feature="tsize").fit(cohort)
    assert m.fit_.names[-1] == "log2(tsize)" and m.volume_transform_ == "log2"
    raw = cohort.clinical
    design = pd.DataFrame({
        "horTh=yes": (raw["horTh"] == "yes").astype(float), "pnodes": raw["pnodes"].astype(float),
        "tgrade=II": (raw["tgrade"] == "II").astype(float), "tgrade=III": (raw["tgrade"] == "III").astype(float),
        "log2(tsize)": np.log2(cohort.features["tsize"]),
    })
    lf = _lifelines(design, y)
    # both fits converge to the same maximum of the Efron partial likelihood; 1e-5 leaves room
    # for the two optimisers' stopping rules
    np.testing.assert_allclose(m.fit_.coef, lf.params_[list(m.fit_.names)].to_numpy(), atol=1e-5)
    np.testing.assert_allclose(m.fit_.se, lf.standard_errors_[list(m.fit_.names)].to_numpy(), atol=1e-5)
    assert m.loglik_ == pytest.approx(lf.log_likelihood_, abs=1e-6)


def test_non_positive_volume_enters_untransformed(gbsg2):
    cohort, y = gbsg2
    feats = cohort.features.assign(tsize=cohort.features["tsize"] - 20.0)  # centred: negatives
    c2 = Cohort(cohort.ids, cohort.y, cohort.clinical, feats, time_unit="days")
    m = VolumeCox(SPECS, volume_feature="tsize").fit(c2)
    assert m.volume_transform_ is None and m.fit_.names[-1] == "tsize"
    design = pd.DataFrame(m.transformer_.transform(m._with_volume(c2)).X, columns=m.fit_.names)
    np.testing.assert_allclose(design["tsize"], feats["tsize"])
    lf = _lifelines(design, y)
    np.testing.assert_allclose(m.fit_.coef, lf.params_[list(m.fit_.names)].to_numpy(), atol=1e-5)


def test_missing_volume_gets_training_median_and_clone_refits(gbsg2):
    cohort, _ = gbsg2
    feats = cohort.features.copy()
    feats.loc[:4, "tsize"] = np.nan
    c2 = Cohort(cohort.ids, cohort.y, cohort.clinical, feats, time_unit="days")
    m = VolumeCox(SPECS, volume_feature="tsize").fit(c2)
    X = m.transformer_.transform(m._with_volume(c2)).X
    assert np.all(X[:5, -1] == np.log2(np.nanmedian(feats["tsize"])))
    again = clone_model(m).fit(c2)
    np.testing.assert_array_equal(again.fit_.coef, m.fit_.coef)
    assert m.predict_risk(c2).values.shape == (c2.n,)


def test_refuses_a_missing_feature(gbsg2):
    cohort, _ = gbsg2
    with pytest.raises(ModelError, match="volume feature 'volume_cc'"):
        VolumeCox(SPECS, volume_feature="volume_cc").fit(cohort)


def _doc(**imaging):
    return {"study": {"name": "t", "horizons": [12]},
            "data": {"features": "f.csv", "clinical": "c.csv"},
            "predictor": [{"column": "age"}], "imaging": imaging, "models": {"fit": ["clinical", "combined"]}}


def test_study_without_volume_feature_has_no_volume_model():
    models = build_models(study_from_dict(_doc()))
    assert list(models) == ["clinical", "combined"]


def test_study_with_volume_feature_gets_it_last_and_not_in_bundles():
    models = build_models(study_from_dict(_doc(volume_feature="vol")))
    assert list(models) == ["clinical", "combined", VOLUME_MODEL]
    assert isinstance(models[VOLUME_MODEL], VolumeCox) and models[VOLUME_MODEL].volume_feature == "vol"
    assert VOLUME_MODEL in COMPARISON_MODELS and list(offered_models(models)) == ["clinical", "combined"]
