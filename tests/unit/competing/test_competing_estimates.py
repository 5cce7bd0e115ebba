"""The competing route's validated estimates from replicate scores, against the published formulas.

Replicate scores are given by hand (no model is fitted), so every number is worked out
below from the formulas: Harrell, Lee & Mark (Stat Med 1996;15:361-87) for the optimism
correction, Efron (JASA 1983;78:316-31) for the out-of-bootstrap mean, Efron &
Tibshirani (JASA 1997;92:548-60, eqs. 28-32) for .632+, Nadeau & Bengio (Machine
Learning 2003;52:239-81) for the interval's variance. Tolerance 1e-9 (arithmetic only).
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy.stats import t as t_dist

from workbench.competing import estimates
from workbench.competing.estimates import (
    DEFAULT_ESTIMATOR,
    INTERVAL_MIN_PATIENTS,
    WITHHELD,
    ReplicateScores,
    estimate_table,
    oob_interval,
    small_cohort_reason,
)

CLIN, COMB, DIFF = (("cause", m, "cause_specific") for m in ("clinical", "combined", "combined_minus_clinical"))


def _scores(clin: float, comb: float) -> dict:
    return {CLIN: {"auc": np.array([clin])}, COMB: {"auc": np.array([comb])},
            DIFF: {"auc": np.array([comb - clin])}}


APPARENT = _scores(0.75, 0.80)
# per replicate: bootstrap sample, original rows, out-of-bootstrap rows
ROWS = [ReplicateScores(_scores(0.78, 0.85), _scores(0.74, 0.78), _scores(0.70, 0.72), 190, 110),
        ReplicateScores(_scores(0.76, 0.83), _scores(0.73, 0.77), _scores(0.68, 0.68), 189, 111)]
GAMMA = {k: {"auc": np.array([0.5])} for k in (CLIN, COMB)}


def test_optimism_and_out_of_bootstrap_estimates():
    opt = estimate_table(APPARENT, ROWS, "optimism")
    # combined: optimism = mean(0.85 - 0.78, 0.83 - 0.77) = 0.065 -> 0.80 - 0.065 = 0.735
    assert opt.corrected[COMB]["auc"][0] == pytest.approx(0.735, abs=1e-9)
    assert opt.optimism[COMB]["auc"][0] == pytest.approx(0.065, abs=1e-9)
    oob = estimate_table(APPARENT, ROWS, "oob")
    assert oob.corrected[COMB]["auc"][0] == pytest.approx(0.70, abs=1e-9)  # mean(0.72, 0.68)
    assert oob.corrected[DIFF]["auc"][0] == pytest.approx(0.70 - 0.69, abs=1e-9)


def test_632plus_follows_efron_tibshirani():
    tab = estimate_table(APPARENT, ROWS, "632plus", gamma=GAMMA)
    # combined, as a loss -AUC: err = -0.80, Err1 = -0.70, gamma = -0.5; R = 0.10 / 0.30 = 1/3,
    # w = 0.632 / (1 - 0.368 / 3) = 0.7203647..., estimate = 0.80 - 0.10 w = 0.7279635...
    w = 0.632 / (1 - 0.368 / 3)
    assert tab.corrected[COMB]["auc"][0] == pytest.approx(0.80 - 0.10 * w, abs=1e-9)
    # clinical: err = -0.75, Err1 = -0.69, R = 0.06 / 0.25 = 0.24
    w_c = 0.632 / (1 - 0.368 * 0.24)
    assert tab.corrected[CLIN]["auc"][0] == pytest.approx(0.75 - 0.06 * w_c, abs=1e-9)
    # the difference is the difference of the two estimates (.632+ weights are not linear)
    assert tab.corrected[DIFF]["auc"][0] == pytest.approx((0.80 - 0.10 * w) - (0.75 - 0.06 * w_c), abs=1e-9)
    assert tab.optimism[COMB]["auc"][0] == pytest.approx(0.10 * w, abs=1e-9)
    assert DEFAULT_ESTIMATOR == "632plus"


def test_interval_rule_is_the_corrected_resampled_t():
    u = np.linspace(0.62, 0.80, 12)  # 12 out-of-bootstrap values
    ratio = 110 / 190
    lo, hi, why = oob_interval("auc", u, 0.72, ratio)
    half = t_dist.ppf(0.975, 11) * np.sqrt((1 / 12 + ratio) * np.var(u, ddof=1))
    assert why == "" and lo == pytest.approx(0.72 - half, abs=1e-9) and hi == pytest.approx(0.72 + half, abs=1e-9)
    assert np.isnan(oob_interval("auc", u[:9], 0.72, ratio)[0])  # fewer than 10 values: none


def test_intervals_only_for_the_proven_metrics():
    apparent = {k: {**v, "ici": v["auc"] * 0.1} for k, v in APPARENT.items()}
    rows = [ReplicateScores(*({k: {**v, "ici": v["auc"] * 0.1} for k, v in getattr(r, a).items()}
                              for a in ("boot", "orig", "oob")), r.n_in, r.n_out) for r in ROWS]
    # 12 replicates with varying out-of-bootstrap AUC
    rows = [ReplicateScores(r.boot, r.orig, {k: {m: v + 0.002 * i for m, v in d.items()} for k, d in r.oob.items()},
                            r.n_in, r.n_out) for i, r in enumerate(rows * 6)]
    tab = estimate_table(apparent, rows, "632plus", gamma=GAMMA)
    assert np.isfinite(tab.lower[COMB]["auc"][0]) and tab.lower[COMB]["auc"][0] < tab.corrected[COMB]["auc"][0]
    assert np.isfinite(tab.lower[DIFF]["auc"][0])
    assert np.isnan(tab.lower[COMB]["ici"][0]) and tab.note[COMB]["ici"][0] == WITHHELD[("cause", "cause_specific",
                                                                                          "ici")]
    assert np.isnan(estimate_table(apparent, rows, "optimism").lower[COMB]["auc"][0])


def test_intervals_only_for_cohorts_as_large_as_the_design_that_proved_them():
    # 75 + 75 distinct patients: below the 300 of the cause-specific interval, at the 150 of the all-cause one
    both = {**APPARENT, **{("all_cause", k[1], "cause_specific"): v for k, v in APPARENT.items()}}
    rows = [ReplicateScores(*({**getattr(r, a), **{("all_cause", k[1], "cause_specific"): getattr(r, a)[k]
                                                   for k in getattr(r, a)}} for a in ("boot", "orig", "oob")), 75, 75)
            for r in ROWS]
    rows = [ReplicateScores(r.boot, r.orig, {k: {m: v + 0.002 * i for m, v in d.items()} for k, d in r.oob.items()},
                            r.n_in, r.n_out) for i, r in enumerate(rows * 6)]
    tab = estimate_table(both, rows, "632plus", gamma=GAMMA)
    assert np.isnan(tab.lower[COMB]["auc"][0]) and "this cohort has 150" in tab.note[COMB]["auc"][0]
    assert np.isfinite(tab.lower[("all_cause", "combined", "cause_specific")]["auc"][0])
    assert INTERVAL_MIN_PATIENTS[("cause", "cause_specific", "auc")] == 300


def _replicates_with_spread(n_in: int, n_out: int) -> list[ReplicateScores]:
    rows = [ReplicateScores(r.boot, r.orig, r.oob, n_in, n_out) for r in ROWS]
    return [ReplicateScores(r.boot, r.orig, {k: {m: v + 0.002 * i for m, v in d.items()} for k, d in r.oob.items()},
                            r.n_in, r.n_out) for i, r in enumerate(rows * 6)]


def test_intervals_withheld_below_the_event_floor(monkeypatch):
    # 190 + 110 = 300 distinct patients: enough patients; the event floor alone decides
    monkeypatch.setattr(estimates, "INTERVAL_MIN_EVENTS", {("cause", "cause_specific", "auc"): 100})
    rows = _replicates_with_spread(190, 110)
    few = estimate_table(APPARENT, rows, "632plus", gamma=GAMMA, events={"cause": 60})
    assert np.isnan(few.lower[COMB]["auc"][0]) and np.isnan(few.lower[DIFF]["auc"][0])
    assert few.note[COMB]["auc"][0] == ("no interval: in simulation its coverage was in the 0.92-0.98 target with "
                                        "100 or more events of the cause of interest, and short of it, far too wide "
                                        "or not measured with fewer; this cohort has 60")
    enough = estimate_table(APPARENT, rows, "632plus", gamma=GAMMA, events={"cause": 100})
    assert np.isfinite(enough.lower[COMB]["auc"][0]) and enough.note[COMB]["auc"][0] == ""
    # too few patients is said first: it is the floor the bench measured below
    small = estimate_table(APPARENT, _replicates_with_spread(75, 75), "632plus", gamma=GAMMA, events={"cause": 60})
    assert "this cohort has 150" in small.note[COMB]["auc"][0]


def _fine_gray(scores: dict) -> dict:
    return {(k[0], k[1], "fine_gray"): v for k, v in scores.items()}


def test_the_floors_measured_by_the_bench():
    # bench/bench_competing_validation.py (module notes of workbench.competing.estimates): the
    # AUC intervals (Fine-Gray too) in the target with 300 patients and 147-182 deaths from the
    # cause, short of it with 45-82; Brier and IPA with 74-99 deaths in 150 patients; all-cause
    # with 94-117 deaths in 150
    fg_clin, fg_comb = ("cause", "clinical", "fine_gray"), ("cause", "combined", "fine_gray")
    apparent = {**APPARENT, **_fine_gray(APPARENT)}

    def rows(n_in, n_out):
        return [ReplicateScores(*({**getattr(r, a), **_fine_gray(getattr(r, a))} for a in ("boot", "orig", "oob")),
                                r.n_in, r.n_out) for r in _replicates_with_spread(n_in, n_out)]

    big = estimate_table(apparent, rows(190, 110), "632plus", gamma=GAMMA, events={"cause": 147})
    assert np.isfinite(big.lower[fg_comb]["auc"][0]) and np.isfinite(big.lower[COMB]["auc"][0])
    few = estimate_table(apparent, rows(190, 110), "632plus", gamma=GAMMA, events={"cause": 146})
    assert np.isnan(few.lower[fg_clin]["auc"][0]) and "this cohort has 146" in few.note[fg_clin]["auc"][0]
    assert small_cohort_reason("cause", "fine_gray", "brier", 150, {"cause": 74}) == ""
    assert "147 or more events of the cause of interest" in small_cohort_reason("cause", "cause_specific", "auc", 300, {"cause": 60})
    assert "74 or more events of the cause of interest" in small_cohort_reason("cause", "cause_specific", "ipa", 300, {"cause": 73})
    small = estimate_table(apparent, rows(95, 55), "632plus", gamma=GAMMA, events={"cause": 80})
    assert np.isnan(small.lower[fg_comb]["auc"][0]) and "with 300 patients" in small.note[fg_comb]["auc"][0]
    assert small_cohort_reason("all_cause", "cause_specific", "brier", 150, {"all_cause": 94}) == ""
    assert "this cohort has 93" in small_cohort_reason("all_cause", "cause_specific", "brier", 150, {"all_cause": 93})
    assert ("cause", "fine_gray", "auc") not in WITHHELD and ("cause", "fine_gray", "ici") in WITHHELD
