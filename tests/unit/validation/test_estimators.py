"""Estimator choice, the out-of-bootstrap arm, range-guarded intervals, two-stage and cv intervals.

Outcomes: the German Breast Cancer Study Group 2 trial (Schumacher et al., J Clin Oncol
1994; `sksurv.datasets.load_gbsg2`), first 300 patients, with the small Cox model of
test_resample.py.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from test_resample import (  # same folder (rootdir-relative import, as pytest sets it up)
    ColumnsCox,
    H,
)

from workbench.cohort import Cohort, make_outcome
from workbench.errors import SpecError
from workbench.validation import compare_models, validate
from workbench.validation.intervals import bias_corrected_percentiles, guard, metric_range
from workbench.validation.plans import _oob_rows


class Interpolating(ColumnsCox):
    apparent_fit_interpolates = True


@pytest.fixture(scope="module")
def small():
    from sksurv.datasets import load_gbsg2

    X, y = load_gbsg2()
    X, y = X.reset_index(drop=True).iloc[:300], y[:300]
    feats = pd.DataFrame({c: X[c].astype(float) for c in ("age", "tsize", "pnodes", "progrec")})
    return Cohort(ids=np.array([f"G{i}" for i in range(300)]), y=make_outcome(y["time"], y["cens"]),
                  clinical=pd.DataFrame(index=range(300)), features=feats, time_unit="days")


def test_out_of_bootstrap_rows_are_grouped_by_patient():
    ids = np.array(["a", "a", "b", "c", "c", "d"])
    # drawing row 1 (patient a) makes both rows of a in-sample; c is drawn via row 3
    assert _oob_rows(ids, np.array([1, 3, 3, 1, 1, 1])).tolist() == [2, 5]


def test_metric_ranges_and_guard():
    assert metric_range("harrell_c") == (0.0, 1.0) and metric_range("ici@12") == (0.0, 1.0)
    assert metric_range("harrell_c", difference=True) == (-1.0, 1.0)
    lo, hi, note = guard("ici@12", 0.01, -0.02, 0.05)
    assert (lo, hi, note) == (0.0, 0.05, "")
    assert np.isnan(guard("ici@12", 0.007, 0.008, 0.082)[0])  # would exclude its estimate
    lo, hi, note = guard("cal_slope@12", 0.928, 0.928, 0.928)
    assert np.isnan(lo) and "do not vary" in note


def test_bias_corrected_interval_is_percentile_when_centred():
    v = np.linspace(-1.96, 1.96, 1001)
    lo, hi = bias_corrected_percentiles(v, 0.0, 0.95)
    assert lo == pytest.approx(np.quantile(v, 0.025)) and hi == pytest.approx(np.quantile(v, 0.975))
    assert np.isnan(bias_corrected_percentiles(v, 5.0, 0.95)[0])  # estimate outside every value


def test_estimators_are_labelled_and_auto_uses_one_for_all(small):
    models = {"a": ColumnsCox(("age", "tsize")), "b": Interpolating(("age", "tsize", "pnodes"))}
    auto = validate(models, small, H, replicates=2, random_state=3, backend="serial", calibration=False)
    assert auto.estimator == {"a": "oob", "b": "oob"}
    res = validate(models, small, H, replicates=6, random_state=3, backend="serial", calibration=False,
                   estimator="632plus")
    assert res.estimator == {"a": "632plus", "b": "632plus"}
    e = res.estimates["a"]
    assert e["harrell_c"].estimator == "632plus" and e["oe_ratio@730"].estimator == "oob"
    rm = res.replicates["a"]
    oob = np.nanmean(rm.column("harrell_c", "oob"))
    assert res.estimates["a"]["harrell_c"].optimism == pytest.approx(e["harrell_c"].apparent - e["harrell_c"].estimate)
    # .632+ lies between the out-of-bootstrap and the apparent value
    assert min(oob, e["harrell_c"].apparent) <= e["harrell_c"].estimate <= max(oob, e["harrell_c"].apparent)
    d = compare_models(res, "b", "a").differences["harrell_c"]
    assert d.estimator == "632plus"
    assert d.estimate == pytest.approx(res.estimates["b"]["harrell_c"].estimate - e["harrell_c"].estimate)
    only_cox = validate({"a": ColumnsCox(("age",))}, small, H, replicates=2, random_state=3, backend="serial",
                        calibration=False)
    assert only_cox.estimator == {"a": "optimism"} and only_cox.replicates["a"].oob is None
    with pytest.raises(SpecError, match="estimator"):
        validate(models, small, H, replicates=2, estimator="magic", backend="serial")


@pytest.mark.parametrize("method", ["bootstrap", "cv"])
def test_two_stage_intervals_contain_their_estimates(small, method):
    models = {"a": ColumnsCox(("age", "tsize")), "b": ColumnsCox(("age", "tsize", "pnodes"))}
    res = validate(models, small, H, method=method, replicates=5, folds=3, repeats=2, random_state=4,
                   backend="serial", calibration=False, interval="two-stage", outer_replicates=12,
                   inner_replicates=2, cv_interval="two-stage")
    assert res.interval == "two-stage" and res.outer_estimates["a"].shape == (12, len(res.metric_names))
    # the validated decision curves of the same outer samples (the net-benefit difference band), failing together
    nb = res.outer_net_benefit["a"]
    assert nb.shape == (12, len(H), res.apparent["a"].thresholds.size)
    np.testing.assert_array_equal(np.isfinite(res.outer_estimates["a"][:, 0]), np.isfinite(nb).any(axis=(1, 2)))
    from workbench.validation.difference_bands import net_benefit_difference

    band = net_benefit_difference(res, "b", "a", 0)
    assert band.band == "two-stage" and band.n_replicates == int(np.isfinite(nb[:, 0, 0]).sum())
    for m in models:
        for e in res.estimates[m].values():
            if np.isfinite(e.ci_lower):
                assert e.ci_lower <= e.estimate <= e.ci_upper and e.ci_lower < e.ci_upper
                lo, hi = metric_range(e.name)
                assert lo <= e.ci_lower and e.ci_upper <= hi
                assert e.interval == "two-stage"
        assert np.isfinite(res.estimates[m]["harrell_c"].ci_lower)
    d = compare_models(res, "b", "a").differences["harrell_c"]
    assert d.ci_lower <= d.estimate <= d.ci_upper and d.interval == "two-stage"
    # the estimate itself does not depend on whether intervals were computed
    plain = validate(models, small, H, method=method, replicates=5, folds=3, repeats=2, random_state=4,
                     backend="serial", calibration=False)
    assert plain.estimates["a"]["harrell_c"].estimate == res.estimates["a"]["harrell_c"].estimate


def test_cv_interval_is_the_corrected_resampled_t_interval_of_the_fold_values(small):
    # Reference: the corrected resampled t interval of Nadeau & Bengio (Machine Learning 2003;
    # 52:239-81), repeated k-fold form of Bouckaert & Frank (PAKDD 2004): estimate -+ t_{J-1}
    # sqrt((1/J + n_test/n_train) s^2), n_test/n_train = 1/(k - 1); recomputed here by hand
    # with scipy from the run's own fold values.
    from scipy.stats import t as t_dist

    from workbench.validation.difference_bands import net_benefit_difference

    models = {"a": ColumnsCox(("age", "tsize")), "b": ColumnsCox(("age", "tsize", "pnodes"))}
    folds, repeats = 4, 3
    res = validate(models, small, H, method="cv", folds=folds, repeats=repeats, random_state=4,
                   backend="serial", calibration=False, interval="two-stage", outer_replicates=12)
    assert res.interval == "corrected-t" and res.outer_estimates == {}  # no outer samples were run
    assert any("Nadeau & Bengio" in n for n in res.notes)
    j = res.metric_names.index("harrell_c")

    def by_hand(v, est):
        v = v[np.isfinite(v)]
        half = t_dist.ppf(0.975, v.size - 1) * np.sqrt((1 / v.size + 1 / (folds - 1)) * np.var(v, ddof=1))
        return est - half, est + half

    for m in models:
        rm, e = res.replicates[m], res.estimates[m]["harrell_c"]
        assert rm.test.shape[0] == folds * repeats and e.interval == "corrected-t"
        assert (e.ci_lower, e.ci_upper) == pytest.approx(by_hand(rm.test[:, j], e.estimate), abs=1e-12)
        for x in res.estimates[m].values():
            if np.isfinite(x.ci_lower):
                lo, hi = metric_range(x.name)
                assert lo <= x.ci_lower <= x.estimate <= x.ci_upper <= hi and x.interval == "corrected-t"
    # the difference: the same rule on the paired per-fold differences
    d = compare_models(res, "b", "a").differences["harrell_c"]
    ra, rb = res.replicates["b"], res.replicates["a"]
    assert d.interval == "corrected-t"
    assert (d.ci_lower, d.ci_upper) == pytest.approx(by_hand(ra.test[:, j] - rb.test[:, j], d.estimate), abs=1e-12)
    # a rule without the n_test/n_train term would be about sqrt(1 + J/(k-1)) = 2.2 times narrower
    assert d.ci_upper - d.ci_lower > 2.0 * 2 * t_dist.ppf(0.975, 11) * np.std(ra.test[:, j] - rb.test[:, j],
                                                                               ddof=1) / np.sqrt(12)
    # the cv net-benefit band is withheld with its reason (bench/bench_cv_metrics.py --band: too wide)
    band = net_benefit_difference(res, "b", "a", 0)
    assert band.band == "" and np.isnan(band.lower).all() and np.isnan(band.upper).all()
    from workbench.validation.intervals import CV_WITHHELD_BANDS

    assert CV_WITHHELD_BANDS["net_benefit"] in band.note and np.isfinite(band.estimate).any()
    # the same estimates whatever the interval setting; too few fold values: no interval, and why
    cheap = validate(models, small, H, method="cv", folds=4, repeats=3, random_state=4, backend="serial",
                     calibration=False)
    assert cheap.estimates["a"]["harrell_c"] == res.estimates["a"]["harrell_c"]
    few = validate(models, small, H, method="cv", folds=3, repeats=2, random_state=4, backend="serial",
                   calibration=False)
    e = few.estimates["a"]["harrell_c"]
    assert np.isnan(e.ci_lower) and "fewer than 10 held-out fold values" in e.note
    assert few.interval == "" and compare_models(few, "b", "a").differences["harrell_c"].interval == ""
    with pytest.raises(SpecError, match="cv_interval"):
        validate(models, small, H, method="cv", folds=3, repeats=2, cv_interval="magic", backend="serial")


def test_two_stage_withholds_one_models_slope_and_oe_but_not_their_differences(small):
    # bench/bench_cv_metrics.py --method bootstrap (100 cohorts): one model's calibration slope and O/E
    # intervals covered 1.00 of the expected and 0.83-0.89 of the conditional calibration, so they are
    # withheld with the reason; the ICI and the model-minus-baseline differences keep theirs.
    from workbench.validation.intervals import TWO_STAGE_WITHHELD

    models = {"a": ColumnsCox(("age", "tsize")), "b": ColumnsCox(("age", "tsize", "pnodes"))}
    res = validate(models, small, H, replicates=4, random_state=5, backend="serial", interval="two-stage",
                   outer_replicates=10, inner_replicates=1)
    h = f"@{H[0]:g}"
    for name in ("cal_slope", "oe_ratio"):
        e = res.estimates["b"][name + h]
        assert np.isfinite(e.estimate) and np.isnan(e.ci_lower) and e.note == TWO_STAGE_WITHHELD[name]
        d = compare_models(res, "b", "a").differences.get(name + h)
        if d is not None and np.isfinite(d.estimate):
            assert d.note != TWO_STAGE_WITHHELD[name]
    ici = res.estimates["b"]["ici" + h]
    assert ici.interval == "two-stage" and ici.ci_lower <= ici.estimate <= ici.ci_upper
