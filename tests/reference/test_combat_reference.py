"""ComBat against a direct, loop-based transcription of the published equations.

Source: Johnson WE, Li C, Rabinovic A. Adjusting batch effects in microarray
expression data using empirical Bayes methods. Biostatistics 2007;8(1):118-27,
section 3.1 (standardisation, eq. 2.2), the parametric posteriors (eqs. 3.1-3.2 with
method-of-moments hyper-priors) and the non-parametric Monte Carlo posterior
(section 3.2). The reference below walks feature by feature and batch by batch with
scalar arithmetic so that it shares no vectorised code with the package.
"""

import math

import numpy as np
import pytest

from workbench.preprocess.harmonize import ComBat

TOL = 1e-8


def _reference_combat(Y, batch, C=None, prior="parametric", conv=1e-13):
    n, p = Y.shape
    levels = sorted(set(batch))
    rows = {b: [j for j in range(n) if batch[j] == b] for b in levels}
    q = 0 if C is None else C.shape[1]
    D = np.zeros((n, len(levels) + q))
    for j in range(n):
        D[j, levels.index(batch[j])] = 1.0
        for k in range(q):
            D[j, len(levels) + k] = C[j, k]
    Z = np.zeros((n, p))
    stand = np.zeros((n, p))
    sd = np.zeros(p)
    for g in range(p):
        coef = np.linalg.solve(D.T @ D, D.T @ Y[:, g])  # OLS per feature
        grand = sum(len(rows[b]) / n * coef[i] for i, b in enumerate(levels))
        var = sum((Y[j, g] - D[j] @ coef) ** 2 for j in range(n)) / n
        sd[g] = math.sqrt(var)
        for j in range(n):
            cov_part = sum(C[j, k] * coef[len(levels) + k] for k in range(q))
            stand[j, g] = grand + cov_part
            Z[j, g] = (Y[j, g] - stand[j, g]) / sd[g]
    out = np.zeros((n, p))
    for b in levels:
        r = rows[b]
        nb = len(r)
        gh = [sum(Z[j, g] for j in r) / nb for g in range(p)]
        dh = [sum((Z[j, g] - gh[g]) ** 2 for j in r) / (nb - 1) for g in range(p)]
        gs, ds = [0.0] * p, [0.0] * p
        if prior == "parametric":
            gbar = sum(gh) / p
            tau2 = sum((x - gbar) ** 2 for x in gh) / (p - 1)
            m = sum(dh) / p
            s2 = sum((x - m) ** 2 for x in dh) / (p - 1)
            a = (2 * s2 + m * m) / s2
            bb = (m * s2 + m ** 3) / s2
            for g in range(p):
                g_old, d_old = gh[g], dh[g]
                for _ in range(10000):
                    g_new = (nb * tau2 * gh[g] + d_old * gbar) / (nb * tau2 + d_old)
                    ssq = sum((Z[j, g] - g_new) ** 2 for j in r)
                    d_new = (bb + 0.5 * ssq) / (nb / 2 + a - 1)
                    done = abs(g_new - g_old) / abs(g_old) < conv and abs(d_new - d_old) / d_old < conv
                    g_old, d_old = g_new, d_new
                    if done:
                        break
                gs[g], ds[g] = g_old, d_old
        else:
            for g in range(p):
                num_g = num_d = den = 0.0
                for h in range(p):
                    if h == g:
                        continue
                    lik = 1.0
                    for j in r:
                        lik *= math.exp(-((Z[j, g] - gh[h]) ** 2) / (2 * dh[h])) / math.sqrt(2 * math.pi * dh[h])
                    num_g += lik * gh[h]
                    num_d += lik * dh[h]
                    den += lik
                gs[g], ds[g] = num_g / den, num_d / den
        for j in r:
            for g in range(p):
                out[j, g] = sd[g] * (Z[j, g] - gs[g]) / math.sqrt(ds[g]) + stand[j, g]
    return out


@pytest.fixture
def batched():
    rng = np.random.default_rng(20070101)
    n_per, p = (9, 12, 10), 7
    batch = np.repeat(np.array(["s1", "s2", "s3"]), n_per)
    n = batch.size
    C = np.column_stack([rng.normal(60, 8, n), rng.integers(0, 2, n)])
    shift = {"s1": 0.0, "s2": 1.5, "s3": -0.7}
    scale = {"s1": 1.0, "s2": 2.0, "s3": 0.6}
    Y = np.empty((n, p))
    for j in range(n):
        Y[j] = 5 + 0.03 * C[j, 0] + 0.4 * C[j, 1] + shift[batch[j]] + scale[batch[j]] * rng.standard_normal(p) \
            + rng.normal(0, 0.3, p) * np.arange(p)
    return Y, batch, C


def test_parametric_matches_published_equations(batched):
    Y, batch, _ = batched
    ours = ComBat(prior="parametric", tol=1e-13).fit_transform(Y, batch)
    ref = _reference_combat(Y, list(batch))
    np.testing.assert_allclose(ours, ref, rtol=0, atol=TOL)


def test_parametric_with_protected_covariates_matches(batched):
    Y, batch, C = batched
    ours = ComBat(prior="parametric", tol=1e-13).fit_transform(Y, batch, C)
    ref = _reference_combat(Y, list(batch), C)
    np.testing.assert_allclose(ours, ref, rtol=0, atol=TOL)


def test_nonparametric_matches_published_equations(batched):
    Y, batch, C = batched
    ours = ComBat(prior="nonparametric").fit_transform(Y, batch, C)
    ref = _reference_combat(Y, list(batch), C, prior="nonparametric")
    np.testing.assert_allclose(ours, ref, rtol=0, atol=TOL)


def test_transform_of_new_rows_uses_training_estimates(batched):
    # The same equations applied to held-out rows with the training parameters:
    # fitting on all rows and transforming a subset must equal the subset of the fit.
    Y, batch, C = batched
    cb = ComBat(tol=1e-13).fit(Y, batch, C)
    full = cb.transform(Y, batch, C)
    idx = np.array([0, 4, 11, 20, 29])
    np.testing.assert_allclose(cb.transform(Y[idx], batch[idx], C[idx]), full[idx], atol=1e-12)
