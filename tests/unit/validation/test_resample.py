"""The resampling engine: bootstrap optimism, cross-validation, by-centre, failures.

Outcomes are real public data: the German Breast Cancer Study Group 2 trial
(Schumacher et al., J Clin Oncol 1994; `sksurv.datasets.load_gbsg2`). Where a
property needs predictors of known (zero) value, seeded noise columns are added;
the truth (C = 0.5 for a model of pure noise) is then known without any reference.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from scipy.stats import t as t_dist

from workbench.cohort import Cohort, make_outcome
from workbench.errors import MetricError, ModelError, SpecError
from workbench.models.base import ModelDescription, TermRow, as_times
from workbench.predictions import RiskScores, SurvivalCurves
from workbench.stats.coxph import fit_coxph, linear_predictor, predict_survival
from workbench.validation import cv_splits, validate

H = [730.0, 1460.0]


class ColumnsCox:
    """Cox model on numeric feature columns; with ``top_k`` keeps the k strongest by |z|."""

    def __init__(self, columns=(), top_k=None, fail_if_id=None, name="cox"):
        self.columns = columns
        self.top_k = top_k
        self.fail_if_id = fail_if_id
        self.name = name

    def fit(self, cohort):
        if self.fail_if_id is not None and np.sum(cohort.ids == self.fail_if_id) >= 2:
            raise ModelError(f"patient {self.fail_if_id} drawn twice")
        cols = list(self.columns)
        X = cohort.features[cols].to_numpy(float)
        if self.top_k is not None:
            z = [abs(fit_coxph(X[:, [j]], cohort.time, cohort.event, min_events_per_parameter=0).z[0])
                 for j in range(len(cols))]
            keep = np.argsort(z)[::-1][: self.top_k]
            cols = [cols[j] for j in sorted(keep)]
        self.columns_ = tuple(cols)
        self.fit_ = fit_coxph(cohort.features[cols].to_numpy(float), cohort.time, cohort.event,
                              names=cols, min_events_per_parameter=0)
        self.selected_features_ = self.columns_
        self.loglik_, self.n_params_ = self.fit_.loglik, self.fit_.n_params
        return self

    def _X(self, cohort):
        return cohort.features[list(self.columns_)].to_numpy(float)

    def predict_risk(self, cohort):
        return RiskScores(linear_predictor(self.fit_, self._X(cohort)), self.name)

    def predict_survival(self, cohort, times):
        t = as_times(times)
        return SurvivalCurves(t, predict_survival(self.fit_, self._X(cohort), t), self.name)

    def describe(self):
        return ModelDescription(self.name, "cox", 0, 0, tuple(TermRow(c, c, float(b)) for c, b in
                                                            zip(self.columns_, self.fit_.coef, strict=True)))


@pytest.fixture(scope="module")
def gbsg2():
    from sksurv.datasets import load_gbsg2

    X, y = load_gbsg2()
    X = X.reset_index(drop=True)
    n = len(X)
    rng = np.random.default_rng(20240601)
    feats = pd.DataFrame({c: X[c].astype(float) for c in ("age", "tsize", "pnodes", "progrec", "estrec")})
    feats["tgrade"] = X["tgrade"].cat.codes.astype(float)
    for j in range(30):
        feats[f"noise{j}"] = rng.normal(size=n)
    return Cohort(
        ids=np.array([f"G{i}" for i in range(n)]),
        y=make_outcome(y["time"], y["cens"]),
        clinical=pd.DataFrame(index=range(n)),
        features=feats,
        time_unit="days",
        centre=np.array(["north", "south", "east"])[np.arange(n) % 3],
    )


def test_noise_model_is_optimistic_and_correction_brings_c_near_half(gbsg2):
    small = gbsg2.take(np.arange(150))  # few events per noise predictor: overfits
    noise = ColumnsCox(tuple(f"noise{j}" for j in range(15)), name="noise")
    res = validate({"noise": noise}, small, H, replicates=30, random_state=3, backend="serial",
                   calibration=False)
    est = res.estimates["noise"]["harrell_c"]
    assert est.apparent > 0.60  # the apparent C of pure noise is flattering
    assert est.optimism > 0.05
    assert abs(est.estimate - 0.5) < 0.05
    assert est.n_used == 30 and res.failures["noise"] == 0


def test_bootstrap_keeps_every_replicate_and_records_selection(gbsg2):
    m = ColumnsCox(("pnodes", "progrec", "tgrade", "noise0", "noise1"), top_k=2, name="top2")
    res = validate({"top2": m}, gbsg2, H, replicates=8, random_state=0, backend="serial", calibration=False)
    rm = res.replicates["top2"]
    assert rm.train.shape == rm.test.shape == (8, len(res.metric_names))
    assert np.array_equal(rm.replicate, np.arange(8))
    sel = res.selection["top2"]
    assert sel.n_fits == 8 and np.all(sel.n_selected == 2)
    assert sum(sel.frequency.values()) == pytest.approx(2.0)  # two features kept per fit
    assert set(sel.apparent) <= set(sel.frequency) | set(m.columns)
    assert list(sel.to_frame().columns) == ["feature", "frequency", "in_apparent_fit"]
    # The estimate is apparent minus the mean optimism over all replicates.
    j = res.metric_names.index("uno_c")
    e = res.estimates["top2"]["uno_c"]
    assert e.optimism == pytest.approx(np.mean(rm.train[:, j] - rm.test[:, j]))
    assert e.estimate == pytest.approx(e.apparent - e.optimism)
    # percentile interval of B re-centred so that mean(B) maps to the corrected estimate
    b = rm.train[:, j]
    lo, hi = np.quantile(b, [0.025, 0.975]) - b.mean() + e.estimate
    assert (e.ci_lower, e.ci_upper) == pytest.approx((lo, hi))
    assert e.ci_lower <= e.estimate <= e.ci_upper


def test_fewer_replicates_are_a_prefix_of_more(gbsg2):
    m = ColumnsCox(("pnodes", "tgrade"), name="m")
    a = validate({"m": m}, gbsg2, H, replicates=3, random_state=11, backend="serial", calibration=False)
    b = validate({"m": m}, gbsg2, H, replicates=5, random_state=11, backend="serial", calibration=False)
    assert np.array_equal(a.replicates["m"].train, b.replicates["m"].train[:3], equal_nan=True)


def test_model_replicates_budget_is_recorded(gbsg2):
    models = {"a": ColumnsCox(("pnodes",), name="a"), "b": ColumnsCox(("pnodes", "tgrade"), name="b")}
    res = validate(models, gbsg2, H, replicates=6, model_replicates={"b": 2}, random_state=1,
                   backend="serial", calibration=False)
    assert res.n_replicates == {"a": 6, "b": 2}
    assert res.replicates["b"].ok.size == 2
    assert any("first 2 of 6" in s for s in res.notes)
    assert res.pair_replicates[("b", "a")].ok.size == 2


def test_cv_folds_never_split_a_patient():
    from sksurv.datasets import load_veterans_lung_cancer  # Kalbfleisch & Prentice 1980

    X, y = load_veterans_lung_cancer()
    n = len(X)
    # Two rows per patient id (as after a bootstrap draw): both must land in one fold.
    ids = np.array([f"P{i // 2}" for i in range(n)])
    cohort = Cohort(ids=ids, y=make_outcome(y["Survival_in_days"], y["Status"]),
                    clinical=pd.DataFrame(index=range(n)),
                    features=pd.DataFrame({"karno": X["Karnofsky_score"].astype(float)}))
    splits = cv_splits(cohort, folds=4, repeats=3, random_state=5)
    assert len(splits) == 12
    for r in range(3):
        seen = np.zeros(n, int)
        for rr, _, tr, te in splits:
            if rr != r:
                continue
            seen[te] += 1
            assert not set(ids[tr]) & set(ids[te])
        assert np.all(seen == 1)  # every row held out exactly once per repeat
    folds_r0 = [set(te) for rr, _, _, te in splits if rr == 0]
    folds_r1 = [set(te) for rr, _, _, te in splits if rr == 1]
    assert folds_r0 != folds_r1  # repeats reshuffle


def test_cv_pools_repeat_means(gbsg2):
    m = ColumnsCox(("pnodes", "tgrade", "progrec"), name="m")
    res = validate({"m": m}, gbsg2, H, method="cv", folds=3, repeats=2, random_state=2,
                   backend="serial", calibration=False)
    rm = res.replicates["m"]
    assert rm.test.shape[0] == 6 and rm.train is None
    j = res.metric_names.index("harrell_c")
    means = [rm.test[rm.replicate == r, j].mean() for r in (0, 1)]
    e = res.estimates["m"]["harrell_c"]
    assert e.estimate == pytest.approx(np.mean(means))
    assert e.sd == pytest.approx(np.std(means, ddof=1))


def test_by_centre_gives_one_result_per_centre(gbsg2):
    m = ColumnsCox(("pnodes", "tgrade"), name="m")
    res = validate({"m": m}, gbsg2, H, method="by_centre", random_state=0, backend="serial",
                   calibration=False)
    assert res.centres == ("east", "north", "south")
    rm = res.replicates["m"]
    assert rm.test.shape[0] == 3
    events = [int(gbsg2.event[gbsg2.centre == c].sum()) for c in res.centres]
    assert list(rm.events) == events
    j = res.metric_names.index("harrell_c")
    pooled = np.average(rm.test[:, j], weights=events)  # event-weighted pooling
    assert res.estimates["m"]["harrell_c"].estimate == pytest.approx(pooled)
    # no interval for the pooled value, and the estimate says why (the per-centre blocks have them)
    e = res.estimates["m"]["harrell_c"]
    assert np.isnan(e.ci_lower) and "heterogeneity, not a standard error" in e.note


def test_by_centre_needs_centres(gbsg2):
    no_centre = Cohort(gbsg2.ids, gbsg2.y, gbsg2.clinical, gbsg2.features, time_unit="days")
    with pytest.raises(SpecError, match="centre"):
        validate({"m": ColumnsCox(("pnodes",))}, no_centre, H, method="by_centre", backend="serial")


def test_failures_are_counted_and_reported(gbsg2):
    # Fails whenever patient G0 is drawn twice or more (about 26% of bootstrap samples).
    flaky = ColumnsCox(("pnodes",), fail_if_id="G0", name="flaky")
    ok = ColumnsCox(("pnodes",), name="ok")
    res = validate({"ok": ok, "flaky": flaky}, gbsg2, H, replicates=12, random_state=4,
                   backend="serial", calibration=False, max_failure_rate=0.9)
    rm = res.replicates["flaky"]
    n_fail = int((~rm.ok).sum())
    assert n_fail >= 1 and res.failures == {"ok": 0, "flaky": n_fail}
    assert len(res.failure_log) == n_fail
    assert all(f.model == "flaky" and f.stage == "fit" and "drawn twice" in f.message for f in res.failure_log)
    assert np.all(np.isnan(rm.test[~rm.ok])) and np.all(np.isfinite(rm.test[rm.ok][:, 0]))
    assert res.estimates["flaky"]["harrell_c"].n_used == 12 - n_fail
    assert res.pair_replicates[("flaky", "ok")].ok.size == 12 - n_fail
    assert any("could not be fitted" in s for s in res.notes)
    with pytest.raises(ModelError, match=r"could not be fitted or evaluated in \d+ of 12 bootstrap"):
        validate({"flaky": flaky}, gbsg2, H, replicates=12, random_state=4, backend="serial",
                 calibration=False)


def test_bad_settings_are_clear_errors(gbsg2):
    m = {"m": ColumnsCox(("pnodes",))}
    with pytest.raises(SpecError, match="unknown validation method"):
        validate(m, gbsg2, H, method="jackknife")
    with pytest.raises(SpecError, match="model_replicates names 'x'"):
        validate(m, gbsg2, H, model_replicates={"x": 3}, backend="serial")
    with pytest.raises(SpecError, match="unknown backend"):
        validate(m, gbsg2, H, replicates=2, backend="gpu", workers=2)
    with pytest.raises(MetricError, match="outside the follow-up"):
        validate(m, gbsg2, [730.0, 5000.0], replicates=2, backend="serial")


def test_horizon_beyond_a_fold_is_counted_not_fatal(gbsg2):
    # A horizon near the end of follow-up: some held-out centres or folds cannot assess it.
    late = float(np.sort(gbsg2.time)[-3])
    m = ColumnsCox(("pnodes",), name="m")
    res = validate({"m": m}, gbsg2, [730.0, late], method="by_centre", backend="serial",
                   calibration=False)
    counts = res.dropped_metrics["m"]
    assert counts.get(f"auc@{late:g}", 0) >= 1
    assert res.failures["m"] == 0


def test_external_validation_normal_intervals(gbsg2):
    from workbench.validation import validate_external

    dev, ext = gbsg2.take(np.arange(0, 450)), gbsg2.take(np.arange(450, gbsg2.n))
    fitted = {"m": ColumnsCox(("pnodes", "tgrade"), name="m").fit(dev)}
    res = validate_external(fitted, ext, H, replicates=10, random_state=0, calibration=False)
    e = res.estimates["m"]["harrell_c"]
    assert res.method == "external" and np.isnan(e.optimism)
    assert e.estimate == res.apparent["m"].harrell_c
    assert e.ci_lower < e.estimate < e.ci_upper and e.n_used == 10 and e.interval == "normal"
    # estimate -+ t_9 * SD of the 10 resampled values * sqrt(1 + 1/10) (t quantile from scipy)
    v = res.replicates["m"].train[:, res.metric_names.index("harrell_c")]
    half = t_dist.ppf(0.975, 9) * np.std(v, ddof=1) * np.sqrt(1.1)
    assert (e.ci_lower, e.ci_upper) == pytest.approx((e.estimate - half, e.estimate + half))


def test_tqdm_progress_bar_counts_to_total():
    import io

    from workbench.validation.backends import run_tasks, tqdm_progress

    buf = io.StringIO()
    out = run_tasks(abs, [-1, -2, -3], backend="serial", progress=tqdm_progress("reps", file=buf))
    assert out == [1, 2, 3]
    assert "3/3" in buf.getvalue()


def test_zero_replicates_gives_apparent_only(gbsg2):
    m = ColumnsCox(("pnodes",), name="m")
    res = validate({"m": m}, gbsg2, H, replicates=0, backend="serial", calibration=False)
    e = res.estimates["m"]["harrell_c"]
    assert e.apparent == res.apparent["m"].harrell_c and np.isnan(e.estimate) and e.n_used == 0
    assert any("apparent performance" in s for s in res.notes)


def test_by_centre_orders_numeric_centre_codes_by_value(gbsg2):
    # Centre codes 1, 2, 10 must come in value order, not text order (1, 10, 2).
    code = {"east": 1, "north": 2, "south": 10}
    numbered = Cohort(gbsg2.ids, gbsg2.y, gbsg2.clinical, gbsg2.features, time_unit="days",
                      centre=np.array([code[c] for c in gbsg2.centre]))
    m = ColumnsCox(("pnodes", "tgrade"), name="m")
    res = validate({"m": m}, numbered, H, method="by_centre", random_state=0, backend="serial",
                   calibration=False)
    assert res.centres == ("1", "2", "10")
    events = [int(numbered.event[numbered.centre == c].sum()) for c in res.centres]
    assert list(res.replicates["m"].events) == events


def test_one_worker_reports_progress_after_every_replicate_and_gives_the_same_numbers(gbsg2):
    # A cancel acts at the next progress call: with one worker (run in this process) each
    # replicate is its own task, so the app's Cancel button acts within one replicate.
    m = ColumnsCox(("pnodes", "tgrade"), name="m")
    seen = []
    one = validate({"m": m}, gbsg2, H, replicates=12, random_state=5, backend="processes", workers=1,
                   calibration=False, progress=lambda done, total: seen.append((done, total)))
    assert seen == [(k, 12) for k in range(1, 13)]
    ref = validate({"m": m}, gbsg2, H, replicates=12, random_state=5, backend="serial", calibration=False)
    assert one.estimates["m"]["harrell_c"].estimate == ref.estimates["m"]["harrell_c"].estimate
