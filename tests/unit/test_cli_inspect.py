"""The command line: exit status 0 on success, 2 with a plain message (no traceback) on bad input."""

from __future__ import annotations

import subprocess
import sys

import pytest

from workbench.cli import main


def base_args(pair):
    return [
        "inspect",
        "--features", str(pair.features),
        "--clinical", str(pair.clinical),
        "--time", "time_days", "--time-unit", "days",
        "--event", "status", "--event-codes", "recurrence", "--censor-codes", "censored",
    ]


def test_inspect_prints_summary(gbsg2_tables, capsys, tmp_path):
    out_json = tmp_path / "summary.json"
    code = main(base_args(gbsg2_tables) + ["--horizons", "365,1825", "--json", str(out_json)])
    out = capsys.readouterr().out
    assert code == 0
    assert "Patients 686   events 299" in out
    assert "at 1825 days" in out
    assert "Caution: Research use only" in out
    assert out_json.exists() and '"n_events": 299' in out_json.read_text()


def test_inspect_clinical_only_without_features_table(gbsg2_tables, capsys, tmp_path):
    # GBSG2 (scikit-survival's load_gbsg2): 686 patients, 299 recurrences. Its clinical table here
    # holds horTh (2 levels), menostat (2) and tgrade (3): 1 + 1 + 2 = 4 candidate parameters.
    args = base_args(gbsg2_tables)
    i = args.index("--features")
    del args[i:i + 2]
    out_json = tmp_path / "summary.json"
    code = main(args + ["--horizons", "365", "--json", str(out_json)])
    out = capsys.readouterr().out
    assert code == 0
    assert "Patients 686   events 299" in out
    assert "Imaging features: none" in out
    assert "74.8 (299 events / 4 parameters" in out
    assert "Caution: Research use only" in out
    assert '"n_features": 0' in out_json.read_text()


def _break(pair, kind):
    feat, clin = pair.feat_df.copy(), pair.clin_df.copy()
    args = base_args(pair)
    if kind == "missing file":
        args[2] = str(pair.features.with_name("absent.csv"))
        return args, "file not found"
    if kind == "wrong time column":
        args[args.index("time_days")] = "time_d"
        return args, "Did you mean 'time_days'"
    if kind == "duplicate id":
        clin.loc[1, "patient_id"] = clin.loc[0, "patient_id"]
        msg = "appear more than once"
    elif kind == "unmatched ids":
        feat = feat.iloc[5:]
        msg = "--keep-matched"
    elif kind == "negative time":
        clin["time_days"] = clin["time_days"].astype(object)
        clin.loc[0, "time_days"] = -1
        msg = "negative follow-up time"
    elif kind == "text time":
        clin["time_days"] = clin["time_days"].astype(object)
        clin.loc[0, "time_days"] = "soon"
        msg = "not a number"
    elif kind == "bad event code":
        clin.loc[0, "status"] = "unknown"
        msg = "not among the allowed codes"
    elif kind == "text feature":
        feat["age"] = feat["age"].astype(object)
        feat.loc[0, "age"] = "old"
        msg = "must be numeric"
    elif kind == "constant feature":
        feat["flat"] = 0.0
        msg = "carry no information"
    elif kind == "no events":
        clin["status"] = "censored"
        msg = "no events at all"
    elif kind == "garbage file":
        pair.features.write_bytes(b"\x00\x01\x02not,a\ncsv")
        args = base_args(pair)
        p = pair.features.with_suffix(".parquet")
        p.write_bytes(b"definitely not parquet")
        args[2] = str(p)
        return args, "cannot be read as PARQUET"
    new = pair.write(feat_df=feat, clin_df=clin)
    return base_args(new), msg


CASES = [
    "missing file", "wrong time column", "duplicate id", "unmatched ids", "negative time",
    "text time", "bad event code", "text feature", "constant feature", "no events", "garbage file",
]


@pytest.mark.parametrize("kind", CASES)
def test_bad_input_exits_2_without_traceback(gbsg2_tables, capsys, kind):
    args, expected = _break(gbsg2_tables, kind)
    code = main(args)
    err = capsys.readouterr().err
    assert code == 2
    assert err.startswith("error: ")
    assert expected in err
    assert "Traceback" not in err


def test_bad_horizons_option(gbsg2_tables, capsys):
    assert main(base_args(gbsg2_tables) + ["--horizons", "one year"]) == 2
    assert "numbers separated by commas" in capsys.readouterr().err
    assert main(base_args(gbsg2_tables) + ["--horizons", "99999"]) == 2
    assert "beyond the longest follow-up" in capsys.readouterr().err


def test_real_process_exit_code_and_stderr(gbsg2_tables):
    args, _ = _break(gbsg2_tables, "wrong time column")
    proc = subprocess.run([sys.executable, "-m", "workbench.cli", *args], capture_output=True, text=True)
    assert proc.returncode == 2
    assert "Traceback" not in proc.stderr and "error:" in proc.stderr


def test_no_command_prints_help_and_exits_2(capsys):
    assert main([]) == 2
    assert "inspect" in capsys.readouterr().out
