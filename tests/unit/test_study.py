"""Study files: read, check, write back unchanged."""

from __future__ import annotations

import pytest

from workbench.errors import SpecError
from workbench.study import dumps_study, read_study, write_study

STUDY = """
[study]
name = "test study"
horizons = [365, 730]
seed = 7

[data]
features = "features.csv"
clinical = "clinical.csv"
time = "time_days"
time_unit = "days"
event = "status"
event_codes = ["recurrence"]
censor_codes = ["censored"]

[[predictor]]
column = "tgrade"
kind = "ordinal"
levels = ["I", "II", "III"]

[[predictor]]
column = "horTh"
kind = "categorical"
reference = "no"

[imaging]
include = ["*"]

[imaging.harmonise]
method = "none"

[models]
fit = ["clinical", "combined"]

[validation]
method = "bootstrap"
replicates = 20
"""


@pytest.fixture
def study_path(tmp_path):
    p = tmp_path / "study.toml"
    p.write_text(STUDY)
    return p


def test_read_resolves_paths_and_values(study_path):
    s = read_study(study_path)
    assert s.name == "test study" and s.horizons == (365.0, 730.0) and s.seed == 7
    assert s.data.features == str(study_path.parent / "features.csv")
    assert s.predictors[0].levels == ("I", "II", "III")
    assert s.validation.replicates == 20
    assert s.imaging.penalty.rule == "1se"


def test_round_trip_is_unchanged(study_path, tmp_path):
    s = read_study(study_path)
    out = write_study(s, tmp_path / "again.toml")
    s2 = read_study(out)
    assert s2 == s
    assert dumps_study(s2, base=tmp_path) == out.read_text()
    assert 'features = "features.csv"' in out.read_text()


@pytest.mark.parametrize(
    "edit, message",
    [
        (("replicates = 20", "replicats = 20"), r"\[validation\]: unknown key 'replicats'\. Did you mean 'replicates'"),
        (("[imaging]", "[imagng]"), r"unknown section \[imagng\]\. Did you mean \[imaging\]"),
        (('kind = "ordinal"', 'kind = "ordered"'), r"kind 'ordered' is not known"),
        (('method = "bootstrap"', 'method = "jackknife"'), r"\[validation\] method is 'jackknife'"),
        (("horizons = [365, 730]", "horizons = [730, 365]"), r"horizons must be positive and increasing"),
        (('method = "none"', 'method = "combat"'), r"names no batch column"),
        (('fit = ["clinical", "combined"]', 'fit = ["combined"]'), r"baseline 'clinical' is not among the fitted models"),
        (('name = "test study"', 'name = "x"\nname = "y"'), r"not valid TOML"),
    ],
)
def test_bad_study_files_say_what_is_wrong(study_path, edit, message):
    study_path.write_text(STUDY.replace(*edit))
    with pytest.raises(SpecError, match=message):
        read_study(study_path)


def test_missing_study_file(tmp_path):
    with pytest.raises(SpecError, match="study file not found"):
        read_study(tmp_path / "none.toml")


def test_added_value_and_combined_keys_read_check_and_round_trip(tmp_path):
    from dataclasses import replace as _replace
    from pathlib import Path as _Path

    from workbench.errors import SpecError as _SpecError
    from workbench.models.registry import build_models
    from workbench.study import read_study as _read
    from workbench.study import write_study as _write

    spec = _read(_Path(__file__).parents[2] / "demo_cohort" / "study.toml")
    assert spec.added_value.permutations == 99 and spec.models.combined.coefficient == "prevalidated"
    spec2 = _replace(spec, models=_replace(spec.models, combined=_replace(spec.models.combined,
                                                                          shrinkage="cross_validated_slope")))
    back = _read(_write(spec2, tmp_path / "s.toml"))
    assert back.models.combined.shrinkage == "cross_validated_slope" and back.added_value == spec.added_value
    assert build_models(back)["combined"].shrinkage == "cross_validated_slope"
    with pytest.raises(_SpecError, match=r"\[models.combined\] shrinkage"):
        _replace(spec, models=_replace(spec.models, combined=_replace(spec.models.combined, shrinkage="half")))
    with pytest.raises(_SpecError, match=r"\[added_value\] permutations"):
        _replace(spec, added_value=_replace(spec.added_value, permutations=-1))
