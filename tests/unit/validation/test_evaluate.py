"""evaluate_models / evaluate_predictions on public data.

Data: German Breast Cancer Study Group 2 (Schumacher et al., J Clin Oncol 1994) as
shipped with scikit-survival (`sksurv.datasets.load_gbsg2`), Cox model on all eight
covariates (the ClinicalCox of the workbench). References: REFERENCE_VALUES.md
(library values, scikit-survival 0.28) recomputed here with scikit-survival and
lifelines, and the workbench's own calibration module for the fast calibration path.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from workbench.cohort import Cohort, make_outcome
from workbench.errors import MetricError
from workbench.metrics.calibration import calibration_at
from workbench.metrics.concordance import uno_c
from workbench.models.cox import ClinicalCox
from workbench.preprocess.clinical import PredictorSpec
from workbench.validation.evaluate import (
    check_horizons,
    evaluate_models,
    ibs_grid,
    metric_names,
)

HORIZONS = [365.0, 730.0, 1095.0, 1460.0, 1825.0]
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
    model = ClinicalCox(SPECS, name="clinical").fit(cohort)
    return cohort, model


def _sk(y):
    return np.array(list(zip(y["event"], y["time"], strict=True)), dtype=[("e", "?"), ("t", "<f8")])


def test_apparent_metrics_match_scikit_survival(gbsg2):
    from sksurv.metrics import (
        concordance_index_censored,
        concordance_index_ipcw,
        cumulative_dynamic_auc,
    )
    from sksurv.metrics import integrated_brier_score as sk_ibs

    cohort, model = gbsg2
    grid = np.linspace(365.0, 1825.0, 100)
    perf = evaluate_models({"clinical": model}, cohort.y, cohort, HORIZONS, ibs_times=grid)["clinical"]
    ys, risk = _sk(cohort.y), model.predict_risk(cohort).values
    # Harrell C: same estimator as scikit-survival's concordance_index_censored, 1e-10.
    assert perf.harrell_c == pytest.approx(concordance_index_censored(ys["e"], ys["t"], risk)[0], abs=1e-10)
    # Uno C, AUC(t), integrated Brier: scikit-survival evaluates G(T) where we use G(T-); they differ
    # only where a censoring coincides with an event time (GBSG2 has a few), hence 2e-4.
    assert perf.uno_c == pytest.approx(concordance_index_ipcw(ys, ys, risk, tau=1825.0)[0], abs=2e-4)
    sk_auc, sk_mean = cumulative_dynamic_auc(ys, ys, risk, HORIZONS)
    np.testing.assert_allclose(perf.auc, sk_auc, atol=2e-4)
    assert perf.mean_auc == pytest.approx(sk_mean, abs=2e-4)
    S = model.predict_survival(cohort, grid).probs
    assert perf.ibs == pytest.approx(sk_ibs(ys, ys, S, grid), abs=2e-4)
    # REFERENCE_VALUES.md (library, scikit-survival 0.28): Uno C 0.682; AUC 0.766, 0.739, 0.743,
    # 0.738, 0.750; integrated Brier 365-1825 days 0.181 against 0.211 for the Kaplan-Meier null.
    assert perf.uno_c == pytest.approx(0.682, abs=5e-4)
    np.testing.assert_allclose(perf.auc, [0.766, 0.739, 0.743, 0.738, 0.750], atol=6e-4)
    assert perf.ibs == pytest.approx(0.181, abs=5e-4)
    assert perf.null_ibs == pytest.approx(0.211, abs=5e-4)
    assert perf.ipa_integrated == pytest.approx(1 - perf.ibs / perf.null_ibs)


def test_fast_calibration_equals_calibration_module(gbsg2):
    cohort, model = gbsg2
    perf = evaluate_models({"clinical": model}, cohort.y, cohort, HORIZONS)["clinical"]
    curves = model.predict_survival(cohort, HORIZONS)
    for j, t0 in enumerate(HORIZONS):
        ref = calibration_at(cohort.y, curves, t0)  # lifelines-based Cox fits
        # Same estimator, different Cox fitters (ours vs lifelines, both Efron): 1e-5.
        assert perf.ici[j] == pytest.approx(ref.smoothed.ici, abs=1e-5)
        assert perf.e50[j] == pytest.approx(ref.smoothed.e50, abs=1e-5)
        assert perf.e90[j] == pytest.approx(ref.smoothed.e90, abs=1e-5)
        assert perf.cal_slope[j] == pytest.approx(ref.slope.slope, abs=1e-5)
        assert perf.oe_ratio[j] == pytest.approx(ref.observed_expected.ratio, abs=1e-10)


def test_censoring_weights_come_from_training_rows(gbsg2):
    cohort, model = gbsg2
    train, test = cohort.take(np.arange(0, 400)), cohort.take(np.arange(400, cohort.n))
    perf = evaluate_models({"m": model}, train.y, test, [730.0, 1460.0])["m"]
    # Uno (Stat Med 2011): weights from the training censoring distribution.
    expected = uno_c(train.y, test.y, model.predict_risk(test), tau=1460.0).c_index
    assert perf.uno_c == pytest.approx(expected, abs=1e-12)
    other = evaluate_models({"m": model}, test.y, test, [730.0, 1460.0])["m"]
    assert other.uno_c != perf.uno_c


def test_horizon_outside_follow_up_is_a_clear_error(gbsg2):
    cohort, model = gbsg2
    short = cohort.mask(cohort.time < 1000)
    with pytest.raises(MetricError, match=r"horizon 1825 days lies outside the follow-up"):
        evaluate_models({"m": model}, cohort.y, short, [365.0, 1825.0])
    bad = check_horizons(short.y, [365.0, 1825.0], time_unit="days")
    assert list(bad) == [1825.0] and "follow-up from" in bad[1825.0]


def test_horizon_outside_follow_up_gives_nan_when_asked(gbsg2):
    cohort, model = gbsg2
    short = cohort.mask(cohort.time < 1000)
    perf = evaluate_models({"m": model}, cohort.y, short, [365.0, 1825.0], on_error="nan")["m"]
    assert np.isfinite(perf.auc[0]) and np.isnan(perf.auc[1])
    assert np.isnan(perf.mean_auc) and np.isnan(perf.ibs)
    assert np.isfinite(perf.brier[0]) and np.isnan(perf.cal_slope[1])
    assert any("1825" in d for d in perf.dropped)
    s = perf.scalars()
    assert tuple(s) == metric_names([365.0, 1825.0])
    assert np.isnan(s["auc@1825"]) and np.isfinite(s["auc@365"])


def test_ibs_grid_spans_first_event_to_last_horizon(gbsg2):
    cohort, _ = gbsg2
    grid = ibs_grid(cohort.y, HORIZONS)
    first_event = cohort.time[cohort.event].min()
    assert grid[0] == first_event and grid[-1] == 1825.0
    assert np.all(np.diff(grid) > 0)


def test_constant_prediction_leaves_calibration_undefined_not_an_error(gbsg2):
    from workbench.predictions import RiskScores, SurvivalCurves
    from workbench.validation.evaluate import evaluate_predictions

    cohort, _ = gbsg2
    n = cohort.n
    risk = RiskScores(np.zeros(n), "flat")
    curves = SurvivalCurves(HORIZONS, np.tile([0.9, 0.8, 0.7, 0.6, 0.5], (n, 1)), "flat")
    perf = evaluate_predictions(risk, curves, cohort.y, cohort.y, HORIZONS, ibs_times=HORIZONS)
    assert perf.harrell_c == 0.5  # every pair tied: half credit (Harrell et al. 1982)
    assert np.all(np.isnan(perf.cal_slope)) and any("calibration" in d for d in perf.dropped)
