"""ClinicalCox (clinical terms + Efron Cox) against published and library values.

GBSG2: German Breast Cancer Study Group 2 (Schumacher et al., J Clin Oncol 1994), as
shipped with scikit-survival (`load_gbsg2`). Reference values from REFERENCE_VALUES.md
(library: scikit-survival 0.28 / lifelines) and recomputed here with lifelines.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from lifelines import CoxPHFitter

from workbench.cohort import Cohort, make_outcome
from workbench.metrics.concordance import harrell_c
from workbench.models.cox import ClinicalCox
from workbench.preprocess.clinical import PredictorSpec


@pytest.fixture(scope="module")
def gbsg2():
    from sksurv.datasets import load_gbsg2

    X, y = load_gbsg2()
    X = X.reset_index(drop=True)
    clin = pd.DataFrame({c: X[c].astype(str) if X[c].dtype.name == "category" else X[c] for c in X.columns})
    cohort = Cohort(
        ids=np.array([f"G{i}" for i in range(len(X))]),
        y=make_outcome(y["time"], y["cens"]),
        clinical=clin,
        features=pd.DataFrame(index=range(len(X))),
        time_unit="days",
    )
    return X, y, cohort


SPECS = (
    PredictorSpec("age"),
    PredictorSpec("estrec"),
    PredictorSpec("horTh", kind="categorical", reference="no"),
    PredictorSpec("menostat", kind="categorical", reference="Post"),
    PredictorSpec("pnodes"),
    PredictorSpec("progrec"),
    PredictorSpec("tgrade", kind="categorical", reference="I"),
    PredictorSpec("tsize"),
)


def test_gbsg2_coefficients_loglik_and_c(gbsg2):
    X, y, cohort = gbsg2
    m = ClinicalCox(SPECS).fit(cohort)
    coef = dict(zip(m.fit_.names, m.fit_.coef, strict=True))
    # REFERENCE_VALUES.md (library, scikit-survival 0.28): horTh(yes) -0.3463, pnodes 0.04879,
    # tgrade II 0.6361, III 0.7797; log-likelihood -1735.73; Harrell C 0.692.
    horth = [v for k, v in coef.items() if "horTh" in k][0]
    assert horth == pytest.approx(-0.3463, abs=1e-4)
    assert coef["pnodes"] == pytest.approx(0.04879, abs=1e-5)
    tg = {k: v for k, v in coef.items() if "tgrade" in k}
    assert sorted(tg.values()) == pytest.approx([0.6361, 0.7797], abs=1e-4)
    assert m.loglik_ == pytest.approx(-1735.73, abs=0.01)
    c = harrell_c(cohort.y, m.predict_risk(cohort))
    assert c.c_index == pytest.approx(0.692, abs=5e-4)


def test_gbsg2_matches_lifelines_to_1e4(gbsg2):
    X, y, cohort = gbsg2
    m = ClinicalCox(SPECS).fit(cohort)
    df = pd.DataFrame(m.transformer_.transform(cohort).X, columns=m.fit_.names)
    df["T"], df["E"] = y["time"], y["cens"].astype(int)
    lf = CoxPHFitter().fit(df, "T", "E")
    np.testing.assert_allclose(m.fit_.coef, lf.params_[list(m.fit_.names)].to_numpy(), atol=1e-4)
    np.testing.assert_allclose(m.fit_.se, lf.standard_errors_[list(m.fit_.names)].to_numpy(), atol=1e-4)
    # Predicted survival at 1, 3 and 5 years for the first 20 patients. lifelines builds the
    # baseline hazard with Breslow increments; ours uses Efron-consistent increments when the
    # likelihood uses Efron ties (as standard statistical software does), which differs by
    # ~1e-4 here because GBSG2 has tied event times.
    times = [365.0, 1095.0, 1825.0]
    ours = m.predict_survival(cohort.take(np.arange(20)), times).probs
    theirs = lf.predict_survival_function(df.iloc[:20], times=times).to_numpy().T
    np.testing.assert_allclose(ours, theirs, atol=2.5e-4)


def test_hazard_ratio_table_and_description(gbsg2):
    _, _, cohort = gbsg2
    m = ClinicalCox(SPECS).fit(cohort)
    hr = m.hazard_ratio_table()
    assert len(hr) >= 9
    d = m.describe()
    assert d.n_train == 686 and d.n_events == 299 and len(d.terms) == 9
    assert d.details["lr_df"] == 9


def test_log2_marker_hazard_ratio_is_per_doubling(gbsg2):
    X, y, cohort = gbsg2
    clin = cohort.clinical.assign(progrec1=cohort.clinical["progrec"] + 1.0)
    c2 = Cohort(cohort.ids, cohort.y, clin, cohort.features, time_unit="days")
    m = ClinicalCox((PredictorSpec("progrec1", transform="log2"), PredictorSpec("pnodes"))).fit(c2)
    hr = m.hazard_ratio_table()
    row = hr[hr["column"] == "progrec1"].iloc[0]
    assert "doubling" in row["contrast"]
    assert float(row["hr"]) == pytest.approx(np.exp(m.fit_.coef[0]), rel=1e-10)
    # the same model on log(x) has a coefficient ln 2 times smaller... per doubling HR identical
    m2 = ClinicalCox((PredictorSpec("progrec1", transform="log"), PredictorSpec("pnodes"))).fit(c2)
    assert m2.fit_.coef[0] * np.log(2) == pytest.approx(m.fit_.coef[0], rel=1e-8)
