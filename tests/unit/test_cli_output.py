"""The results folder of `workbench run`, console warnings, study-file types and counts on the command line.

The study is the GBSG2 data shipped with scikit-survival (Schumacher et al. 1994), split into a
"features" table and a "clinical" table (age moved to the clinical table so that a continuous
clinical predictor exists), with a clinical Cox model and one bootstrap replicate: enough to
exercise the command line, not to measure anything.
"""

from __future__ import annotations

import dataclasses
import hashlib
import json
import os
import subprocess
import sys
from pathlib import Path

import pytest

from workbench.cli import main
from workbench.errors import WorkbenchError

pytestmark = pytest.mark.slow  # several command-line runs of a GBSG2 study

STUDY = """
[study]
name = "GBSG2 command-line check"
horizons = [365, 730]
seed = 3

[data]
features = "features.csv"
clinical = "clinical.csv"
time = "time_days"
time_unit = "days"
event = "status"
event_codes = ["recurrence"]
censor_codes = ["censored"]

[[predictor]]
column = "age"

[[predictor]]
column = "tgrade"
kind = "categorical"

[[predictor]]
column = "horTh"
kind = "categorical"

[imaging.harmonise]
method = "none"

[models]
fit = ["clinical"]

[validation]
replicates = 1
backend = "serial"
# the smallest two-stage interval (the default 100 x 10 refits would dominate every run here)
outer_replicates = 10
inner_replicates = 1
"""

ROOT = Path(__file__).parents[2]


@pytest.fixture(scope="module")
def study(tmp_path_factory, gbsg2_frames):
    feat, clin, _ = gbsg2_frames
    d = tmp_path_factory.mktemp("gbsg2_study")
    feat.drop(columns=["age"]).to_csv(d / "features.csv", index=False)
    clin.assign(age=feat["age"]).to_csv(d / "clinical.csv", index=False)
    (d / "study.toml").write_text(STUDY)
    return d / "study.toml"


@pytest.fixture(scope="module")
def result(study):
    from workbench.study import read_study
    from workbench.workflow import run_study

    return run_study(read_study(study))


def _digests(folder: Path) -> dict:
    return {p.name: hashlib.sha256(p.read_bytes()).hexdigest() for p in folder.iterdir() if p.is_file()}


def _no_compute(monkeypatch):
    def refuse(*a, **k):
        raise AssertionError("the run must be refused before any computation")

    monkeypatch.setattr("workbench.workflow.run_study", refuse)


def _previous(folder: Path) -> dict:
    folder.mkdir(parents=True)
    (folder / "results.json").write_text('{"earlier": true}')
    (folder / "run.log").write_text("earlier run\n")
    return _digests(folder)


def _siblings(out: Path) -> list[str]:
    return sorted(p.name for p in out.parent.iterdir() if p.name.startswith(f".{out.name}."))


# ------------------------------------------------------------------ --out refusals


def test_out_that_is_a_file_is_refused_before_computing(study, tmp_path, monkeypatch, capsys):
    _no_compute(monkeypatch)
    target = tmp_path / "results.txt"
    target.write_text("keep me")
    assert main(["run", str(study), "--out", str(target), "--quiet"]) == 2
    err = capsys.readouterr().err
    assert f"--out {target} is an existing file, not a folder" in err and "Traceback" not in err
    assert target.read_text() == "keep me"


@pytest.mark.parametrize("where", ["study folder", "its parent"])
def test_out_holding_the_study_file_is_refused(study, monkeypatch, capsys, where):
    _no_compute(monkeypatch)
    before = _digests(study.parent)
    out = study.parent if where == "study folder" else study.parent.parent
    assert main(["run", str(study), "--out", str(out), "--quiet"]) == 2
    err = capsys.readouterr().err
    assert f"--out {out} holds the study file ({study})" in err
    assert "could overwrite it" in err
    assert _digests(study.parent) == before


def test_out_holding_an_input_table_is_refused(study, tmp_path, monkeypatch, capsys):
    _no_compute(monkeypatch)
    moved = tmp_path / "moved.toml"  # the study elsewhere, its tables still in the data folder
    moved.write_text(study.read_text().replace('"features.csv"', f'"{study.parent / "features.csv"}"')
                     .replace('"clinical.csv"', f'"{study.parent / "clinical.csv"}"'))
    assert main(["run", str(moved), "--out", str(study.parent), "--quiet"]) == 2
    assert "holds the features table" in capsys.readouterr().err


def test_out_with_other_files_is_refused(study, tmp_path, monkeypatch, capsys):
    _no_compute(monkeypatch)
    out = tmp_path / "papers"
    out.mkdir()
    (out / "draft.docx").write_text("x")
    assert main(["run", str(study), "--out", str(out), "--quiet"]) == 2
    assert "already holds files that are not results of an earlier run (draft.docx)" in capsys.readouterr().err


# ------------------------------------------------------------------ atomic write


def test_successful_run_replaces_earlier_results_at_the_end(study, result, tmp_path, monkeypatch, capsys):
    monkeypatch.setattr("workbench.workflow.run_study", lambda *a, **k: result)
    inputs = _digests(study.parent)
    out = tmp_path / "res"
    _previous(out)
    assert main(["run", str(study), "--out", str(out), "--quiet", "--no-figures", "--no-report"]) == 0
    assert "the earlier results there were replaced" in capsys.readouterr().out
    data = json.loads((out / "results.json").read_text())
    assert "earlier" not in data and data["models"]["clinical"]
    assert (out / "bundle" / "manifest.json").exists()
    assert _siblings(out) == []
    assert _digests(study.parent) == inputs
    umask = os.umask(0)
    os.umask(umask)
    assert out.stat().st_mode & 0o777 == 0o777 & ~umask, "the results folder keeps ordinary permissions"


@pytest.mark.parametrize("failure, code", [(WorkbenchError("a figure could not be drawn"), 2),
                                           (KeyboardInterrupt(), 130)])
def test_run_failing_midway_leaves_earlier_results_intact(study, result, tmp_path, monkeypatch, capsys,
                                                          failure, code):
    monkeypatch.setattr("workbench.workflow.run_study", lambda *a, **k: result)

    def fail(*a, **k):
        raise failure

    monkeypatch.setattr("workbench.report.figureset.write_figures", fail)
    out = tmp_path / "res"
    before = _previous(out)
    assert main(["run", str(study), "--out", str(out), "--quiet", "--no-report"]) == code
    assert _digests(out) == before and sorted(p.name for p in out.iterdir()) == ["results.json", "run.log"]
    assert _siblings(out) == []
    fresh = tmp_path / "fresh"
    assert main(["run", str(study), "--out", str(fresh), "--quiet", "--no-report"]) == code
    assert not fresh.exists() and _siblings(fresh) == []
    capsys.readouterr()


KILL_SCRIPT = """
import os, signal, sys
import workbench.report.figureset as fs
from workbench.cli import main
fs.write_figures = lambda *a, **k: os.kill(os.getpid(), signal.{sig})
sys.exit(main(["run", sys.argv[1], "--out", sys.argv[2], "--quiet", "--no-report"]))
"""


@pytest.mark.parametrize("sig", ["SIGKILL", "SIGTERM"])
def test_run_killed_while_writing_leaves_earlier_results_intact(study, tmp_path, sig):
    out = tmp_path / "res"
    before = _previous(out)
    inputs = _digests(study.parent)
    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    proc = subprocess.run([sys.executable, "-c", KILL_SCRIPT.format(sig=sig), str(study), str(out)],
                          env=env, capture_output=True, text=True, timeout=600)
    assert _digests(out) == before
    assert _digests(study.parent) == inputs
    if sig == "SIGTERM":  # a polite stop unwinds and removes the unfinished folder
        assert proc.returncode == 130, proc.stderr
        assert "interrupted" in proc.stderr and "Traceback" not in proc.stderr
        assert _siblings(out) == []
    else:  # killed outright: only a hidden .res.partial-* folder can remain, never a results folder
        assert proc.returncode == -9
        left = _siblings(out)
        assert len(left) == 1 and left[0].startswith(".res.partial-")
        assert (out.parent / left[0] / "results.json").exists(), "the kill came after writing had begun"


# ------------------------------------------------------------------ console warnings


def test_console_shows_statistical_warnings_once_and_hides_numerical_noise(study, result, tmp_path, monkeypatch,
                                                                            capsys):
    noisy = dataclasses.replace(result, warnings=(
        ("SeparationWarning", "horTh: hazard ratio 8e8,\n confidence interval 0 to inf"),
        ("RuntimeWarning", "overflow encountered in exp"),
        ("SeparationWarning", "horTh: hazard ratio 8e8,\n confidence interval 0 to inf"),
        ("RuntimeWarning", "invalid value encountered in divide"),
    ))
    monkeypatch.setattr("workbench.workflow.run_study", lambda *a, **k: noisy)
    out = tmp_path / "res"
    assert main(["run", str(study), "--out", str(out), "--quiet", "--no-figures", "--no-report"]) == 0
    err = capsys.readouterr().err
    assert err.count("warning (SeparationWarning): horTh: hazard ratio 8e8, confidence interval 0 to inf\n") == 1
    assert "overflow encountered" not in err and "RuntimeWarning" not in err
    assert "note: 2 numerical warning(s) from the computing libraries" in err and "run.log lists them" in err
    log = (out / "run.log").read_text()
    assert "RuntimeWarning: overflow encountered in exp" in log
    cats = {w["category"] for w in json.loads((out / "results.json").read_text())["warnings"]}
    assert {"SeparationWarning", "RuntimeWarning"} <= cats


# ------------------------------------------------------------------ types and counts


@pytest.mark.parametrize("line, new, message", [
    ("\nreplicates = 1", '\nreplicates = "five"',
     "[validation]: replicates must be a whole number, such as 5; found 'five' (text)."),
    ("seed = 3", 'seed = "twenty"', "[study]: seed must be a whole number, such as 5; found 'twenty' (text)."),
    ('backend = "serial"', 'backend = "serial"\nworkers = 1.5',
     "[validation]: workers must be a whole number, such as 5; found 1.5 (a decimal number)."),
    ('event_codes = ["recurrence"]', 'event_codes = "recurrence"',
     "[data]: event_codes must be a list of text values or numbers, such as [\"a\", \"b\"]; found 'recurrence'"),
])
def test_wrong_types_in_the_study_file_are_named(study, monkeypatch, capsys, line, new, message):
    _no_compute(monkeypatch)
    bad = study.parent / "bad_types.toml"
    bad.write_text(study.read_text().replace(line, new))
    try:
        assert main(["run", str(bad), "--out", str(study.parent / "never"), "--quiet"]) == 2
    finally:
        bad.unlink()
    err = capsys.readouterr().err
    assert message in err and "Traceback" not in err


@pytest.mark.parametrize("command", ["run", "apply"])
@pytest.mark.parametrize("value", ["-3", "2.5", "five"])
def test_bad_replicate_counts_are_refused(study, capsys, command, value):
    args = ["run", str(study)] if command == "run" else ["apply", "bundle", "--features", "f.csv", "--clinical", "c.csv"]
    with pytest.raises(SystemExit) as exc:
        main([*args, "--replicates", value])
    assert exc.value.code == 2
    err = capsys.readouterr().err
    least = 1 if command == "run" else 0
    assert f"argument --replicates: takes a whole number of at least {least}; got" in err


# ------------------------------------------------------------------ unit plausibility in apply / estimate


@pytest.fixture(scope="module")
def run_folder(study, result, tmp_path_factory):
    import workbench.workflow as wf

    out = tmp_path_factory.mktemp("gbsg2_run") / "res"
    real = wf.run_study
    wf.run_study = lambda *a, **k: result
    try:
        assert main(["run", str(study), "--out", str(out), "--quiet", "--no-figures", "--no-report"]) == 0
    finally:
        wf.run_study = real
    return out


def test_apply_warns_when_follow_up_is_in_another_unit(study, run_folder, tmp_path, capsys):
    import pandas as pd

    clin = pd.read_csv(study.parent / "clinical.csv")
    clin["time_days"] = (clin["time_days"] / 30.4375).round(2)  # months, in a column the bundle reads as days
    new = tmp_path / "clinical_months.csv"
    clin.to_csv(new, index=False)
    capsys.readouterr()
    code = main(["apply", str(run_folder / "bundle"), "--features", str(study.parent / "features.csv"),
                 "--clinical", str(new), "--out", str(tmp_path / "ext"), "--replicates", "0"])
    # the horizons (365 and 730 "days") now lie beyond every follow-up: the run stops, and the
    # warning before the error names the likely cause
    assert code == 2
    err = capsys.readouterr().err
    assert err.index("UnitWarning") < err.index("error: ") and "horizon 365 days lies outside" in err
    assert not (tmp_path / "ext").exists()
    assert "warning (UnitWarning): " in err and "clinical_months.csv: median follow-up" in err
    assert "The ratio matches months read as days: convert the times to days" in err


def test_apply_out_holding_the_bundle_is_refused(study, run_folder, capsys):
    code = main(["apply", str(run_folder / "bundle"), "--features", str(study.parent / "features.csv"),
                 "--clinical", str(study.parent / "clinical.csv"), "--out", str(run_folder)])
    assert code == 2
    assert f"--out {run_folder} holds the bundle" in capsys.readouterr().err


def test_estimate_warns_when_a_value_looks_like_another_unit(run_folder, capsys):
    code = main(["estimate", str(run_folder / "bundle"), "--model", "clinical", "--value", "age=600",
                 "--value", "tgrade=II", "--value", "horTh=no"])
    assert code == 0
    err = capsys.readouterr().err
    assert "warning (UnitWarning): the patient's values: age = 600 is" in err
    assert "a factor of 12 (such as months vs years) looks like this" in err


def test_apply_warns_when_a_feature_looks_like_another_unit(study, run_folder, tmp_path, capsys):
    import pandas as pd

    feat = pd.read_csv(study.parent / "features.csv")
    feat["tsize"] = feat["tsize"] * 1000.0  # tumour size in micrometres instead of millimetres
    new = tmp_path / "features_um.csv"
    feat.to_csv(new, index=False)
    capsys.readouterr()
    code = main(["apply", str(run_folder / "bundle"), "--features", str(new),
                 "--clinical", str(study.parent / "clinical.csv"), "--out", str(tmp_path / "ext"), "--replicates", "0"])
    assert code == 0
    err = capsys.readouterr().err
    assert "warning (UnitWarning): " in err and "features_um.csv: " in err
    assert "1 column(s) have a median far outside the training range: 'tsize' (median" in err
    assert "a factor of 1000 (such as mm³ vs cm³ or ml, g vs kg)?" in err
    assert (tmp_path / "ext" / "external_results.json").exists()


def test_apply_says_why_there_are_no_intervals(study, run_folder, tmp_path, capsys):
    # 5 resamples of the new cohort: the interval rule needs 10, and the console says so
    args = ["apply", str(run_folder / "bundle"), "--features", str(study.parent / "features.csv"),
            "--clinical", str(study.parent / "clinical.csv")]
    capsys.readouterr()
    assert main([*args, "--out", str(tmp_path / "few"), "--replicates", "5"]) == 0
    assert "No interval: fewer than 10 usable resamples of the external patients" in capsys.readouterr().out
    assert main([*args, "--out", str(tmp_path / "enough"), "--replicates", "10"]) == 0
    out = capsys.readouterr().out
    assert "No interval" not in out and " to " in out.split("IBS")[1].splitlines()[1]
    # the models by their labels, the recalibration table's horizons with the study's unit (as `run` prints them)
    from workbench.report.bundle import load_bundle
    from workbench.units import time_phrase

    spec = load_bundle(run_folder / "bundle").spec
    assert "Clinical Cox" in out.split("IBS")[1].splitlines()[1]
    head = out.split("after recalibration on this cohort (apparent):")[1].splitlines()[1]
    assert head.split() == " ".join(time_phrase(h, spec.data.time_unit) for h in spec.horizons).split()


def test_estimate_alive_at_a_visit_prints_the_conditional_chances(run_folder, capsys):
    from workbench.report.bundle import load_bundle

    h = load_bundle(run_folder / "bundle").spec.horizons
    code = main(["estimate", str(run_folder / "bundle"), "--model", "clinical", "--value", "age=60",
                 "--value", "tgrade=II", "--value", "horTh=no", "--alive-at", f"{h[0]:g}"])
    assert code == 0
    out = capsys.readouterr().out
    assert f"Alive at {h[0]:g} " in out and "chance of being alive at" in out
    assert out.count("CI") >= len(h) + len(h) - 1  # every horizon, and every later one given the visit
    assert out.rstrip().splitlines()[-1].startswith("Caution:")
    assert main(["estimate", str(run_folder / "bundle"), "--model", "clinical", "--value", "age=60",
                 "--value", "tgrade=II", "--value", "horTh=no", "--alive-at", f"{h[-1]:g}"]) == 2
    assert "the time the patient is known to be alive (--alive-at) must be after 0 and before the last horizon" in capsys.readouterr().err
