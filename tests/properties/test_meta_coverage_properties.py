"""Reduced version of bench/bench_meta_coverage.py (seeded simulation, invented data).

The Hartung-Knapp-Sidik-Jonkman interval of the pooled logit C covers the mean over
hospitals at about the nominal 95% with 5 hospitals; the normal interval covers less.
"""

from __future__ import annotations

import importlib.util
from pathlib import Path

import numpy as np

_PATH = Path(__file__).resolve().parents[2] / "bench" / "bench_meta_coverage.py"
_spec = importlib.util.spec_from_file_location("bench_meta_coverage", _PATH)
sim = importlib.util.module_from_spec(_spec)
_spec.loader.exec_module(sim)


def test_pooled_c_interval_coverage():
    reps = 200
    res = sim.run(reps, k=5, n=150, seed=21)
    mc = np.sqrt(0.95 * 0.05 / reps)
    hk = res[("dl", "hksj")]["ci"]
    assert abs(hk - 0.95) < 3.5 * mc, hk
    assert res[("dl", "normal")]["ci"] <= hk
