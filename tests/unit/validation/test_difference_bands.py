"""Paired difference bands (validation/difference_bands.py) on the GBSG2 data shipped with scikit-survival.

GBSG2 (Schumacher et al. 1994) is split into a "development" part (first 400 rows) and an
"external" part (the other 286); two unpenalised Cox models on its measurements are fitted on the
first and applied unchanged to the second. The checks are independent recomputations: the band
must be the normal band (estimate -+ t_{B-1} SD sqrt(1 + 1/B), t quantile from scipy) of the
differences recomputed here from the metric functions on the resamples of ``resample_plan``
(the same resamples for both models), and the AUC band at a
horizon must equal the external table's interval of the AUC difference.
"""

from __future__ import annotations

import sys
import warnings
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from scipy import stats
from scipy.stats import t as t_dist

sys.path.insert(0, str(Path(__file__).parents[3] / "bench"))
from _sim import SmallCox  # noqa: E402

from workbench.cohort import Cohort, make_outcome  # noqa: E402
from workbench.metrics.decision import net_benefit  # noqa: E402
from workbench.metrics.td_auc import time_dependent_auc  # noqa: E402
from workbench.validation import compare_models  # noqa: E402
from workbench.validation.difference_bands import (  # noqa: E402
    auc_difference_internal,
    difference_grid,
    external_auc_band,
    net_benefit_difference,
)
from workbench.validation.external import resample_plan, validate_external  # noqa: E402

H = [365.0, 730.0, 1095.0]
REPS = 40


@pytest.fixture(scope="module")
def gbsg2_split():
    from sksurv.datasets import load_gbsg2

    X, y = load_gbsg2()
    X = X.reset_index(drop=True)
    feats = pd.DataFrame({c: X[c].astype(float).to_numpy() for c in ("age", "tsize", "pnodes", "progrec")})
    feats["pnodes"] = np.log1p(feats["pnodes"])
    feats["progrec"] = np.log1p(feats["progrec"])
    out = make_outcome(y["time"], y["cens"])

    def part(rows):
        return Cohort(ids=np.array([f"G{i}" for i in rows]), y=out[rows], clinical=pd.DataFrame(index=range(rows.size)),
                      features=feats.iloc[rows].reset_index(drop=True), time_unit="days")

    dev, ext = part(np.arange(400)), part(np.arange(400, len(X)))
    models = {"base": SmallCox(("age", "tsize"), "base").fit(dev),
              "full": SmallCox(("age", "tsize", "pnodes", "progrec"), "full").fit(dev)}
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        res = validate_external(models, ext, H, replicates=REPS, random_state=17, by_group=False, calibration=False)
    return models, ext, res


def test_external_net_benefit_band_is_the_paired_normal_band(gbsg2_split):
    models, ext, res = gbsg2_split
    band = net_benefit_difference(res, "full", "base", 1)
    curves = {k: m.predict_survival(ext, H) for k, m in models.items()}
    diffs = []
    for idx in resample_plan(np.random.SeedSequence(res.seed_entropy), ext.n, REPS):
        nb = {k: net_benefit(ext.y[idx], c.take(idx), H[1]).net_benefit for k, c in curves.items()}
        diffs.append(nb["full"] - nb["base"])
    d = np.array(diffs)
    whole = {k: net_benefit(ext.y, c, H[1]).net_benefit for k, c in curves.items()}
    np.testing.assert_allclose(band.estimate, whole["full"] - whole["base"], atol=1e-12)
    keep = np.isfinite(band.lower)
    b = np.sum(np.isfinite(d), axis=0)
    half = t_dist.ppf(0.975, b - 1) * np.nanstd(d, axis=0, ddof=1) * np.sqrt(1 + 1 / b)
    est = whole["full"] - whole["base"]
    np.testing.assert_allclose(band.lower[keep], (est - half)[keep], atol=1e-12)
    np.testing.assert_allclose(band.upper[keep], (est + half)[keep], atol=1e-12)
    assert band.n_replicates == REPS and band.band == "normal" and band.horizon == H[1]
    assert keep.sum() >= 20  # the band exists over the thresholds where patients are acted on


def test_external_auc_band_meets_the_external_table_at_the_horizons(gbsg2_split):
    models, ext, res = gbsg2_split
    grid = difference_grid(ext.y, H)
    assert set(H) <= set(grid.tolist())
    band = external_auc_band(models["full"].predict_risk(ext), models["base"].predict_risk(ext), ext.y, None, "km",
                             grid, replicates=REPS, random_state=np.random.SeedSequence(res.seed_entropy))
    comp = compare_models(res, "full", "base")
    for h in H:
        k = int(np.flatnonzero(grid == h)[0])
        diff = comp.differences[f"auc@{h:g}"]
        assert band.estimate[k] == pytest.approx(diff.estimate, abs=1e-12)
        assert band.lower[k] == pytest.approx(diff.ci_lower, abs=1e-12)
        assert band.upper[k] == pytest.approx(diff.ci_upper, abs=1e-12)
    # between the horizons it is the AUC metric itself, recomputed at one time
    t = grid[1]
    a = [time_dependent_auc(ext.y, ext.y, models[k].predict_risk(ext), [t]).auc[0] for k in ("full", "base")]
    assert band.estimate[1] == pytest.approx(a[0] - a[1], abs=1e-12)


def test_same_model_twice_gives_a_zero_difference_and_no_band(gbsg2_split):
    models, ext, res = gbsg2_split
    r = models["full"].predict_risk(ext)
    band = external_auc_band(r, r, ext.y, None, "km", [365.0, 730.0], replicates=10, random_state=1)
    np.testing.assert_array_equal(band.estimate, 0.0)
    # a band of zero width is withdrawn, as every workbench interval is
    assert np.all(np.isnan(band.lower)) and np.all(np.isnan(band.upper))


def test_internal_bands_follow_the_comparison(small_study_result):
    r = small_study_result
    comp = r.comparisons["combined"]
    j = 1
    band = net_benefit_difference(r.validation, "combined", "clinical", j)
    dc = comp.decision[j]
    np.testing.assert_allclose(band.estimate, dc.model_validated - dc.baseline_validated, atol=1e-12, equal_nan=True)
    # the small study asks for the two-stage interval: the band comes from the outer samples, paired
    assert band.band == "two-stage"
    om, ob = r.validation.outer_net_benefit["combined"], r.validation.outer_net_benefit["clinical"]
    assert om.shape == ob.shape == (10, len(r.spec.horizons), dc.thresholds.size)
    keep = np.isfinite(band.lower)
    assert keep.sum() >= 10
    assert np.all(band.lower[keep] <= band.estimate[keep] + 1e-12)
    assert np.all(band.estimate[keep] <= band.upper[keep] + 1e-12)
    # bootstrap two-stage rule, written out here: bias-corrected normal interval of the outer
    # differences, 2 e - mean(d) -+ t_{B-1} sd(d) sqrt(1 + 1/B) (Efron & Tibshirani 1993, ch. 6 and 10)
    assert r.validation.method == "bootstrap"
    d = (om - ob)[:, j]
    for k in np.flatnonzero(keep):
        col = d[:, k][np.isfinite(d[:, k])]
        half = stats.t.ppf(0.975, col.size - 1) * np.std(col, ddof=1) * np.sqrt(1 + 1 / col.size)
        centre = 2 * band.estimate[k] - col.mean()
        assert band.lower[k] == pytest.approx(centre - half, abs=1e-12)  # net benefit: no range to clip to
        assert band.upper[k] == pytest.approx(centre + half, abs=1e-12)
    auc = auc_difference_internal(comp)
    for k, h in enumerate(r.spec.horizons):
        e = comp.differences[f"auc@{h:g}"]
        assert auc.estimate[k] == e.estimate
        assert auc.lower[k] == e.ci_lower or (np.isnan(auc.lower[k]) and np.isnan(e.ci_lower))
    # the study result carries the same bands (what results.json and the figures use)
    stored = r.difference_bands["combined"]
    np.testing.assert_array_equal(stored["net_benefit"]["internal"].estimate,
                                  net_benefit_difference(r.validation, "combined", "clinical",
                                                         len(r.spec.horizons) // 2).estimate)


def test_shifted_percentile_band_without_the_two_stage_interval(gbsg2_split):
    from workbench.validation import validate

    models, ext, _ = gbsg2_split
    unfitted = {"base": SmallCox(("age", "tsize"), "base"), "full": SmallCox(("age", "tsize", "pnodes"), "full")}
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        res = validate(unfitted, ext, H, replicates=12, random_state=4, calibration=False, estimator="optimism",
                       interval="shifted-percentile")
    band = net_benefit_difference(res, "full", "base", 1)
    assert band.band == "shifted-percentile"
    rm, rb = res.replicates["full"], res.replicates["base"]
    b = rm.nb_train[:, 1] - rb.nb_train[:, 1]
    o = rm.nb_test[:, 1] - rb.nb_test[:, 1]
    app = res.apparent["full"].net_benefit[1] - res.apparent["base"].net_benefit[1]
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)
        est = app - np.nanmean(b - o, axis=0)
        lo = np.nanquantile(b, 0.025, axis=0) - np.nanmean(b, axis=0) + est
    keep = np.isfinite(band.lower)
    assert keep.sum() >= 10
    np.testing.assert_allclose(band.estimate, est, atol=1e-12, equal_nan=True)
    np.testing.assert_allclose(band.lower[keep], lo[keep], atol=1e-12)
