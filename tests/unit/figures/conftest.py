"""Fixtures shared by the figure tests."""

from __future__ import annotations

from dataclasses import replace
from pathlib import Path

import pytest

DEMO_STUDY = Path(__file__).parents[3] / "demo_cohort" / "study.toml"


@pytest.fixture(scope="session")
def demo_two_models():
    """The demo study's clinical and combined models fitted once on the development cohort.

    The penalty path is cut to 30 values so the fit stays quick; the nomogram, its limits and
    the publication plots are all drawn from these fits. Returns (spec, cohort, models).
    """
    from workbench.models.registry import build_models
    from workbench.prepare import prepare_cohort
    from workbench.study import read_study

    spec = read_study(DEMO_STUDY)
    spec = replace(
        spec,
        models=replace(spec.models, fit=("clinical", "combined")),
        # the two study models only (no automatic clinical + volume comparison model)
        imaging=replace(spec.imaging, volume_feature=None, penalty=replace(spec.imaging.penalty, n_alphas=30)),
    )
    cohort = prepare_cohort(spec).cohort
    models = build_models(spec)
    for m in models.values():
        m.fit(cohort)
    return spec, cohort, models
