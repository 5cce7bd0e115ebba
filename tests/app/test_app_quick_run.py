"""The app's quick run: fewer replicates than the study's also shortens the added-value test."""

from __future__ import annotations

from dataclasses import replace

from apphelpers import DEMO

from workbench.app.state import QUICK_PERMUTATIONS, quick_permutations
from workbench.study import read_study


def test_quick_run_caps_permutations_only_below_the_studys_replicates():
    spec = read_study(DEMO / "study.toml")  # 50 replicates, 99 permutations
    assert spec.validation.replicates == 50 and spec.added_value.permutations == 99
    assert quick_permutations(spec, 20) == QUICK_PERMUTATIONS == 19
    # the study's own strength (or more) runs the study's own permutation count
    assert quick_permutations(spec, 50) is None and quick_permutations(spec, 400) is None
    # a study asking for fewer permutations than the cap keeps its own number
    few = replace(spec, added_value=replace(spec.added_value, permutations=9))
    assert quick_permutations(few, 20) is None
    off = replace(spec, added_value=replace(spec.added_value, permutations=0))
    assert quick_permutations(off, 20) is None


def test_a_run_too_small_for_intervals_skips_the_two_stage_outer_samples():
    from workbench.app.state import quick_interval
    from workbench.app.tables import MIN_CI_REPLICATES

    spec = read_study(DEMO / "study.toml")
    assert spec.validation.interval == "two-stage" and MIN_CI_REPLICATES == 10
    # below 10 replicates the page shows no interval at all: the outer samples would be wasted
    assert quick_interval(spec, 3).validation.interval == "shifted-percentile"
    assert quick_interval(spec, 3).validation.replicates == spec.validation.replicates  # nothing else changes
    # from 10 replicates on, the study's own interval rule runs
    assert quick_interval(spec, 10) is spec and quick_interval(spec, 20) is spec
