"""Tests of the invented-cohort simulator and of the committed demo files.

These check the generator against its own stated truth (simulation checks) and,
where a number is computed, against scikit-survival and lifelines as independent
general-purpose implementations.
"""

from __future__ import annotations

import importlib.util
import json
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from lifelines import CoxPHFitter, KaplanMeierFitter
from sksurv.metrics import concordance_index_censored

from workbench.errors import SpecError
from workbench.simulate import (
    EXTERNAL_HOSPITALS,
    NETWORK_HOSPITALS,
    HospitalProfile,
    simulate_cohort,
)

DEMO = Path(__file__).resolve().parents[2] / "demo_cohort"
CLINICAL_COLUMNS = ["patient_id", "hospital", "age", "sex", "ecog", "stage", "histology",
                    "cea_ng_ml", "treatment_intent", "os_months", "status"]
COMPETING_COLUMNS = ["followup_cr_months", "death_cause"]
FAMILY_PREFIXES = ("morph_", "stat_", "ih_", "cm_", "rlm_", "szm_", "ngt_")


def _load_generator():
    spec = importlib.util.spec_from_file_location("demo_generate", DEMO / "generate.py")
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module


def _harrell(clinical: pd.DataFrame, risk) -> float:
    # scikit-survival's Harrell C: an implementation independent of the one the simulator uses.
    return concordance_index_censored(clinical["status"].to_numpy() == "dead",
                                      clinical["os_months"].to_numpy(float), np.asarray(risk))[0]


def _imaging_lp_from_table(imaging: pd.DataFrame, truth: dict, undo_shift: bool = True) -> np.ndarray:
    """Rebuild the true imaging linear predictor from a table and the truth alone."""
    lp = np.zeros(len(imaging))
    for name, p in truth["model"]["imaging"]["prognostic_features"].items():
        x = imaging[name].to_numpy(float)
        log = p["z"].startswith("(ln")
        z_obs = ((np.log(x) if log else x) - p["centre"]) / p["scale"]
        z = z_obs.copy()
        family = name.split("_")[0]
        if undo_shift and name in truth["scanner_sensitivity"]:
            sens = truth["scanner_sensitivity"][name]
            for scanner, shifts in truth["scanner_shifts"].items():
                rows = imaging["scanner"].to_numpy() == scanner
                s = shifts[family]
                z[rows] = (z_obs[rows] - s["location_sd"] * sens) / np.exp(s["log_scale"] * sens)
        lp += p["log_hazard_ratio_per_sd"] * z
    return lp


@pytest.fixture(scope="module")
def cohort():
    return simulate_cohort(2000, random_state=11)


@pytest.fixture(scope="module")
def committed():
    files = {n: DEMO / n for n in ("clinical.csv", "imaging.csv", "external_clinical.csv",
                                   "external_imaging.csv", "truth.json")}
    return {
        "clinical": pd.read_csv(files["clinical.csv"]),
        "imaging": pd.read_csv(files["imaging.csv"]),
        "external_clinical": pd.read_csv(files["external_clinical.csv"]),
        "external_imaging": pd.read_csv(files["external_imaging.csv"]),
        "truth": json.loads(files["truth.json"].read_text()),
    }


# ----------------------------------------------------------------- determinism


def test_same_seed_same_cohort_and_different_seed_differs():
    a = simulate_cohort(300, random_state=5, n_features=60)
    b = simulate_cohort(300, random_state=5, n_features=60)
    c = simulate_cohort(300, random_state=6, n_features=60)
    pd.testing.assert_frame_equal(a.clinical, b.clinical)
    pd.testing.assert_frame_equal(a.imaging, b.imaging)
    pd.testing.assert_frame_equal(a.linear_predictors, b.linear_predictors)
    assert a.truth == b.truth
    assert not a.clinical["os_months"].equals(c.clinical["os_months"])
    assert not a.imaging["morph_volume_cc"].equals(c.imaging["morph_volume_cc"])
    # The design seed, not the patient seed, fixes the world: same model either way.
    assert a.truth["model"] == c.truth["model"]


def test_generator_argument_is_accepted():
    rng = np.random.default_rng(3)
    sim = simulate_cohort(50, random_state=rng, n_features=60)
    assert len(sim.clinical) == 50 and sim.truth["cohort"]["seed"] is None


# ------------------------------------------------------------ columns and types


def test_clinical_columns_and_values(cohort):
    c = cohort.clinical
    assert list(c.columns) == CLINICAL_COLUMNS
    assert c["patient_id"].is_unique
    assert c["patient_id"].str.fullmatch(r"(HB|NG|MB)-\d{4}").all()
    assert set(c["hospital"]) == {"Harbourside", "Northgate", "Millbrook"}
    assert np.allclose(c["age"], c["age"].round(1)) and c["age"].between(18, 100).all()
    assert set(c["sex"]) == {"female", "male"}
    assert set(c["ecog"].dropna().astype(int)) == {0, 1, 2}
    assert 0.01 < c["ecog"].isna().mean() < 0.06  # about 3% missing
    assert set(c["stage"]) == {"I", "II", "III", "IV"}
    assert set(c["histology"]) == {"adenocarcinoma", "squamous", "other"}
    assert set(c["treatment_intent"]) == {"curative", "palliative"}
    assert set(c["status"]) == {"dead", "alive"}
    assert (c["os_months"] > 0).all() and c["os_months"].max() <= 72.0
    # Curative intent should fall steeply from stage I to stage IV.
    cur = (c["treatment_intent"] == "curative").groupby(c["stage"]).mean()
    assert cur["I"] > 0.75 and cur["IV"] < 0.2
    assert cohort.outcome().dtype.names == ("event", "time")


def test_imaging_columns(cohort):
    im = cohort.imaging
    assert list(im.columns[:2]) == ["patient_id", "scanner"]
    feats = im.columns[2:]
    assert 200 <= len(feats) <= 300
    assert all(f.startswith(FAMILY_PREFIXES) for f in feats)
    assert {f.split("_")[0] + "_" for f in feats} == set(FAMILY_PREFIXES)
    assert (im["patient_id"].to_numpy() == cohort.clinical["patient_id"].to_numpy()).all()
    assert not im.isna().any().any()
    assert all(pd.api.types.is_float_dtype(im[f]) for f in feats)
    assert (im["morph_volume_cc"] > 0).all()
    # Log-normal volume that grows with stage.
    vol = np.log(im["morph_volume_cc"]).groupby(cohort.clinical["stage"]).median()
    assert vol["I"] < vol["II"] < vol["III"] < vol["IV"]
    # Scanners correlate with hospital but do not coincide with it.
    tab = pd.crosstab(cohort.clinical["hospital"], im["scanner"])
    assert (tab > 0).sum(axis=1).min() >= 2 and tab.shape[1] == 3


def test_cea_detection_limit_and_missing_shares():
    c = simulate_cohort(4000, random_state=21, n_features=60).clinical["cea_ng_ml"]
    below = (c == "<0.5").mean()
    assert 0.07 < below < 0.13, below  # about 10% below the detection limit
    assert 0.025 < c.isna().mean() < 0.055  # about 4% blank
    measured = pd.to_numeric(c[c.notna() & (c != "<0.5")], errors="raise")
    assert (measured >= 0.5).all()
    # Right-skewed: the mean is well above the median.
    assert measured.mean() > 1.5 * measured.median()


def test_feature_structure():
    # One scanner only, so batch shifts do not blur the correlation structure.
    one = [HospitalProfile("Harbourside", "HB", 1.0, {"scanner_A": 1.0})]
    sim = simulate_cohort(3000, random_state=2, hospitals=one)
    x = sim.imaging.iloc[:, 2:]
    r = x.corr(method="spearman").abs()
    fam = np.array([f.split("_")[0] for f in x.columns])
    for f in ("stat", "ih", "cm", "rlm", "szm", "ngt"):
        block = r.values[np.ix_(fam == f, fam == f)]
        med = np.median(block[np.triu_indices(block.shape[0], 1)])
        assert 0.6 <= med <= 0.95, (f, med)
    assert (r["morph_volume_cc"].drop("morph_volume_cc") > 0.5).sum() >= 10
    for a, b in sim.truth["model"]["near_duplicate_pairs"]:
        assert np.corrcoef(x[a], x[b])[0, 1] > 0.98, (a, b)
    for name in sim.truth["model"]["near_constant_features"]:
        assert x[name].value_counts(normalize=True).iloc[0] > 0.93, name
    prog = sim.truth["model"]["imaging"]["prognostic_features"]
    assert 4 <= len(prog) <= 6 and "morph_volume_cc" in prog
    assert sum(n.startswith(("cm_", "rlm_", "szm_", "ngt_")) for n in prog) >= 2


# ---------------------------------------------------------------------- truth


def test_truth_rebuilds_the_linear_predictors(cohort):
    t = cohort.truth
    lp_img = _imaging_lp_from_table(cohort.imaging, t)
    assert np.allclose(lp_img, cohort.linear_predictors["lp_imaging"], atol=1e-8)
    # Clinical LP from the table where nothing is hidden by rounding, censoring of the
    # assay or missingness; CEA >= 1 keeps the 0.1 ng/mL rounding error negligible.
    c = cohort.clinical
    cea = pd.to_numeric(c["cea_ng_ml"], errors="coerce")
    ok = c["ecog"].notna().to_numpy() & (cea >= 1).to_numpy()
    b = t["model"]["clinical_log_hazard_ratios"]
    ecog = c["ecog"].astype(float).to_numpy()
    lp = (b["age_per_10_years"] * (c["age"] - 65) / 10 + b["male"] * (c["sex"] == "male")
          + b["ecog_1"] * (ecog == 1) + b["ecog_2"] * (ecog == 2)
          + c["stage"].map({"I": 0, "II": b["stage_II"], "III": b["stage_III"], "IV": b["stage_IV"]})
          + b["cea_per_doubling"] * np.log2(cea / 5)
          + c["histology"].map({"adenocarcinoma": 0, "squamous": b["histology_squamous"],
                                "other": b["histology_other"]})
          + b["palliative_intent"] * (c["treatment_intent"] == "palliative"))
    diff = np.abs(lp.to_numpy()[ok] - cohort.linear_predictors["lp_clinical"].to_numpy()[ok])
    assert ok.sum() > 1000 and diff.max() < 0.01


def test_hazard_follows_the_stated_linear_predictors():
    # A Cox fit (lifelines) on the true linear predictors should recover unit coefficients.
    sim = simulate_cohort(8000, random_state=4, n_features=60)
    df = sim.linear_predictors[["lp_clinical", "lp_imaging"]].assign(
        T=sim.clinical["os_months"], E=(sim.clinical["status"] == "dead").astype(int))
    fit = CoxPHFitter().fit(df, "T", "E")
    assert np.allclose(fit.params_.to_numpy(), 1.0, atol=0.08), fit.params_


def test_noise_only_removes_the_imaging_association():
    big = simulate_cohort(10000, random_state=8, noise_only=True)
    c = big.clinical
    assert (big.linear_predictors["lp_imaging"] == 0).all()
    # The signature the default model would use, read off the noise-only table.
    default_truth = simulate_cohort(10, random_state=0).truth
    lp = _imaging_lp_from_table(big.imaging, default_truth)
    # At n = 10000 the standard error of C is about 0.004, so 0.02 is about five of them.
    assert abs(_harrell(c, lp) - 0.5) < 0.02
    assert abs(_harrell(c, np.log(big.imaging["morph_volume_cc"])) - 0.5) < 0.02
    stage = c["stage"].map({"I": 1, "II": 2, "III": 3, "IV": 4})
    assert abs(np.corrcoef(stage, np.log(big.imaging["morph_volume_cc"]))[0, 1]) < 0.04
    # The same read-out on an informative cohort is strongly prognostic.
    info = simulate_cohort(3000, random_state=8)
    assert _harrell(info.clinical, _imaging_lp_from_table(info.imaging, info.truth)) > 0.65


def test_scanner_shifts_hurt_and_per_scanner_scaling_helps(cohort):
    true = cohort.linear_predictors["lp_imaging"].to_numpy()
    naive = _imaging_lp_from_table(cohort.imaging, cohort.truth, undo_shift=False)
    feats = list(cohort.truth["model"]["imaging"]["prognostic_features"])
    scaled = cohort.imaging[["scanner", *feats]].copy()
    scaled["morph_volume_cc"] = np.log(scaled["morph_volume_cc"])
    if "ngt_coarseness_fbn32" in feats:
        scaled["ngt_coarseness_fbn32"] = np.log(scaled["ngt_coarseness_fbn32"])
    z = scaled.groupby("scanner")[feats].transform(lambda s: (s - s.mean()) / s.std())
    betas = [cohort.truth["model"]["imaging"]["prognostic_features"][f]["log_hazard_ratio_per_sd"]
             for f in feats]
    harmonised = z.to_numpy() @ np.array(betas)
    assert np.corrcoef(naive, true)[0, 1] < 0.95
    assert np.corrcoef(harmonised, true)[0, 1] > np.corrcoef(naive, true)[0, 1] + 0.02


def test_bad_arguments_raise_clear_errors():
    with pytest.raises(SpecError, match="n_features"):
        simulate_cohort(10, random_state=0, n_features=5)
    twins = [HospitalProfile("A", "XX"), HospitalProfile("B", "XX")]
    with pytest.raises(SpecError, match="codes must be unique"):
        simulate_cohort(10, random_state=0, hospitals=twins)
    with pytest.raises(SpecError, match="not in the cohort"):
        simulate_cohort(10, random_state=0, scanner_mix={"Nowhere": {"scanner_A": 1.0}})
    with pytest.raises(SpecError, match="scanner_mix"):
        HospitalProfile("A", "AA", scanner_mix={})


def test_scanner_mix_override():
    sim = simulate_cohort(200, random_state=1, n_features=60,
                          scanner_mix={"Harbourside": {"scanner_C": 1.0}})
    rows = sim.clinical["hospital"] == "Harbourside"
    assert (sim.imaging.loc[rows, "scanner"] == "scanner_C").all()


# ---------------------------------------------------------- committed demo files


def test_committed_files_equal_a_fresh_regeneration():
    fresh = _load_generator().build_files()
    for name, text in fresh.items():
        on_disk = (DEMO / name).read_text(encoding="utf-8")
        assert on_disk == text, f"demo_cohort/{name} differs from a fresh run of generate.py"


def test_committed_training_cohort_meets_its_targets(committed):
    gen = _load_generator()
    c, truth = committed["clinical"], committed["truth"]
    assert len(c) == gen.N_TRAINING and list(c.columns) == CLINICAL_COLUMNS + COMPETING_COLUMNS
    sim = simulate_cohort(gen.N_TRAINING, random_state=gen.TRAINING_SEED, hospitals=NETWORK_HOSPITALS)
    lps = sim.linear_predictors
    assert (lps["patient_id"].to_numpy() == c["patient_id"].to_numpy()).all()
    c_clin = _harrell(c, lps["lp_clinical"])
    c_both = _harrell(c, lps["lp_clinical"] + lps["lp_imaging"])
    assert 0.65 <= c_clin <= 0.70 and 0.73 <= c_both <= 0.78, (c_clin, c_both)
    stored = truth["cohorts"]["training"]["c_index"]
    assert stored["clinical_lp"] == pytest.approx(c_clin, abs=1e-4)
    assert stored["clinical_plus_imaging_lp"] == pytest.approx(c_both, abs=1e-4)
    dead = c["status"] == "dead"
    assert 0.55 <= dead.mean() <= 0.70
    median = KaplanMeierFitter().fit(c["os_months"], dead).median_survival_time_
    assert 18 <= median <= 30
    # The committed "<0.5" values parse to about the stated share.
    assert 0.05 < (c["cea_ng_ml"].astype(str) == "<0.5").mean() < 0.15


def test_committed_external_cohort(committed):
    ec, ei = committed["external_clinical"], committed["external_imaging"]
    ti = committed["imaging"]
    assert set(ec["hospital"]) == {EXTERNAL_HOSPITALS[0].name}
    assert not set(ec["patient_id"]) & set(committed["clinical"]["patient_id"])
    assert list(ei.columns) == list(ti.columns)
    share_d = (ei["scanner"] == "scanner_D").mean()
    assert 0.35 < share_d < 0.65 and "scanner_D" not in set(ti["scanner"])
    assert set(committed["truth"]["scanner_shifts"]) == {"scanner_A", "scanner_B", "scanner_C",
                                                         "scanner_D"}


def test_committed_competing_columns_leave_the_earlier_columns_unchanged(committed):
    # The competing-death columns come from their own stream: the earlier columns are the
    # simulator's table written exactly as before the competing columns existed.
    gen = _load_generator()
    sim = simulate_cohort(gen.N_TRAINING, random_state=gen.TRAINING_SEED, hospitals=NETWORK_HOSPITALS)
    before = gen._csv(sim.clinical, "%.1f").splitlines()
    after = (gen.HERE / "clinical.csv").read_text(encoding="utf-8").splitlines()
    assert len(before) == len(after)
    assert all(a.rsplit(",", 2)[0] == b for a, b in zip(after, before, strict=True))
    c = committed["clinical"]
    assert set(c["death_cause"]) == {"cancer", "other", "alive"}
    cancer = c["death_cause"] == "cancer"
    # a cancer death is the death of the single-cause columns, at the same time
    assert (c.loc[cancer, "status"] == "dead").all()
    assert (c.loc[cancer, "followup_cr_months"] == c.loc[cancer, "os_months"]).all()
    assert (c["followup_cr_months"] <= c["os_months"]).all()
    counts = committed["truth"]["competing"]["cohorts"]["training"]["counts"]
    assert counts == c["death_cause"].value_counts().to_dict()
    # other-cause deaths depend on age (truth: log HR 0.6 per 10 years), not on stage directly
    other = c["death_cause"] == "other"
    assert c.loc[other, "age"].mean() > c.loc[~other, "age"].mean() + 3
