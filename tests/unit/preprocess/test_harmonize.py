"""Unit tests of ComBat harmonisation (workbench.preprocess.harmonize)."""

import re
import warnings

import numpy as np
import pandas as pd
import pytest

from workbench.errors import DataQualityWarning, ModelError, NotFittedError
from workbench.preprocess.harmonize import ComBat

AGE_SLOPE = 0.1  # planted effect of the protected covariate on every feature


@pytest.fixture
def shifted():
    """Three scanners with planted additive and multiplicative effects, one protected covariate."""
    rng = np.random.default_rng(7)
    batch = np.repeat(np.array(["GE", "Philips", "Siemens"]), [60, 50, 70])
    n, p = batch.size, 30
    # covariate distribution differs between batches, but is not confounded with them
    age = rng.normal(60, 10, n) + np.where(batch == "Philips", 15.0, 0.0)
    shift = pd.Series({"GE": 0.0, "Philips": 2.0, "Siemens": -1.0})[batch].to_numpy()
    scale = pd.Series({"GE": 1.0, "Philips": 1.8, "Siemens": 0.7})[batch].to_numpy()
    X = 10 + AGE_SLOPE * age[:, None] + shift[:, None] + scale[:, None] * rng.standard_normal((n, p))
    cols = [f"glcm_{j}" for j in range(p)]
    return pd.DataFrame(X, columns=cols, index=[f"P{i:03d}" for i in range(n)]), batch, age


def test_planted_batch_shift_is_removed(shifted):
    X, batch, age = shifted
    before = X.groupby(batch).mean()
    out = ComBat().fit_transform(X, batch, age)
    resid = out.to_numpy() - AGE_SLOPE * age[:, None]  # compare batches at equal age
    means = pd.DataFrame(resid).groupby(batch).mean()
    sds = pd.DataFrame(out.to_numpy()).groupby(batch).std()
    assert (before.max() - before.min()).min() > 2.0  # the shift was really there
    assert (means.max() - means.min()).max() < 0.5  # location differences gone (sampling noise ~0.2)
    assert (sds.max() / sds.min()).max() < 1.6  # scale ratio was 1.8 / 0.7 = 2.6


def test_protected_covariate_effect_is_preserved(shifted):
    X, batch, age = shifted

    def slope(M):
        D = np.column_stack([np.ones(age.size), age])
        return np.linalg.lstsq(D, M, rcond=None)[0][-1].mean()

    assert abs(slope(X.to_numpy()) - AGE_SLOPE) > 0.03  # before: confounded by the Philips shift
    protected = slope(ComBat().fit_transform(X, batch, age).to_numpy())
    unprotected = slope(ComBat().fit_transform(X, batch).to_numpy())
    assert abs(protected - AGE_SLOPE) < 0.01
    # without protection the older Philips patients' age effect is removed as "scanner"
    assert abs(unprotected - AGE_SLOPE) > 0.02


def test_unseen_batch_error_names_batch_rows_and_known(shifted):
    X, batch, age = shifted
    cb = ComBat().fit(X.iloc[:150], batch[:150], age[:150])  # Siemens rows 110..149 only partly
    new = X.iloc[[0, 1]]
    with pytest.raises(ModelError) as err:
        cb.transform(new, np.array(["GE", "Canon"]), age[:2])
    msg = str(err.value)
    assert "Canon" in msg and "P001" in msg
    assert re.search(r"known batches are \['GE', 'Philips', 'Siemens'\]", msg)
    assert "unseen_batch='estimate'" in msg and "'reference'" in msg


def test_unseen_batch_reference_fallback_leaves_rows_unadjusted(shifted):
    X, batch, age = shifted
    cb = ComBat(unseen_batch="reference").fit(X, batch, age)
    with pytest.warns(DataQualityWarning, match="Canon"):
        out = cb.transform(X.iloc[:3], np.array(["Canon", "GE", "Canon"]), age[:3])
    np.testing.assert_allclose(out.iloc[[0, 2]].to_numpy(), X.iloc[[0, 2]].to_numpy())
    known = cb.transform(X.iloc[[1]], np.array(["GE"]), age[[1]])
    np.testing.assert_allclose(out.iloc[[1]].to_numpy(), known.to_numpy())


def test_single_row_batch_is_a_clear_error(shifted):
    X, batch, _ = shifted
    b = batch.copy()
    b[5] = "Toshiba"
    with pytest.raises(ModelError, match=r"\['Toshiba'\] have a single row"):
        ComBat().fit(X, b)


def test_confounded_covariate_is_a_clear_error(shifted):
    X, batch, _ = shifted
    with pytest.raises(ModelError, match="confounded with batch"):
        ComBat().fit(X, batch, (batch == "GE").astype(float))


@pytest.mark.parametrize("prior", ["parametric", "nonparametric", "none"])
def test_zero_variance_within_a_batch_gives_no_nan(shifted, prior):
    X, batch, _ = shifted
    X = X.copy()
    X.loc[batch == "GE", "glcm_0"] = 3.0  # constant inside one scanner only
    X["shape_flat"] = 1.0  # constant everywhere
    out = ComBat(prior=prior).fit_transform(X, batch)
    assert np.isfinite(out.to_numpy()).all()
    np.testing.assert_array_equal(out["shape_flat"], 1.0)


def test_transform_is_row_wise_and_ignores_other_rows(shifted):
    X, batch, age = shifted
    cb = ComBat().fit(X.iloc[:120], batch[:120], age[:120])
    a = cb.transform(X.iloc[120:], batch[120:], age[120:])
    X2 = X.copy()
    X2.iloc[150:] *= 100  # mutate other evaluation rows
    b = cb.transform(X2.iloc[120:150], batch[120:150], age[120:150])
    np.testing.assert_array_equal(a.iloc[:30].to_numpy(), b.to_numpy())


def test_needs_fit_and_covariates_consistently(shifted):
    X, batch, age = shifted
    with pytest.raises(NotFittedError):
        ComBat().transform(X, batch)
    cb = ComBat().fit(X, batch, age)
    with pytest.raises(ModelError, match="protected covariate"):
        cb.transform(X, batch)


def test_empirical_bayes_shrinks_towards_the_batch_mean(shifted):
    X, batch, _ = shifted
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        cb = ComBat().fit(X, batch)
    # posterior locations lie between the per-feature estimate and the across-feature mean
    gh, gs = cb.gamma_hat_, cb.gamma_star_
    gbar = gh.mean(axis=1, keepdims=True)
    assert np.all(np.abs(gs - gbar) <= np.abs(gh - gbar) + 1e-12)


def test_estimate_policy_harmonises_a_new_scanner_and_reports_it(shifted):
    X, batch, age = shifted
    train = batch != "Siemens"  # Siemens (70 rows, shift -1, scale 0.7) plays the new scanner
    cb = ComBat(unseen_batch="estimate").fit(X[train], batch[train], age[train])
    fresh = cb.new_batches(X, batch, age)
    assert list(fresh) == ["Siemens"] and fresh["Siemens"].n == 70
    # shift -1 and scale 0.7 were planted (feature SD 1 within a scanner)
    assert fresh["Siemens"].scale_ratio == pytest.approx(0.7 / np.sqrt(cb.var_pooled_).mean(), rel=0.2)
    out = ComBat(unseen_batch="estimate").fit(X[train], batch[train], age[train]).transform(X, batch, age)
    resid = out.to_numpy() - AGE_SLOPE * age[:, None]
    means = pd.DataFrame(resid).groupby(batch).mean()
    assert (means.max() - means.min()).max() < 0.6  # planted location differences of 1 to 3 are gone
    # "reference" keeps the new scanner's rows as they were
    with pytest.warns(DataQualityWarning, match="unseen_batch='reference'"):
        ref = ComBat(unseen_batch="reference").fit(X[train], batch[train], age[train]).transform(X, batch, age)
    np.testing.assert_array_equal(ref[~train].to_numpy(), X[~train].to_numpy())


def test_min_new_batch_is_checked():
    with pytest.raises(ModelError, match="at least 3 rows"):
        ComBat(min_new_batch=2).fit(np.random.default_rng(0).normal(size=(10, 3)), ["a"] * 5 + ["b"] * 5)


def test_study_keys_for_a_new_scanner_are_checked(tmp_path):
    from dataclasses import replace

    from workbench.errors import SpecError
    from workbench.study import read_study, write_study

    demo = read_study(__import__("pathlib").Path(__file__).parents[3] / "demo_cohort" / "study.toml")
    assert demo.imaging.harmonise.unseen_batch == "estimate" and demo.imaging.harmonise.min_new_batch == 20
    h = demo.imaging.harmonise
    with pytest.raises(SpecError, match="min_new_batch = 2"):
        replace(demo, imaging=replace(demo.imaging, harmonise=replace(h, min_new_batch=2)))
    with pytest.raises(SpecError, match="unseen_batch"):
        replace(demo, imaging=replace(demo.imaging, harmonise=replace(h, unseen_batch="guess")))
    spec = replace(demo, imaging=replace(demo.imaging, harmonise=replace(h, min_new_batch=35,
                                                                        empirical_bayes="none")))
    back = read_study(write_study(spec, tmp_path / "s.toml"))
    assert back.imaging.harmonise == spec.imaging.harmonise


def test_reference_scanner_key_round_trips_and_is_checked_against_the_cohort(tmp_path):
    from dataclasses import replace
    from pathlib import Path

    from workbench.errors import SpecError
    from workbench.prepare import prepare_cohort
    from workbench.study import read_study, write_study
    from workbench.workflow import check_reference_scanner

    demo = read_study(Path(__file__).parents[3] / "demo_cohort" / "study.toml")
    h = demo.imaging.harmonise
    spec = replace(demo, imaging=replace(demo.imaging, harmonise=replace(h, reference_scanner="scanner_B")))
    assert read_study(write_study(spec, tmp_path / "s.toml")).imaging.harmonise.reference_scanner == "scanner_B"
    cohort = prepare_cohort(spec).cohort
    check_reference_scanner(spec, cohort)  # a development scanner: fine
    typo = replace(spec, imaging=replace(spec.imaging, harmonise=replace(h, reference_scanner="scaner_B")))
    with pytest.raises(SpecError, match=r"'scaner_B' is not a scanner of the development cohort .*did you mean 'scanner_B'"):
        check_reference_scanner(typo, cohort)


def test_new_scanner_block_needs_combat_and_a_harmonising_model():
    from dataclasses import replace

    from workbench.study import read_study
    from workbench.validation.new_scanner import new_scanner_block

    class NoCombat:
        def harmonisation_inputs(self, cohort):
            return None, None, None

    spec = read_study(__import__("pathlib").Path(__file__).parents[3] / "demo_cohort" / "study.toml")
    cohort = type("C", (), {"batch": np.array(["a"])})()
    plain = replace(spec, imaging=replace(spec.imaging, harmonise=replace(spec.imaging.harmonise, method="none")))
    assert new_scanner_block(plain, {"m": NoCombat()}, cohort) is None  # no ComBat step: nothing to record
    assert new_scanner_block(spec, {"m": NoCombat()}, type("C", (), {"batch": None})()) is None  # no scanners
    block = new_scanner_block(spec, {"m": NoCombat()}, cohort)  # a model without a ComBat step adjusts nothing
    assert block == {"policy": spec.imaging.harmonise.unseen_batch,
                     "min_new_batch": spec.imaging.harmonise.min_new_batch, "scanners": [], "calibration": []}
