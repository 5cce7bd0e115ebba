"""Reduced version of bench/bench_external_weights.py (seeded simulation, invented data).

With external follow-up shorter than development, the Brier score and IPA with
external-cohort weights are within Monte Carlo error of the truth (computed on a
large uncensored sample), while development weights are far off; with
centre-dependent censoring, Kaplan-Meier weights stratified by centre remove the
bias that pooled weights show.
"""

from __future__ import annotations

import importlib.util
from pathlib import Path

import numpy as np
import pytest

_PATH = Path(__file__).resolve().parents[2] / "bench" / "bench_external_weights.py"
_spec = importlib.util.spec_from_file_location("bench_external_weights", _PATH)
sim = importlib.util.module_from_spec(_spec)
_spec.loader.exec_module(sim)


@pytest.fixture(scope="module")
def simulated():
    return sim.truth(n=100_000), sim.run(replicates=80, n=400, seed=11)


def _bias(v, target):
    return v.mean(axis=0) - target, v.std(axis=0, ddof=1) / np.sqrt(len(v))


def test_short_external_follow_up(simulated):
    (bs, ipa), res = simulated
    target = np.array([bs, ipa])
    b, se = _bias(res["short follow-up"]["external weights"], target)
    assert np.all(np.abs(b) < 4 * se + 0.002), (b, se)  # within MC error (+ truth-sample error)
    b_dev, se_dev = _bias(res["short follow-up"]["development weights"], target)
    assert b_dev[0] < -10 * se_dev[0]  # the old route under-estimates the Brier score badly


def test_centre_dependent_censoring(simulated):
    (bs, ipa), res = simulated
    target = np.array([bs, ipa])
    b, se = _bias(res["centre censoring"]["KM by centre"], target)
    assert np.all(np.abs(b) < 4 * se + 0.002), (b, se)
    b_pool, se_pool = _bias(res["centre censoring"]["pooled KM weights"], target)
    assert b_pool[1] > 6 * se_pool[1]  # pooled weights inflate IPA
