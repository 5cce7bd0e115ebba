"""[data] competing_codes: validation in the study file and the cause array of the cohort.

Data: the demo cohort's own clinical table (invented, demo_cohort/README.md), whose
death_cause column codes cancer / other / alive; counts checked against truth.json.
"""

from __future__ import annotations

import json
import re
import shutil
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from workbench.cli import main
from workbench.cohort.summary import format_summary, summarise_cohort
from workbench.errors import CohortError, SpecError
from workbench.prepare import prepare_cohort
from workbench.study import dumps_study, read_study, study_from_dict

DEMO = Path(__file__).resolve().parents[3] / "demo_cohort"


@pytest.fixture
def folder(tmp_path):
    shutil.copy(DEMO / "clinical.csv", tmp_path / "clinical.csv")
    return tmp_path


def _doc(**data):
    base = {"clinical": "clinical.csv", "time": "followup_cr_months", "event": "death_cause",
            "event_codes": ["cancer"], "competing_codes": ["other"], "censor_codes": ["alive"]}
    base.update(data)
    return {"study": {"name": "cr", "horizons": [12, 24], "seed": 3},
            "data": {k: v for k, v in base.items() if v is not None},
            "predictor": [{"column": "age"}, {"column": "stage", "kind": "categorical"}],
            "imaging": {"harmonise": {"method": "none"}}}


def _write(folder, doc) -> Path:
    import tomli_w

    path = folder / "study.toml"
    path.write_text(tomli_w.dumps(doc))
    return path


def test_cohort_carries_the_cause_and_the_summary_counts_it(folder):
    spec = study_from_dict(_doc(), base=folder)
    assert spec.data.competing_codes == ("other",)
    cohort = prepare_cohort(spec).cohort
    counts = json.loads((DEMO / "truth.json").read_text())["competing"]["cohorts"]["training"]["counts"]
    assert np.bincount(cohort.cause).tolist() == [counts["alive"], counts["cancer"], counts["other"]]
    # the ordinary view: the cause of interest, competing deaths censored
    assert cohort.n_events == counts["cancer"]
    assert np.array_equal(cohort.event, cohort.cause == 1)
    assert np.array_equal(cohort.take([3, 3, 7]).cause, cohort.cause[[3, 3, 7]])
    text = format_summary(summarise_cohort(cohort))
    assert f"competing events {counts['other']}" in text and f"censored {counts['alive']}" in text
    # written out and read back: the same study
    import tomllib

    assert study_from_dict(tomllib.loads(dumps_study(spec, base=folder)), base=folder) == spec


def test_demo_study_without_the_key_has_no_cause():
    spec = read_study(DEMO / "study.toml")
    assert spec.data.competing_codes is None


@pytest.mark.parametrize(("data", "message"), [
    ({"competing_codes": ["cancer"]}, r"\[data\] competing_codes and event_codes share 'cancer'"),
    ({"competing_codes": ["alive"]}, r"\[data\] competing_codes and censor_codes share 'alive'"),
    ({"event_codes": None}, r"\[data\] competing_codes needs event_codes as well"),
    ({"competing_codes": []}, r"\[data\] competing_codes is empty"),
])
def test_study_file_errors(folder, data, message, capsys):
    with pytest.raises(SpecError, match=message):
        study_from_dict(_doc(**data), base=folder)
    # the command line stops with the message, status 2, and writes nothing
    out = folder / "out"
    assert main(["competing", str(_write(folder, _doc(**data))), "--out", str(out), "--replicates", "2"]) == 2
    assert not out.exists()
    assert re.search(message, capsys.readouterr().err)


def test_competing_route_without_the_key_is_refused(folder, capsys):
    doc = _doc(competing_codes=None, event_codes=["cancer"], censor_codes=["alive", "other"])
    out = folder / "out"
    assert main(["competing", str(_write(folder, doc)), "--out", str(out)]) == 2
    assert "names no competing_codes" in capsys.readouterr().err and not out.exists()


@pytest.mark.parametrize(("change", "message"), [
    ({"competing_codes": ["othr"]}, r"competing code\(s\) 'othr' occur in no row; the values found are "
                                    r"'alive', 'cancer', 'other'"),
    ({"event": "cause_of_death"}, r"cause_of_death"),
])
def test_table_errors(folder, change, message, capsys):
    spec = study_from_dict(_doc(**change), base=folder)
    with pytest.raises(CohortError, match=message):
        prepare_cohort(spec)
    out = folder / "out"
    assert main(["competing", str(_write(folder, _doc(**change))), "--out", str(out), "--replicates", "2"]) == 2
    assert not out.exists()
    assert re.search(message, capsys.readouterr().err)


def test_an_unlisted_value_is_refused(folder):
    clin = pd.read_csv(folder / "clinical.csv")
    clin.loc[4, "death_cause"] = "unknown"
    clin.to_csv(folder / "clinical.csv", index=False)
    with pytest.raises(CohortError, match=r"'unknown' in row 6 are not among the allowed codes"):
        prepare_cohort(study_from_dict(_doc(), base=folder))


def test_ordinary_route_censors_competing_events_and_says_so(folder):
    from workbench.workflow import run_study

    doc = _doc()
    doc["validation"] = {"workers": 1}
    spec = study_from_dict(doc, base=folder)
    result = run_study(spec, replicates=2, permutations=0)
    # the run records its warnings (shown by the command line and the app)
    assert any(c == "DataQualityWarning" and m.startswith("69 competing events ([data] competing_codes) are treated "
                                                          "as censored") for c, m in result.warnings)
    counts = json.loads((DEMO / "truth.json").read_text())["competing"]["cohorts"]["training"]["counts"]
    assert result.cohort.n_events == counts["cancer"]
    assert result.summary.n_competing == counts["other"]


def test_inspect_counts_competing_events(folder, capsys):
    args = ["inspect", "--clinical", str(folder / "clinical.csv"), "--time", "followup_cr_months", "--event",
            "death_cause", "--event-codes", "cancer", "--competing-codes", "other", "--censor-codes", "alive"]
    assert main(args) == 0
    assert "events of interest 285 (57%)   competing events 69 (14%)   censored 146" in capsys.readouterr().out
    assert main(args[:7] + args[9:]) == 2  # competing codes without event codes
    assert "competing_codes needs event_codes as well" in capsys.readouterr().err
