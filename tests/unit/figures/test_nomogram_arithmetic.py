"""Nomogram arithmetic: reading the scales reproduces the model's predicted survival.

The demo cohort (invented data, demo_cohort/) is used for the two study models;
the external reference is lifelines' Cox model on the Rossi recidivism data it
ships (Fox, appendix to "An R and S-PLUS Companion to Applied Regression").
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from workbench.cohort.core import Cohort
from workbench.cohort.outcome import make_outcome
from workbench.errors import SpecError
from workbench.figures.nomogram import plot_nomogram
from workbench.figures.nomogram_points import (
    SIGNATURE_TERM,
    _monotone_pieces,
    nomogram_scales,
    patient_values,
    points_for_patient,
    points_table,
    survival_from_table,
    with_horizons,
    write_points_table,
)
from workbench.models.cox import ClinicalCox
from workbench.preprocess.clinical import PredictorSpec


@pytest.fixture(scope="module")
def demo(demo_two_models):
    spec, cohort, models = demo_two_models
    sig = models["combined"].signature_score(cohort)
    scales = {
        "clinical": nomogram_scales(models["clinical"], spec.horizons, time_unit="months", median_axis=True),
        "combined": nomogram_scales(models["combined"], spec.horizons, signature_scores=sig,
                                    time_unit="months", median_axis=True),
    }
    rng = np.random.default_rng(20261202)
    rows = rng.choice(cohort.n, size=60, replace=False)
    return spec, cohort, models, sig, scales, rows


@pytest.mark.parametrize("name", ["clinical", "combined"])
def test_reading_the_scales_reproduces_predicted_survival(demo, name):
    spec, cohort, models, sig, scales, rows = demo
    sc = scales[name]
    pred = models[name].predict_survival(cohort.take(rows), spec.horizons).probs
    for k, i in enumerate(rows):
        pp = points_for_patient(sc, patient_values(cohort, i, sig if name == "combined" else None))
        # points per axis add up to the total, and the total maps to the model's linear predictor
        assert pp.total == pytest.approx(sum(pp.points.values()), abs=1e-9)
        got = np.array([pp.survival[h] for h in spec.horizons])
        np.testing.assert_allclose(got, pred[k], atol=0.01)  # the tolerance the nomogram promises
        np.testing.assert_allclose(got, pred[k], atol=1e-10)  # and the arithmetic is in fact exact
    lp = models[name].linear_predictor(cohort.take(rows))
    totals = [points_for_patient(sc, patient_values(cohort, i, sig)).total for i in rows]
    np.testing.assert_allclose(sc.linear_predictor(totals), lp, atol=1e-10)


@pytest.mark.parametrize("name", ["clinical", "combined"])
def test_points_table_reproduces_predicted_survival(demo, name, tmp_path):
    spec, cohort, models, sig, scales, rows = demo
    table = points_table(scales[name])
    pred = models[name].predict_survival(cohort.take(rows), spec.horizons).probs
    for k, i in enumerate(rows):
        values = dict(points_for_patient(scales[name], patient_values(cohort, i, sig)).values)
        got = [survival_from_table(table, values, h) for h in spec.horizons]
        np.testing.assert_allclose(got, pred[k], atol=0.01)
    terms_csv, surv_csv = write_points_table(table, tmp_path / f"{name}_points.csv")
    back = pd.read_csv(terms_csv)
    assert list(back.columns) == ["term", "label", "value", "points", "on_axis"]
    assert set(back["term"]) == {t.name for t in scales[name].terms}
    surv = pd.read_csv(surv_csv)
    assert list(surv.columns[:2]) == ["total_points", "linear_predictor"]
    assert np.all(np.diff(surv["survival_12"]) <= 0)  # survival falls as points rise


@pytest.mark.parametrize("name", ["clinical", "combined"])
def test_new_horizons_recompute_only_the_survival_axes(demo, name):
    spec, cohort, models, sig, scales, rows = demo
    new = (7.5, 18.0, 30.0)  # times that are not the study's horizons, inside the demo's follow-up
    moved = with_horizons(scales[name], models[name], new)
    fresh = nomogram_scales(models[name], new, signature_scores=sig if name == "combined" else None,
                            time_unit="months", median_axis=True)
    # the same scales as built from scratch at those horizons
    assert moved.survival == fresh.survival and moved.total_ticks == fresh.total_ticks
    assert (moved.points_per_lp, moved.lp_intercept) == (fresh.points_per_lp, fresh.lp_intercept)
    pd.testing.assert_frame_equal(points_table(moved).survival, points_table(fresh).survival)
    pd.testing.assert_frame_equal(points_table(moved).terms, points_table(fresh).terms)
    assert moved.terms is scales[name].terms  # the predictor axes are reused, not rebuilt
    # Reference: the model's own predicted survival at the new times (the nomogram arithmetic is exact)
    pred = models[name].predict_survival(cohort.take(rows[:10]), new).probs
    for k, i in enumerate(rows[:10]):
        pp = points_for_patient(moved, patient_values(cohort, i, sig if name == "combined" else None))
        np.testing.assert_allclose([pp.survival[h] for h in new], pred[k], atol=1e-10)


def test_axis_scaling_follows_the_widest_term(demo):
    *_, scales, _ = demo
    for sc in scales.values():
        spans = [t.max_points for t in sc.terms]
        assert max(spans) == pytest.approx(100.0)
        for t in sc.terms:
            pts = [k.points for k in t.ticks]
            assert min(pts) >= -1e-9 and max(pts) <= 100 + 1e-9
        assert sc.total_axis_max >= sum(spans) - 1e-9
        for s in sc.survival:  # the printed probability sits where the survival function takes it
            for k in s.ticks:
                assert s.survival(k.points) == pytest.approx(k.value, abs=1e-9)


def test_categorical_detection_limit_and_signature_axes(demo):
    *_, scales, _ = demo
    sc = scales["combined"]
    stage = sc.term("stage")
    assert [k.label for k in stage.ticks] == ["I", "II", "III", "IV"]
    cea = sc.term("cea_ng_ml")
    assert cea.extra_ticks and cea.extra_ticks[0].label.startswith("<")
    assert {k.value for k in cea.segments[0].ticks} <= {0.5, 1, 2, 3, 5, 10, 20, 30, 50}  # 1-2-5 style on the original scale
    sig = sc.term(SIGNATURE_TERM)
    assert [b.label for b in sig.bands] == ["low", "intermediate", "high"]
    with pytest.raises(SpecError, match="signature_scores"):
        nomogram_scales(demo[2]["combined"], (12,))


def test_missing_value_is_imputed_only_where_the_model_says_so(demo):
    spec, cohort, models, sig, scales, _ = demo
    values = patient_values(cohort, 0)
    values["ecog"] = None  # ecog has missing = "impute" in the study file
    pp = points_for_patient(scales["clinical"], values)
    assert pp.imputed == ("ecog",)
    values["stage"] = None  # stage is complete-case: no rule to fill it in
    with pytest.raises(SpecError, match="missing"):
        points_for_patient(scales["clinical"], values)


def test_monotone_pieces_split_a_non_monotone_curve():
    x = np.linspace(-2, 2, 401)
    y = x**3 - 1.5 * x  # rises, falls, rises: turning points at +-sqrt(0.5)
    pieces = _monotone_pieces(y, 1e-12)
    assert len(pieces) == 3
    for i, j in pieces:
        d = np.diff(y[i : j + 1])
        assert np.all(d >= -1e-12) or np.all(d <= 1e-12)
    turns = [x[j] for _, j in pieces[:-1]]
    np.testing.assert_allclose(turns, [-np.sqrt(0.5), np.sqrt(0.5)], atol=0.011)


def test_spline_axes_are_monotone_pieces_and_exact(demo):
    spec, cohort, *_ = demo
    preds = tuple(PredictorSpec("age", kind="spline", knots=5, label="Age", unit="years") if p.column == "age"
                  else p for p in spec.predictors)
    m = ClinicalCox(preds).fit(cohort)
    sc = nomogram_scales(m, spec.horizons)
    age = sc.term("age")
    for seg in age.segments:
        lo, hi = seg.value_range
        pts = age.points(np.linspace(lo, hi, 200))
        d = np.diff(pts)
        assert np.all(d >= -1e-6) or np.all(d <= 1e-6)  # monotone up to the optimiser's tolerance
    edges = [s.value_range for s in age.segments]
    for (_, a), (b, _) in zip(edges[:-1], edges[1:], strict=True):
        assert a == pytest.approx(b)  # pieces join without gaps
    pred = m.predict_survival(cohort.take(range(40)), spec.horizons).probs
    got = [[points_for_patient(sc, patient_values(cohort, i)).survival[h] for h in spec.horizons] for i in range(40)]
    np.testing.assert_allclose(got, pred, atol=1e-10)
    fig = plot_nomogram(sc)
    assert len(fig.axes) == 1


def test_nomogram_matches_lifelines_on_rossi():
    """Survival read off the nomogram equals lifelines' Cox predictions (Rossi data shipped with lifelines)."""
    from lifelines import CoxPHFitter
    from lifelines.datasets import load_rossi

    df = load_rossi()
    covs = ["fin", "age", "race", "wexp", "mar", "paro", "prio"]
    cohort = Cohort(
        ids=np.array([f"R{i}" for i in range(len(df))]),
        y=make_outcome(df["week"].to_numpy(float), df["arrest"].to_numpy(bool)),
        clinical=df[covs].astype(str).reset_index(drop=True),
        features=pd.DataFrame(index=range(len(df))),
        time_unit="weeks",
    )
    model = ClinicalCox(tuple(PredictorSpec(c) for c in covs)).fit(cohort)
    horizons = (20.0, 40.0, 52.0)
    sc = nomogram_scales(model, horizons, time_unit="weeks")
    ref = CoxPHFitter().fit(df, "week", "arrest")
    s_ref = ref.predict_survival_function(df.iloc[:50], times=list(horizons)).to_numpy().T
    got = [[points_for_patient(sc, patient_values(cohort, i)).survival[h] for h in horizons] for i in range(50)]
    np.testing.assert_allclose(got, s_ref, atol=0.01)
