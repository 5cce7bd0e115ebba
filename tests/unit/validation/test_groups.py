"""Per-centre performance (leave-one-centre-out and external) with random-effects pooling.

Data: GBSG2 (Schumacher et al., J Clin Oncol 1994; `sksurv.datasets.load_gbsg2`) with
four invented "centres" assigned at random (seeded); the held-out-centre numbers are
checked against a direct computation with the centre's own censoring weights
(scikit-survival's Brier score with survival_train = the held-out centre).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from workbench.cohort import Cohort, make_outcome
from workbench.models.cox import ClinicalCox
from workbench.preprocess.clinical import PredictorSpec
from workbench.validation.groups import loco_groups
from workbench.validation.intervals import metric_range
from workbench.validation.meta import random_effects

H = [730.0, 1095.0]
SPECS = (PredictorSpec("pnodes"), PredictorSpec("tgrade", kind="categorical", reference="I"))


@pytest.fixture(scope="module")
def cohort():
    from sksurv.datasets import load_gbsg2

    X, y = load_gbsg2()
    X = X.reset_index(drop=True)
    # censorings that share a time with an event moved by half a day, so that G(T) = G(T-)
    clash = ~y["cens"] & np.isin(y["time"], y["time"][y["cens"]])
    y["time"] = np.where(clash, y["time"] + 0.5, y["time"])
    clin = pd.DataFrame({c: X[c].astype(str) if X[c].dtype.name == "category" else X[c] for c in X.columns})
    centre = np.random.default_rng(4).choice(np.array(["c1", "c2", "c3", "c4"]), len(X))
    return Cohort(ids=np.array([f"G{i}" for i in range(len(X))]), y=make_outcome(y["time"], y["cens"]),
                  clinical=clin, features=pd.DataFrame(index=range(len(X))), time_unit="days", centre=centre)


@pytest.fixture(scope="module")
def block(cohort):
    return loco_groups({"cox": ClinicalCox(SPECS, name="cox")}, cohort, H, replicates=25, entropy=3)


def test_each_held_out_centre_uses_its_own_weights(cohort, block):
    from sksurv.metrics import brier_score as sk_brier

    assert block.levels == ("c1", "c2", "c3", "c4")
    for lev in block.levels:
        test = cohort.take(np.flatnonzero(cohort.centre == lev))
        train = cohort.take(np.flatnonzero(cohort.centre != lev))
        m = ClinicalCox(SPECS, name="cox").fit(train)
        surv = m.predict_survival(test, H).probs
        ys = np.array(list(zip(test.y["event"], test.y["time"], strict=True)),
                      dtype=[("e", bool), ("t", float)])
        _, ref = sk_brier(ys, ys, surv, H)
        e = block.estimates["cox"][lev]
        assert e["brier@730"].estimate == pytest.approx(ref[0], abs=1e-12)
        assert e["brier@1095"].estimate == pytest.approx(ref[1], abs=1e-12)
        assert e["brier@730"].ci_lower < e["brier@730"].estimate < e["brier@730"].ci_upper
        assert block.n[lev] == test.n and e["harrell_c"].n_used == 25


def test_pooling_reproduces_the_meta_analysis_of_the_per_centre_values(block):
    per = block.estimates["cox"]
    vals = [per[lev]["harrell_c"].estimate for lev in block.levels]
    ses = [per[lev]["harrell_c"].se_pooling_scale for lev in block.levels]
    ref = random_effects(vals, ses, scale="logit")
    got = block.pooled["cox"]["harrell_c"]
    assert got.estimate == pytest.approx(ref.estimate, abs=1e-12) and got.k == 4
    assert got.pi_lower <= got.ci_lower < got.estimate < got.ci_upper <= got.pi_upper
    assert 0.55 < got.estimate < 0.8
    assert "oe_ratio@1095" in block.pooled["cox"] and block.pooled["cox"]["oe_ratio@1095"].scale == "log"


def test_external_validation_records_the_censoring_model_and_groups(cohort):
    from dataclasses import replace

    from workbench.validation.external import validate_external

    dev = cohort.take(np.arange(0, 400))
    ext = cohort.take(np.arange(400, cohort.n))
    fitted = {"cox": ClinicalCox(SPECS, name="cox").fit(dev)}
    # centres with very different follow-up: administrative censoring at 800 days in c1
    t = ext.y["time"].copy()
    e = ext.y["event"].copy()
    short = ext.centre == "c1"
    e = np.where(short & (t > 800), False, e)
    t = np.where(short, np.minimum(t, 800.0), t)
    ext2 = replace(ext, y=make_outcome(t, e))
    res = validate_external(fitted, ext2, [365.0, 730.0], replicates=4, random_state=1, calibration=False)
    assert res.censoring.method == "km_by_centre" and res.censoring.p_value < 0.05
    assert res.settings["censoring"] == "km_by_centre"
    assert set(res.groups) == {"centre"} and res.groups["centre"].levels == ("c1", "c2", "c3", "c4")
    cox = validate_external(fitted, ext2, [365.0, 730.0], replicates=4, random_state=1, calibration=False,
                            censoring="cox", by_group=False)
    assert cox.censoring.method == "cox" and cox.groups == {}
    b1, b2 = res.apparent["cox"].brier, cox.apparent["cox"].brier
    assert np.all(np.isfinite(b2)) and np.all(np.abs(b1 - b2) < 0.02)  # two consistent weightings agree roughly
    # the external AUC figure uses the weights of the table
    from types import SimpleNamespace

    from workbench.figures import td_auc_by_model
    from workbench.report.figureset import external_censoring

    risks = {"cox": fitted["cox"].predict_risk(ext2)}
    cens = external_censoring(SimpleNamespace(external=res), ext2, risks)
    fig_auc = td_auc_by_model(ext2.y, ext2.y, risks, [365.0, 730.0], censoring=cens)["cox"].auc
    np.testing.assert_allclose(fig_auc, res.apparent["cox"].auc, rtol=0, atol=1e-12)


@pytest.mark.slow  # one small study run with leave-one-centre-out: about 15 s
def test_by_centre_study_writes_per_centre_block_with_pooling(small_study_file, tmp_path):
    import json

    from workbench.cli import main

    study = tmp_path / "study.toml"
    text = small_study_file.read_text().replace('method = "bootstrap"', 'method = "by_centre"')
    text = text.replace('features = "imaging.csv"', f'features = "{small_study_file.parent / "imaging.csv"}"')
    text = text.replace('clinical = "clinical.csv"', f'clinical = "{small_study_file.parent / "clinical.csv"}"')
    study.write_text(text)
    assert main(["run", str(study), "--out", str(tmp_path / "out"), "--quiet", "--no-report", "--no-figures"]) == 0
    d = json.loads((tmp_path / "out" / "results.json").read_text())
    block = d["validation"]["by_group"]["centre"]
    assert len(block["levels"]) >= 3 and block["censoring"] == "km"
    pooled = block["pooled"]["combined"]["harrell_c"]
    assert pooled["k"] == len(block["levels"]) and pooled["pi_lower"] is not None
    assert pooled["ci_lower"] < pooled["estimate"] < pooled["ci_upper"]
    assert (tmp_path / "out" / "internal_by_group.csv").exists()


def test_per_centre_intervals_follow_the_interval_rule_with_few_resamples(cohort):
    # 2 resamples: no interval at all (the normal rule needs 10 resamples)
    few = loco_groups({"cox": ClinicalCox(SPECS, name="cox")}, cohort, H, replicates=2, entropy=3)
    assert all(np.isnan(e.ci_lower) for lev in few.levels for e in few.estimates["cox"][lev].values())
    # 12 resamples: intervals within range that hold their estimates (clipped C, ICI >= 0)
    some = loco_groups({"cox": ClinicalCox(SPECS, name="cox")}, cohort, H, replicates=12, entropy=3)
    n_finite = 0
    for lev in some.levels:
        for nm, e in some.estimates["cox"][lev].items():
            if np.isfinite(e.ci_lower):
                n_finite += 1
                lo, hi = metric_range(nm)
                assert lo <= e.ci_lower <= e.estimate <= e.ci_upper <= hi, (lev, nm, e)
                assert e.ci_note == ""
            elif e.n_used >= 10 and np.isfinite(e.estimate):
                assert e.ci_note.startswith("interval not"), (lev, nm, e)  # withdrawn, with the reason
    assert n_finite > 0


class _Fixed:
    """Stand-in predictions: taking rows returns itself (the level's values are patched below)."""

    def take(self, idx):
        return self


def test_a_withdrawn_per_level_interval_keeps_its_reason(monkeypatch):
    # every resample gives the same values as the level itself: the interval rule
    # (intervals.guard) withdraws each interval as zero-width, and the reason must reach
    # the LevelEstimate instead of an empty cell
    from workbench.validation import groups

    names = groups.group_metric_names(H)
    values = np.linspace(0.6, 0.1, len(names))
    monkeypatch.setattr(groups, "_level_values", lambda preds, *a, **k: {m: values.copy() for m in preds})
    block = groups.level_block({"cox": (_Fixed(), _Fixed())}, np.zeros(40), None, "km", H, None, {},
                               replicates=12, seed=1, conf_level=0.95)
    assert set(block["cox"]) == set(names)
    for nm, e in block["cox"].items():
        assert np.isnan(e.ci_lower) and np.isnan(e.ci_upper), (nm, e)
        assert e.ci_note == "interval not computable: the resampled values do not vary", (nm, e)
        assert e.estimate == pytest.approx(values[names.index(nm)]) and e.n_used == 12
