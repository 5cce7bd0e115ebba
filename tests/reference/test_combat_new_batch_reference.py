"""ComBat for a scanner absent from training, against the neuroCombat package (registry, tests only).

Reference: neuroCombat 0.2.12 (PyPI; Fortin et al., NeuroImage 2018), a general-purpose
Python ComBat. Training scanners: its ``neuroCombat`` function on the training rows gives
the grand mean, pooled variance, covariate effects and per-scanner posteriors. A new
scanner: the training standardisation is applied to its rows with neuroCombat's own
estimates (grand mean, pooled variance, and the covariate effects recovered from its
``mod.mean``), and its location/scale are estimated with neuroCombat's own functions
``fit_LS_model_and_find_priors`` and ``find_parametric_adjustments`` /
``find_non_parametric_adjustments`` / ``find_non_eb_adjustments`` on those rows alone,
then ``adjust_data_final`` maps them back. That is the out-of-sample form of ComBat:
training parameters fixed, the new batch's own empirical Bayes posteriors.

Tolerances: neuroCombat stops its parametric fixed-point iteration at a relative change
of 1e-4 (``it_sol``) and builds its design in float32, so parametric values agree to
about 1e-4 relative; the non-parametric and no-shrinkage posteriors have no iteration
and agree more tightly.
"""

import importlib

import numpy as np
import pandas as pd
import pytest

from workbench.preprocess.harmonize import ComBat

nc = importlib.import_module("neuroCombat.neuroCombat")

NEW = "scanner_new"


def _simulated(seed=11):
    """Three training scanners and one new scanner; features depend on age (protected)."""
    rng = np.random.default_rng(seed)
    sizes = {"A": 60, "B": 45, "C": 55, NEW: 40}
    shift = {"A": 0.0, "B": 1.5, "C": -0.8, NEW: 2.5}
    scale = {"A": 1.0, "B": 1.6, "C": 0.7, NEW: 1.9}
    batch = np.repeat(list(sizes), list(sizes.values()))
    n, p = batch.size, 25
    age = rng.normal(62, 9, n)
    feat_shift = rng.normal(1.0, 0.3, p)  # scanners shift features by different amounts
    X = (5 + 0.05 * age[:, None]
         + np.array([shift[b] for b in batch])[:, None] * feat_shift[None, :]
         + np.array([scale[b] for b in batch])[:, None] * rng.standard_normal((n, p)))
    return X, batch, age


def _neurocombat_new_batch(X, batch, age, eb=True, parametric=True):
    train = batch != NEW
    covars = pd.DataFrame({"scanner": batch[train], "age": age[train]})
    out = nc.neuroCombat(dat=X[train].T, covars=covars, batch_col="scanner", continuous_cols=["age"],
                         eb=eb, parametric=parametric)
    est = out["estimates"]
    grand = est["stand.mean"][:, 0]
    var_pooled = np.asarray(est["var.pooled"]).ravel()
    # covariate effect per feature, recovered exactly from the training rows' mod.mean
    beta = np.linalg.lstsq(age[train][:, None], est["mod.mean"].T, rcond=None)[0][0]
    new = ~train
    m = int(new.sum())
    mod_new = (age[new][:, None] * beta[None, :]).T
    stand_new = np.repeat(grand[:, None], m, axis=1)
    s_new = (X[new].T - stand_new - mod_new) / np.sqrt(var_pooled)[:, None]
    design = np.ones((m, 1))
    info = {"n_batch": 1, "n_sample": m, "sample_per_batch": np.array([m]), "batch_info": [list(range(m))],
            "ref_level": None}
    LS = nc.fit_LS_model_and_find_priors(s_new, design, info, False)
    if not eb:
        g, d = nc.find_non_eb_adjustments(s_new, LS, info)
    elif parametric:
        g, d = nc.find_parametric_adjustments(s_new, LS, info, False)
    else:
        g, d = nc.find_non_parametric_adjustments(s_new, LS, info, False)
    adjusted = nc.adjust_data_final(s_new.copy(), design, g, d, stand_new, mod_new, var_pooled[:, None], info,
                                    X[new].T)
    return np.asarray(g)[0], np.asarray(d)[0], np.asarray(adjusted).T, est


@pytest.mark.parametrize("prior, eb, parametric, rtol", [
    ("parametric", True, True, 1e-4),  # neuroCombat's it_sol stops at a 1e-4 relative change
    ("nonparametric", True, False, 1e-5),
    ("none", False, True, 1e-5),
])
def test_new_scanner_matches_neurocombat(prior, eb, parametric, rtol):
    X, batch, age = _simulated()
    train = batch != NEW
    g_ref, d_ref, adj_ref, est = _neurocombat_new_batch(X, batch, age, eb=eb, parametric=parametric)
    cb = ComBat(prior=prior, unseen_batch="estimate", min_new_batch=20).fit(X[train], batch[train], age[train])
    # the training side first: same standardisation as the reference
    np.testing.assert_allclose(cb.grand_mean_, est["stand.mean"][:, 0], rtol=1e-6)
    np.testing.assert_allclose(cb.var_pooled_, np.asarray(est["var.pooled"]).ravel(), rtol=1e-6)
    nb = cb.new_batches(X[~train], batch[~train], age[~train])[NEW]
    assert nb.n == 40
    np.testing.assert_allclose(nb.gamma_star, g_ref, rtol=rtol, atol=rtol * np.abs(g_ref).max())
    np.testing.assert_allclose(nb.delta_star, d_ref, rtol=rtol)
    # and the harmonised values of the new scanner's rows, on the scale of each feature's SD
    ours = cb.transform(X[~train], batch[~train], age[~train])
    sd = np.sqrt(cb.var_pooled_)
    np.testing.assert_allclose(ours / sd, adj_ref / sd, rtol=0, atol=5 * rtol)


def test_known_scanners_are_untouched_by_the_new_one():
    # Rows of training scanners get exactly the adjustment they get without any new scanner.
    X, batch, age = _simulated()
    train = batch != NEW
    cb = ComBat(unseen_batch="estimate").fit(X[train], batch[train], age[train])
    alone = cb.transform(X[train], batch[train], age[train])
    mixed = cb.transform(X, batch, age)[train]
    np.testing.assert_array_equal(alone, mixed)


@pytest.mark.parametrize("prior, eb, parametric, rtol", [("parametric", True, True, 1e-4), ("none", False, True, 1e-6)])
def test_reference_batch_matches_neurocombat_ref_batch(monkeypatch, prior, eb, parametric, rtol):
    # neuroCombat 0.2.12's ref_batch branch calls np.int, an alias numpy 2 removed; the shim
    # restores the alias for this call only (it is the built-in int)
    monkeypatch.setattr(np, "int", int, raising=False)
    X, batch, age = _simulated()
    train = batch != NEW
    X, batch, age = X[train], batch[train], age[train]
    out = nc.neuroCombat(dat=X.T, covars=pd.DataFrame({"scanner": batch, "age": age}), batch_col="scanner",
                         continuous_cols=["age"], eb=eb, parametric=parametric, ref_batch="B")
    cb = ComBat(prior=prior, reference_batch="B").fit(X, batch, age)
    ours = cb.transform(X, batch, age)
    sd = np.sqrt(cb.var_pooled_)
    np.testing.assert_allclose(cb.var_pooled_, np.asarray(out["estimates"]["var.pooled"]).ravel(), rtol=1e-6)
    np.testing.assert_allclose(ours / sd, out["data"].T / sd, rtol=0, atol=5 * rtol)
    # the reference scanner's rows are untouched; the others are moved onto its scale
    np.testing.assert_array_equal(ours[batch == "B"], X[batch == "B"])
    assert np.abs(ours[batch == "A"].mean(axis=0) - X[batch == "A"].mean(axis=0)).max() > 0.5


def test_reference_batch_must_be_a_training_batch():
    from workbench.errors import ModelError

    X, batch, age = _simulated()
    with pytest.raises(ModelError, match="reference batch 'Z' is not among the training batches"):
        ComBat(reference_batch="Z").fit(X, batch, age)
