"""Competing-risks metrics with competing events present, against direct pair-by-pair
and patient-by-patient sums written out here (data: scikit-survival's chronic GVHD set,
``sksurv.datasets.load_cgvhd``, three causes; censoring weights from scikit-survival's
``CensoringDistributionEstimator``)."""

import numpy as np
import pandas as pd
import pytest
from sksurv.datasets import load_cgvhd
from sksurv.nonparametric import CensoringDistributionEstimator
from sksurv.util import Surv

from workbench.competing.cif import aalen_johansen, incidence_at
from workbench.competing.metrics import competing_auc, competing_brier, competing_net_benefit
from workbench.competing.outcome import make_competing_outcome
from workbench.competing.regression import fit_cause_specific, predict_incidence_cause_specific
from workbench.errors import MetricError
from workbench.predictions import SurvivalCurves


@pytest.fixture(scope="module")
def cgvhd():
    X, y = load_cgvhd()
    D = pd.DataFrame({"aml": (X["dx"] == "AML").astype(float), "age": X["age"].astype(float)})
    t, c = y["ftime"].astype(float), y["status"].astype(int)
    yc = make_competing_outcome(t, c)
    fit = fit_cause_specific(D, yc, min_events_per_parameter=0)
    grid = np.unique(t)
    inc = predict_incidence_cause_specific(fit, D, grid, cause=1)
    cens = CensoringDistributionEstimator().fit(Surv.from_arrays(c > 0, t))
    return t, c, yc, inc, cens


def _G_left(cens, t, s):
    earlier = t[t < s]
    return float(cens.predict_proba(np.array([earlier.max()]))[0]) if earlier.size else 1.0


def test_auc_definition_2_pairwise(cgvhd):
    t, c, yc, inc, cens = cgvhd
    t0 = 0.5
    r = inc.risk_at(t0)
    G_t0 = float(cens.predict_proba(np.array([t0]))[0])
    num = den = 0.0
    for i in np.flatnonzero((c == 1) & (t <= t0)):
        wi = 1 / _G_left(cens, t, t[i])
        for j in range(t.size):
            if t[j] > t0:
                wj = 1 / G_t0
            elif c[j] > 1:
                wj = 1 / _G_left(cens, t, t[j])
            else:
                continue
            num += wi * wj * ((r[i] > r[j]) + 0.5 * (r[i] == r[j]))
            den += wi * wj
    res = competing_auc(yc, yc, inc, t0)
    assert res.n_controls_competing > 0
    assert abs(res.auc - num / den) < 1e-12


def test_brier_patientwise(cgvhd):
    t, c, yc, inc, cens = cgvhd
    t0 = 0.5
    F = inc.risk_at(t0)
    null = float(incidence_at(aalen_johansen(t, c), t0, 1)[0])
    G_t0 = float(cens.predict_proba(np.array([t0]))[0])
    bs = bn = 0.0
    for i in range(t.size):
        if t[i] <= t0 and c[i] > 0:
            w, s = 1 / _G_left(cens, t, t[i]), float(c[i] == 1)
        elif t[i] > t0:
            w, s = 1 / G_t0, 0.0
        else:
            continue
        bs += w * (s - F[i]) ** 2
        bn += w * (s - null) ** 2
    res = competing_brier(yc, yc, inc, [t0])
    assert abs(res.brier[0] - bs / t.size) < 1e-12
    assert abs(res.null_brier[0] - bn / t.size) < 1e-12


def test_net_benefit_treat_all_is_aj(cgvhd):
    t, c, yc, inc, _ = cgvhd
    res = competing_net_benefit(yc, inc, 0.5, thresholds=[0.2])
    f = float(incidence_at(aalen_johansen(t, c), 0.5, 1)[0])
    assert abs(res.treat_all[0] - (f - (1 - f) * 0.25)) < 1e-12


def test_survival_curves_are_refused(cgvhd):
    t, c, yc, inc, _ = cgvhd
    with pytest.raises(MetricError, match="cumulative incidences"):
        competing_brier(yc, yc, SurvivalCurves(inc.times, 1 - inc.risks), [0.5])


def test_auc_cause_from_scores_and_mismatch(cgvhd):
    t, c, yc, inc, _ = cgvhd
    from workbench.predictions import RiskScores

    by_scores = competing_auc(yc, yc, RiskScores(inc.risk_at(0.5)), 0.5, cause=1)
    assert by_scores.auc == competing_auc(yc, yc, inc, 0.5).auc
    with pytest.raises(MetricError, match="predictions are for cause 1 but cause 2"):
        competing_auc(yc, yc, inc, 0.5, cause=2)
