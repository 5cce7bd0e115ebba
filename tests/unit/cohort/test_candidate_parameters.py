"""Sample size counts the parameters the study considers (Riley et al., Stat Med 2019;38:1276-96).

The demo study's clinical predictors, counted by hand from demo_cohort/study.toml:
age 1, sex 1 (male vs female), ECOG 1 (ordinal score), stage 3 (II, III, IV vs I),
histology 2, serum CEA 2 (log2 value and below-detection-limit indicator), treatment
intent 1 = 11 degrees of freedom.
"""

from __future__ import annotations

from pathlib import Path

import pytest

from workbench.cohort.samplesize import n_for_shrinkage
from workbench.cohort.summary import summarise_cohort
from workbench.models.registry import candidate_parameters
from workbench.prepare import prepare_cohort
from workbench.study import read_study

DEMO = Path(__file__).parents[3] / "demo_cohort" / "study.toml"


@pytest.fixture(scope="module")
def demo():
    spec = read_study(DEMO)
    return spec, prepare_cohort(spec).cohort


def test_clinical_degrees_of_freedom_and_imaging_candidates(demo):
    spec, cohort = demo
    cp = candidate_parameters(spec, cohort)
    assert cp == {"n_candidate_parameters": 11, "n_imaging_candidates": len(cohort.feature_names)}
    from dataclasses import replace

    clinical_only = replace(spec, models=replace(spec.models, fit=("clinical",)))
    assert candidate_parameters(clinical_only, cohort)["n_imaging_candidates"] == 0


def test_two_verdicts_follow_the_riley_formula(demo):
    spec, cohort = demo
    s = summarise_cohort(cohort, spec.horizons, anticipated_r2=0.1, n_candidate_parameters=11,
                         n_imaging_candidates=240)
    assert s.n_clinical_parameters == 11 and "degrees of freedom" in s.clinical_parameters_source
    assert s.sample_size.n_parameters == 11 and s.sample_size_imaging.n_parameters == 251
    # criterion (i): n = p / ((S - 1) ln(1 - R2cs / S)) with S = 0.9 (Riley et al. 2019, eq. for Cox)
    import math

    assert s.sample_size_imaging.n_shrinkage == math.ceil(251 / ((0.9 - 1) * math.log(1 - 0.1 / 0.9)))
    assert s.sample_size_imaging.n_shrinkage == n_for_shrinkage(251, 0.1)
    assert s.events_per_candidate_parameter == pytest.approx(cohort.n_events / 251)
    assert not s.sample_size_imaging.adequate  # 500 patients cannot support 251 unpenalised parameters
    plain = summarise_cohort(cohort, spec.horizons, anticipated_r2=0.1)
    assert plain.sample_size_imaging is None and "clinical columns" in plain.clinical_parameters_source
