"""Properties of the elastic-net Cox path solver (workbench.models.coxpath).

* Every path point satisfies the elastic-net stationarity (KKT) conditions of the
  penalised weighted partial likelihood (Simon N et al., J Stat Softw 2011;39(5), section 2),
  with the gradient computed here by a direct loop over events and risk sets, independent
  of the solver's cumulative sums.
* Features with penalty factor 0 are in the model at every penalty.
* A row with case weight 0 is the same as no row at all.
* The likelihood's gradient and exact Hessian (coxlik) equal central finite differences of
  the weighted log partial likelihood (tolerances 1e-6 and 1e-4 at step 1e-4).

Designs are drawn by hypothesis (seeded, repeatable profile in conftest.py): small
correlated designs with tied times (times rounded), random frequency weights and penalty
factors. Tolerances: KKT 1e-6 at solver tol 1e-14 (common practice for first-order
optimality checks of a converged fit); zero-weight equivalence 1e-8 at solver tol 1e-18.
No hypothesis deadline: the first example of a process loads the compiled solver (~0.5 s).
"""

import numpy as np
from hypothesis import given, settings
from hypothesis import strategies as st

from workbench.models.coxpath import fit_cox_path


def _design(seed, n, p, rho=0.4):
    rng = np.random.default_rng(seed)
    X = np.sqrt(rho) * rng.standard_normal((n, 1)) + np.sqrt(1 - rho) * rng.standard_normal((n, p))
    X = (X - X.mean(0)) / X.std(0)
    t = rng.exponential(np.exp(-0.7 * X[:, 0] + 0.4 * X[:, 1]))
    c = rng.exponential(2.0, n)
    time = np.round(np.minimum(t, c), 1) + 0.1  # rounding makes ties
    event = t <= c
    return rng, X, time, event


def _gradient_loop(X, time, event, w, beta):
    """(1/W) d l / d beta for the weighted Breslow likelihood, event by event."""
    eta = X @ beta
    g = np.zeros(X.shape[1])
    for i in np.flatnonzero(event & (w > 0)):
        r = time >= time[i]
        a = w[r] * np.exp(eta[r] - eta[r].max())
        g += w[i] * (X[i] - a @ X[r] / a.sum())
    return g / w.sum()


@settings(deadline=None)
@given(seed=st.integers(0, 10_000), l1_ratio=st.sampled_from([1.0, 0.6]),
       weighted=st.booleans())
def test_every_path_point_meets_the_kkt_conditions(seed, l1_ratio, weighted):
    rng, X, time, event = _design(seed, 60, 8)
    w = rng.integers(0, 4, time.size).astype(float) if weighted else np.ones(time.size)
    w[np.flatnonzero(event)[0]] = 1.0  # at least one event keeps weight
    pf = rng.choice([0.0, 0.5, 1.0, 2.0], X.shape[1])
    pf[-1] = 1.0
    path = fit_cox_path(X, time, event, weights=w, penalty_factor=pf, l1_ratio=l1_ratio,
                        n_alphas=12, alpha_min_ratio=0.05, tol=1e-14, stop_flat=False)
    pf_used = path.penalty_factor  # rescaled to sum to p
    np.testing.assert_allclose(pf_used.sum(), X.shape[1], rtol=1e-12)
    for k, alpha in enumerate(path.alphas):
        b = path.coefs[:, k]
        g = _gradient_loop(X, time, event, w, b)
        nz = b != 0
        want = alpha * pf_used[nz] * (l1_ratio * np.sign(b[nz]) + (1 - l1_ratio) * b[nz])
        np.testing.assert_allclose(g[nz], want, rtol=0, atol=1e-6)
        assert np.all(np.abs(g[~nz]) <= alpha * l1_ratio * pf_used[~nz] + 1e-6)


@settings(deadline=None)
@given(seed=st.integers(0, 10_000), l1_ratio=st.sampled_from([1.0, 0.5]))
def test_unpenalised_features_are_never_zero(seed, l1_ratio):
    rng, X, time, event = _design(seed, 80, 10)
    free = rng.choice(X.shape[1], 2, replace=False)
    pf = np.ones(X.shape[1])
    pf[free] = 0.0
    path = fit_cox_path(X, time, event, penalty_factor=pf, l1_ratio=l1_ratio, n_alphas=15)
    assert np.all(path.coefs[free] != 0)
    # and at the first penalty they are the only ones in the model
    assert np.count_nonzero(path.coefs[:, 0]) == free.size


@settings(deadline=None)
@given(seed=st.integers(0, 10_000), n_drop=st.integers(1, 20))
def test_zero_weight_rows_equal_dropping_them(seed, n_drop):
    rng, X, time, event = _design(seed, 70, 6)
    drop = rng.choice(time.size, n_drop, replace=False)
    keep = np.setdiff1d(np.arange(time.size), drop)
    if not event[keep].any():
        return
    w = np.ones(time.size)
    w[drop] = 0.0
    # the stopping rule leaves coefficient errors of about sqrt(tol / curvature): 1e-8
    # needs tol below 1e-16
    weighted = fit_cox_path(X, time, event, weights=w, l1_ratio=0.8, n_alphas=10, tol=1e-18,
                            stop_flat=False)
    dropped = fit_cox_path(X[keep], time[keep], event[keep], l1_ratio=0.8, n_alphas=10, tol=1e-18,
                           stop_flat=False)
    np.testing.assert_allclose(weighted.alphas, dropped.alphas, rtol=1e-12)
    np.testing.assert_allclose(weighted.coefs, dropped.coefs, rtol=0, atol=1e-8)


@settings(deadline=None)
@given(seed=st.integers(0, 10_000), ties=st.sampled_from(["breslow", "efron"]))
def test_hessian_and_gradient_equal_finite_differences_of_the_likelihood(seed, ties):
    # the solver's Newton steps rest on these (central differences: common practice)
    from workbench.models.coxlik import (
        gradient_and_weights,
        hessian_block,
        hessian_columns,
        likelihood_pieces,
        make_risk_sets,
        weighted_loglik,
    )

    rng, X, time, event = _design(seed, 40, 4)
    w = rng.integers(1, 4, time.size).astype(float)
    b = rng.normal(0, 0.3, X.shape[1])
    rs = make_risk_sets(time, event, w, ties)
    Xs = X[rs.order]
    H = hessian_block(rs, Xs @ b, Xs)
    resid = gradient_and_weights(rs, Xs @ b)[0]
    h = 1e-4
    E = np.eye(X.shape[1]) * h
    ll = [[weighted_loglik(X @ (b + s * E[i] + u * E[j]), time, event, w, ties) for s, u in
           ((1, 1), (1, -1), (-1, 1), (-1, -1))] for i in range(4) for j in range(4)]
    num_H = np.array([-(a - c - d + e) / (4 * h * h) for a, c, d, e in ll]).reshape(4, 4)
    num_g = np.array([(weighted_loglik(X @ (b + E[i]), time, event, w, ties)
                       - weighted_loglik(X @ (b - E[i]), time, event, w, ties)) / (2 * h) for i in range(4)])
    np.testing.assert_allclose(Xs.T @ resid, num_g, rtol=1e-6, atol=1e-6)
    np.testing.assert_allclose(H, num_H, rtol=1e-4, atol=1e-4)
    # the solver's second route to the same matrix (columns through H_eta X, then X' M)
    cols = hessian_columns(rs, likelihood_pieces(rs, Xs @ b), np.asfortranarray(Xs), np.arange(4))
    np.testing.assert_allclose(cols, H, rtol=1e-10, atol=1e-10)
