"""Paired comparison of a model with a baseline from the same replicates.

Data: GBSG2 (Schumacher et al., J Clin Oncol 1994; `sksurv.datasets.load_gbsg2`).
External references: lifelines' Cox log-likelihoods (likelihood-ratio test) and
lifelines' Kaplan-Meier estimate (treat-all net benefit, Vickers et al. 2008).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from workbench.cohort import Cohort, make_outcome
from workbench.models.cox import ClinicalCox
from workbench.preprocess.clinical import PredictorSpec
from workbench.validation import compare_models, validate

H = [730.0, 1460.0]
BASE = (PredictorSpec("pnodes"), PredictorSpec("tgrade", kind="categorical", reference="I"))
BIG = BASE + (PredictorSpec("progrec"), PredictorSpec("horTh", kind="categorical", reference="no"))


@pytest.fixture(scope="module")
def gbsg2():
    from sksurv.datasets import load_gbsg2

    X, y = load_gbsg2()
    X = X.reset_index(drop=True)
    clin = pd.DataFrame({c: X[c].astype(str) if X[c].dtype.name == "category" else X[c] for c in X.columns})
    rng = np.random.default_rng(77)
    clin["noise_a"], clin["noise_b"] = rng.normal(size=len(X)), rng.normal(size=len(X))
    return Cohort(ids=np.array([f"G{i}" for i in range(len(X))]), y=make_outcome(y["time"], y["cens"]),
                  clinical=clin, features=pd.DataFrame(index=range(len(X))), time_unit="days")


@pytest.fixture(scope="module")
def nested(gbsg2):
    models = {"clinical": ClinicalCox(BASE, name="clinical"), "bigger": ClinicalCox(BIG, name="bigger")}
    return validate(models, gbsg2, H, replicates=8, random_state=9, backend="serial")


def test_model_against_itself_gives_exact_zeros(gbsg2):
    models = {"a": ClinicalCox(BASE, name="a"), "a_copy": ClinicalCox(BASE, name="a")}
    res = validate(models, gbsg2, H, replicates=4, random_state=1, backend="serial", calibration=False)
    cmp = compare_models(res, "a_copy", "a")
    for d in cmp.differences.values():
        if np.isfinite(d.apparent):
            assert d.apparent == 0.0 and d.optimism == 0.0 and d.estimate == 0.0
            # nothing varies: no zero-width interval, but NaN with the reason
            assert np.isnan(d.ci_lower) and np.isnan(d.ci_upper) and "do not vary" in d.note
    assert cmp.lr_test.statistic == 0.0 and cmp.lr_test.df == 0 and cmp.lr_test.nested
    for r in cmp.reclassification:
        for part in (r.nri, r.nri_events, r.nri_nonevents, r.idi, r.idi_events, r.idi_nonevents):
            assert part.apparent == 0.0 and part.estimate == 0.0
    same = compare_models(res, "a", "a")
    assert same.differences["harrell_c"].estimate == 0.0 and same.lr_test.statistic == 0.0


def test_paired_interval_covers_zero_for_equivalent_models(gbsg2):
    # Same clinical terms, each plus one independent pure-noise column: equivalent models.
    models = {"with_a": ClinicalCox(BASE + (PredictorSpec("noise_a"),), name="with_a"),
              "with_b": ClinicalCox(BASE + (PredictorSpec("noise_b"),), name="with_b")}
    res = validate(models, gbsg2, H, replicates=20, random_state=2, backend="serial", calibration=False)
    cmp = compare_models(res, "with_b", "with_a")
    for name in ("harrell_c", "uno_c", "ibs", "auc@730", "auc@1460"):
        d = cmp.differences[name]
        assert d.ci_lower <= 0.0 <= d.ci_upper, name
        assert d.n_used == 20


def test_paired_differences_use_the_same_replicates(nested):
    cmp = compare_models(nested, "bigger", "clinical")
    j = nested.metric_names.index("harrell_c")
    a, b = nested.replicates["bigger"], nested.replicates["clinical"]
    d_opt = np.mean((a.train[:, j] - b.train[:, j]) - (a.test[:, j] - b.test[:, j]))
    d = cmp.differences["harrell_c"]
    assert d.optimism == pytest.approx(d_opt, abs=1e-14)
    assert d.estimate == pytest.approx(
        nested.estimates["bigger"]["harrell_c"].estimate - nested.estimates["clinical"]["harrell_c"].estimate,
        abs=1e-12)
    assert cmp.differences["ibs"].better == "lower" and d.better == "higher"
    assert cmp.n_paired == 8


def test_likelihood_ratio_test_matches_lifelines(gbsg2, nested):
    from lifelines import CoxPHFitter

    cmp = compare_models(nested, "bigger", "clinical")
    lr = cmp.lr_test
    lls = []
    for specs in (BASE, BIG):
        m = ClinicalCox(specs).fit(gbsg2)
        df = pd.DataFrame(m.transformer_.transform(gbsg2).X, columns=m.fit_.names)
        df["T"], df["E"] = gbsg2.time, gbsg2.event.astype(int)
        lls.append(CoxPHFitter().fit(df, "T", "E").log_likelihood_)
    assert lr.nested and lr.df == 2
    assert lr.statistic == pytest.approx(2 * (lls[1] - lls[0]), abs=1e-4)  # lifelines, Efron ties
    from scipy.stats import chi2

    # prespecified terms: a valid test, p from the chi-square distribution on 2 df
    assert lr.p_value == pytest.approx(chi2.sf(2 * (lls[1] - lls[0]), 2), rel=1e-4)
    assert "prespecified" in lr.note
    rev = compare_models(nested, "clinical", "bigger").lr_test
    assert not rev.nested and np.isnan(rev.statistic) and "not nested" in rev.note


def test_reclassification_is_antisymmetric_and_carries_cautions(nested):
    fwd = compare_models(nested, "bigger", "clinical").reclassification
    rev = compare_models(nested, "clinical", "bigger").reclassification
    for f, r in zip(fwd, rev, strict=True):
        assert f.nri.apparent == -r.nri.apparent and f.idi.estimate == -r.idi.estimate
        assert f.nri.ci_lower == -r.nri.ci_upper
        assert f.nri.apparent == pytest.approx(f.nri_events.apparent + f.nri_nonevents.apparent)
        assert "Kerr et al., Epidemiology 2014" in f.nri_caution
        assert f.idi_caution


def test_decision_curves_with_treat_all_and_none(gbsg2, nested):
    from lifelines import KaplanMeierFitter

    cmp = compare_models(nested, "bigger", "clinical")
    km = KaplanMeierFitter().fit(gbsg2.time, gbsg2.event)
    for dc in cmp.decision:
        s = float(km.predict(dc.horizon))
        pt = dc.thresholds
        # Vickers et al. (BMC Med Inform Decis Mak 2008): treat-all NB = risk - (1 - risk) pt / (1 - pt).
        np.testing.assert_allclose(dc.treat_all, (1 - s) - s * pt / (1 - pt), atol=1e-10)
        assert np.all(dc.treat_none == 0.0)
        assert dc.model_apparent.shape == dc.model_validated.shape == pt.shape
        assert np.all(np.isfinite(dc.model_validated))


def test_a_data_built_signature_gets_no_likelihood_ratio_p_value_and_external_none(nested):
    from dataclasses import replace

    from workbench.validation.compare import _lr_test

    fits = dict(nested.fits)
    big = fits["bigger"]
    fits["bigger"] = replace(big, terms=(*big.terms, "imaging_signature"), n_params=big.n_params + 1,
                             selected=("f1", "f2"))
    lr = _lr_test(replace(nested, fits=fits), "bigger", "clinical")
    assert lr.nested and np.isfinite(lr.statistic) and np.isnan(lr.p_value)
    assert "descriptive" in lr.note
    ext = _lr_test(replace(nested, method="external"), "bigger", "clinical")
    assert not ext.nested and np.isnan(ext.statistic) and np.isnan(ext.p_value)
    assert "external cohort" in ext.note
