"""The numpy elastic-net Cox path solver against independent references.

Sources:
* scikit-survival's ``CoxnetSurvivalAnalysis`` (general-purpose reference solver,
  ``normalize=False``), same penalties, l1_ratio and penalty factors, on
  - the breast cancer gene-expression data it ships (``sksurv.datasets.load_breast_cancer``:
    76 genes plus clinical fields; er and grade one-hot encoded with
    ``sksurv.column.encode_categorical``; every column standardised), and
  - the German Breast Cancer Study Group 2 trial data it ships (``load_gbsg2``; horTh,
    menostat and tgrade one-hot encoded the same way; standardised).
  The reference runs with tol=1e-15: its stopping rule (no coordinate update larger than
  sqrt(tol) in scale) leaves coefficient errors that shrink like sqrt(tol) -- measured on
  the breast cancer lasso path to 0.01 alpha_max: 4e-4 at tol=1e-11, 4e-5 at 1e-13 -- so a
  1e-6 comparison needs the tightest setting, and on the gene data the path is taken to
  0.05 alpha_max (the workbench's first path segment), where tol=1e-15 reaches 8e-7.
* statsmodels ``PHReg(ties="breslow")`` for the unpenalised fit, on the Rossi recidivism
  data shipped with lifelines (``lifelines.datasets.load_rossi``; many tied weeks).
* Frequency weights against the same rows duplicated (definition of a frequency weight),
  with Breslow and with Efron ties, and the engine's bootstrap-copies-as-weights route
  against the duplicated rows.
* Efron ties: lifelines ``CoxPHFitter`` (Efron is its default) unpenalised on the Rossi data
  (coefficients 1e-6; also three published coefficients of Fox's appendix, 5 decimals, recalled
  from memory);
  statsmodels ``PHReg(ties="efron")`` log-likelihood (1e-12) and score, the latter for the
  KKT conditions of a penalised Efron path (1e-7).
* The one-pass cross-validated score against a per-penalty loop of Verweij & van
  Houwelingen's definition (Stat Med 1993;12:2305-14) using the workbench's Breslow
  log-likelihood, itself checked against statsmodels in test_coxnet_reference.py.
"""

import warnings

import numpy as np
import pandas as pd
import pytest
from lifelines import CoxPHFitter
from lifelines.datasets import load_rossi
from sksurv.column import encode_categorical
from sksurv.datasets import load_breast_cancer, load_gbsg2
from sksurv.linear_model import CoxnetSurvivalAnalysis
from statsmodels.duration.hazard_regression import PHReg

from workbench.cohort.outcome import make_outcome
from workbench.models.coxlik import breslow_loglik, cv_partial_loglik, weighted_loglik
from workbench.models.coxpath import cox_alpha_max, fit_cox_path
from workbench.models.penalized import fit_penalized_path

REF_TOL = 1e-15  # the reference solver's tolerance (see the module docstring)
OUR_TOL = 1e-16
ATOL = 1e-6


def _standardised(X):
    X = encode_categorical(X).astype(float)
    return ((X - X.mean()) / X.std(ddof=0)).to_numpy(), list(X.columns)


@pytest.fixture(scope="module")
def breast():
    X, y = load_breast_cancer()
    Z, names = _standardised(X)
    return Z, y["t.tdm"].astype(float), y["e.tdm"].astype(bool), names


@pytest.fixture(scope="module")
def gbsg2():
    X, y = load_gbsg2()
    Z, names = _standardised(X)
    return Z, y["time"].astype(float), y["cens"].astype(bool), names


def _reference(Z, time, event, alphas, l1_ratio, penalty_factor=None):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return CoxnetSurvivalAnalysis(alphas=alphas, l1_ratio=l1_ratio, penalty_factor=penalty_factor,
                                      tol=REF_TOL, max_iter=10_000_000).fit(Z, make_outcome(time, event))


@pytest.mark.parametrize("l1_ratio", [1.0, 0.5])
@pytest.mark.parametrize("data, alpha_min_ratio", [("breast", 0.05), ("gbsg2", 0.01)])
def test_path_equals_scikit_survival_at_every_penalty(request, data, alpha_min_ratio, l1_ratio):
    Z, time, event, _ = request.getfixturevalue(data)
    ours = fit_cox_path(Z, time, event, n_alphas=100, alpha_min_ratio=alpha_min_ratio,
                        l1_ratio=l1_ratio, tol=OUR_TOL, stop_flat=False)
    ref = _reference(Z, time, event, ours.alphas, l1_ratio)
    k = ref.coef_.shape[1]  # the reference may stop early where the deviance flattens
    assert k >= 20
    np.testing.assert_allclose(ours.coefs[:, :k], ref.coef_, rtol=0, atol=ATOL)


@pytest.mark.parametrize("l1_ratio", [1.0, 0.5])
def test_large_problem_route_equals_scikit_survival(breast, monkeypatch, l1_ratio):
    """The route a large X takes (working-set buffer, Hessian carried between working sets, KKT
    bound through a basis of residual moves), forced on the breast cancer genes: the same
    reference path (scikit-survival, tol=1e-15) to the same 1e-6."""
    import workbench.models.coxpath as cp

    calls = {"bound": 0}
    kkt = cp.columns_dot

    def spy(*args):
        calls["bound"] += 1
        return kkt(*args)

    monkeypatch.setattr(cp, "_SMALL", 0)
    monkeypatch.setattr(cp, "columns_dot", spy)
    Z, time, event, _ = breast
    ours = fit_cox_path(Z, time, event, n_alphas=100, alpha_min_ratio=0.05, l1_ratio=l1_ratio,
                        tol=OUR_TOL, stop_flat=False)
    assert calls["bound"] > 0  # the bound cleared some features and checked the rest
    ref = _reference(Z, time, event, ours.alphas, l1_ratio)
    k = ref.coef_.shape[1]
    assert k >= 20
    np.testing.assert_allclose(ours.coefs[:, :k], ref.coef_, rtol=0, atol=ATOL)


@pytest.mark.parametrize("data", ["breast", "gbsg2"])
def test_generated_path_matches_the_reference_grid_and_its_early_stop(request, data):
    Z, time, event, _ = request.getfixturevalue(data)
    ours = fit_cox_path(Z, time, event, n_alphas=100, alpha_min_ratio=0.01, l1_ratio=0.9, tol=1e-13)
    ref = CoxnetSurvivalAnalysis(n_alphas=100, alpha_min_ratio=0.01, l1_ratio=0.9, tol=1e-13,
                                 max_iter=10_000_000).fit(Z, make_outcome(time, event))
    assert ours.alphas.size == ref.alphas_.size  # the flat-deviance stop fires at the same penalty
    np.testing.assert_allclose(ours.alphas, ref.alphas_, rtol=1e-10)
    # both solvers stop short of the exact optimum at tol=1e-13 (coefficients ~1e-5 apart at
    # the end of the gene path, measured); the explained deviance differs by < 1e-7 (measured)
    np.testing.assert_allclose(ours.dev_ratio, ref.deviance_ratio_, rtol=0, atol=1e-6)
    assert cox_alpha_max(Z, time, event, l1_ratio=0.9) == pytest.approx(ref.alphas_[0], rel=1e-10)


def test_penalty_factor_and_unpenalised_terms(breast):
    Z, time, event, names = breast
    pf = np.ones(Z.shape[1])
    clinical = [names.index(c) for c in ("age", "size", "er=positive")]
    pf[clinical] = 0.0
    pf[:5] = 2.0  # unequal factors are rescaled to sum to p, as in the reference
    ours = fit_cox_path(Z, time, event, n_alphas=60, alpha_min_ratio=0.05, l1_ratio=0.9,
                        penalty_factor=pf, tol=OUR_TOL, stop_flat=False)
    ref = CoxnetSurvivalAnalysis(n_alphas=60, alpha_min_ratio=0.05, l1_ratio=0.9, penalty_factor=pf,
                                 tol=REF_TOL, max_iter=10_000_000).fit(Z, make_outcome(time, event))
    k = ref.coef_.shape[1]
    # alpha_max now rests on the fit of the unpenalised terms, converged by each solver to its
    # own precision: 2e-9 apart (measured)
    np.testing.assert_allclose(ours.alphas[:k], ref.alphas_, rtol=1e-7)
    np.testing.assert_allclose(ours.coefs[:, :k], ref.coef_, rtol=0, atol=ATOL)
    assert np.all(ours.coefs[clinical] != 0)


def test_unpenalised_fit_equals_statsmodels_breslow_on_rossi():
    rossi = load_rossi()
    cols = ["fin", "age", "race", "wexp", "mar", "paro", "prio"]
    X = rossi[cols].to_numpy(float)
    time, event = rossi["week"].to_numpy(float), rossi["arrest"].to_numpy(bool)
    ref = PHReg(time, X, status=event.astype(float), ties="breslow").fit()
    ours = fit_cox_path(X, time, event, alphas=[0.0], tol=1e-16)
    np.testing.assert_allclose(ours.coefs[:, 0], ref.params, rtol=0, atol=1e-6)
    np.testing.assert_allclose(weighted_loglik(X @ ours.coefs[:, 0], time, event), ref.llf, rtol=1e-10)


def test_frequency_weights_equal_duplicated_rows(gbsg2):
    Z, time, event, _ = gbsg2
    w = np.random.default_rng(7).integers(0, 4, time.size)  # bootstrap-like counts 0..3
    rows = np.repeat(np.arange(time.size), w)
    weighted = fit_cox_path(Z, time, event, weights=w, n_alphas=40, l1_ratio=0.7, tol=OUR_TOL,
                            stop_flat=False)
    expanded = fit_cox_path(Z[rows], time[rows], event[rows], alphas=weighted.alphas, l1_ratio=0.7,
                            tol=OUR_TOL, stop_flat=False)
    assert cox_alpha_max(Z[rows], time[rows], event[rows], l1_ratio=0.7) == pytest.approx(
        weighted.alphas[0], rel=1e-12)
    np.testing.assert_allclose(weighted.coefs, expanded.coefs, rtol=0, atol=1e-8)
    eta = Z @ weighted.coefs
    np.testing.assert_allclose(weighted_loglik(eta, time, event, w),
                               breslow_loglik(eta[rows], time[rows], event[rows]), rtol=1e-12)


def test_cv_scores_equal_a_per_penalty_loop(gbsg2):
    Z, time, event, _ = gbsg2
    fold = np.random.default_rng(3).integers(0, 4, time.size)
    path = fit_cox_path(Z, time, event, n_alphas=15, l1_ratio=1.0, stop_flat=False)
    coefs = [fit_cox_path(Z[fold != k], time[fold != k], event[fold != k], alphas=path.alphas,
                          stop_flat=False).coefs for k in range(4)]
    got = cv_partial_loglik(Z, time, event, fold, coefs)
    for k, B in enumerate(coefs):
        tr = fold != k
        for j in range(B.shape[1]):  # Verweij & van Houwelingen, one penalty at a time
            eta = Z @ B[:, j]
            want = breslow_loglik(eta, time, event) - breslow_loglik(eta[tr], time[tr], event[tr])
            assert got[k, j] == pytest.approx(want, rel=1e-10, abs=1e-9)


# ----------------------------------------------------------------------------- Efron ties

_ROSSI = ["fin", "age", "race", "wexp", "mar", "paro", "prio"]


@pytest.fixture(scope="module")
def rossi():
    df = load_rossi()
    return df, df[_ROSSI].to_numpy(float), df["week"].to_numpy(float), df["arrest"].to_numpy(bool)


def test_unpenalised_efron_fit_equals_lifelines_on_rossi(rossi):
    # lifelines CoxPHFitter (Efron ties, its default), tight Newton tolerance; the weeks are
    # heavily tied (114 arrests on 49 distinct weeks), so Efron and Breslow differ visibly
    df, X, time, event = rossi
    ref = CoxPHFitter().fit(df, "week", "arrest", fit_options={"precision": 1e-12})
    ours = fit_cox_path(X, time, event, alphas=[0.0], tol=1e-16, ties="efron")
    np.testing.assert_allclose(ours.coefs[:, 0], ref.params_[_ROSSI].to_numpy(), rtol=0, atol=1e-6)
    np.testing.assert_allclose(weighted_loglik(X @ ours.coefs[:, 0], time, event, ties="efron"),
                               ref.log_likelihood_, rtol=1e-10)
    # published (Fox, appendix to An R and S-PLUS Companion to Applied Regression; printed to
    # 5 decimals; values recalled from memory, and they agree with lifelines' fit above):
    # fin -0.37942, age -0.05744, prio 0.09150
    np.testing.assert_allclose(ours.coefs[[0, 1, 6], 0], [-0.37942, -0.05744, 0.09150], atol=6e-6)


def test_efron_loglik_and_score_equal_statsmodels(rossi):
    # statsmodels PHReg(ties="efron"): log-likelihood and score at arbitrary coefficients
    _, X, time, event = rossi
    m = PHReg(time, X, status=event.astype(float), ties="efron")
    B = np.random.default_rng(11).normal(0, 0.1, (X.shape[1], 3))
    np.testing.assert_allclose(weighted_loglik(X @ B, time, event, ties="efron"),
                               [m.loglike(B[:, k]) for k in range(3)], rtol=1e-12)


def test_efron_path_meets_the_kkt_conditions_with_statsmodels_score(rossi):
    # elastic-net stationarity (Simon et al. 2011, section 2) with the Efron score of
    # statsmodels PHReg, independent of our likelihood code; tolerance 1e-7 at solver tol 1e-16
    _, X, time, event = rossi
    Z = (X - X.mean(0)) / X.std(0)
    l1 = 0.7
    path = fit_cox_path(Z, time, event, n_alphas=30, alpha_min_ratio=0.01, l1_ratio=l1, tol=1e-16,
                        stop_flat=False, ties="efron")
    m = PHReg(time, Z, status=event.astype(float), ties="efron")
    n = time.size
    assert np.count_nonzero(path.coefs[:, -1]) == Z.shape[1]
    for k, a in enumerate(path.alphas):
        b = path.coefs[:, k]
        g = m.score(b) / n
        nz = b != 0
        np.testing.assert_allclose(g[nz], a * (l1 * np.sign(b[nz]) + (1 - l1) * b[nz]), rtol=0, atol=1e-7)
        assert np.all(np.abs(g[~nz]) <= a * l1 + 1e-7)


def test_efron_frequency_weights_equal_duplicated_rows(rossi):
    # definition of a frequency weight, with Efron's tie correction counting copies as ties
    _, X, time, event = rossi
    Z = (X - X.mean(0)) / X.std(0)
    w = np.random.default_rng(5).integers(0, 4, time.size)
    rows = np.repeat(np.arange(time.size), w)
    weighted = fit_cox_path(Z, time, event, weights=w, n_alphas=30, l1_ratio=0.8, tol=OUR_TOL,
                            stop_flat=False, ties="efron")
    expanded = fit_cox_path(Z[rows], time[rows], event[rows], alphas=weighted.alphas, l1_ratio=0.8,
                            tol=OUR_TOL, stop_flat=False, ties="efron")
    np.testing.assert_allclose(weighted.coefs, expanded.coefs, rtol=0, atol=1e-8)
    eta = Z @ weighted.coefs
    np.testing.assert_allclose(weighted_loglik(eta, time, event, w, ties="efron"),
                               weighted_loglik(eta[rows], time[rows], event[rows], ties="efron"),
                               rtol=1e-12)
    # ... and the unpenalised weighted fit equals lifelines on the duplicated rows
    df = pd.DataFrame(Z[rows], columns=_ROSSI).assign(week=time[rows], arrest=event[rows])
    ref = CoxPHFitter().fit(df, "week", "arrest", fit_options={"precision": 1e-12})
    ours = fit_cox_path(Z, time, event, weights=w, alphas=[0.0], tol=1e-16, ties="efron")
    np.testing.assert_allclose(ours.coefs[:, 0], ref.params_[_ROSSI].to_numpy(), rtol=0, atol=1e-6)


def test_bootstrap_copies_as_weights_give_the_same_cross_validated_path(breast):
    # the engine fits a bootstrap sample as one weighted row per patient: the folds, the
    # path and the cross-validated deviance equal those of the duplicated rows (frequency
    # weights by definition), to solver tolerance
    Z, time, event, names = breast
    ids = np.random.default_rng(9).integers(0, time.size, time.size)
    y = make_outcome(time[ids], event[ids])
    kw = dict(groups=ids, l1_ratio=0.9, path_stop_ratio=0.05, tol=OUR_TOL, random_state=4)
    weighted = fit_penalized_path(Z[ids], y, **kw)
    rows = fit_penalized_path(Z[ids], y, collapse_copies=False, **kw)
    np.testing.assert_allclose(weighted.alphas, rows.alphas, rtol=1e-12)
    np.testing.assert_allclose(weighted.coefs, rows.coefs, rtol=0, atol=1e-8)
    # deviances per event of 10-35 on this path: relative 1e-8 (coefficients differ by ~1e-9)
    np.testing.assert_allclose(weighted.cv_mean, rows.cv_mean, rtol=1e-8, atol=0)
    np.testing.assert_allclose(weighted.fold_events, rows.fold_events, rtol=0, atol=0)
    assert weighted.index == rows.index and weighted.selected == rows.selected
