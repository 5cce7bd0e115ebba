"""One test per class of silently-wrong input: read correctly and said, or refused with exit status 2.

Tables are the GBSG2 data shipped with scikit-survival (Schumacher et al. 1994), split into a
"features" and a "clinical" table as in tests/conftest.py; each test rewrites them in the form
under test. Every test also checks that the input files are byte-identical afterwards.
"""

from __future__ import annotations

import hashlib
import warnings

import numpy as np
import pandas as pd
import pytest

from workbench.cli import main
from workbench.cohort.io import ColumnMap, read_cohort
from workbench.errors import CohortError, InputFormatWarning, UnitWarning

GBSG2_ARGS = ["--id", "patient_id", "--time", "time_days", "--time-unit", "days", "--event", "status",
              "--event-codes", "recurrence", "--censor-codes", "censored"]


def _digests(*paths):
    return [hashlib.sha256(p.read_bytes()).hexdigest() for p in paths]


def _inspect(pair, capsys, *extra, time_unit=None):
    """Run `workbench inspect` on a table pair; return (exit code, stderr), asserting unchanged bytes."""
    before = _digests(pair.features, pair.clinical)
    args = list(GBSG2_ARGS)
    if time_unit:
        args[args.index("--time-unit") + 1] = time_unit
    code = main(["inspect", "--features", str(pair.features), "--clinical", str(pair.clinical), *args, *extra])
    assert _digests(pair.features, pair.clinical) == before, "an input file was modified"
    captured = capsys.readouterr()
    assert "Traceback" not in captured.err
    return code, captured.err


def test_semicolon_and_decimal_comma_are_read_and_said(tmp_path, gbsg2_tables, gbsg2_columns, capsys):
    feat = gbsg2_tables.feat_df.copy()
    feat["tsize"] = feat["tsize"] + 0.25  # give the column decimals, as a measured feature has
    f = tmp_path / "features_eu.csv"
    c = tmp_path / "clinical_eu.csv"
    feat.to_csv(f, sep=";", decimal=",", index=False)
    gbsg2_tables.clin_df.to_csv(c, sep=";", decimal=",", index=False)
    before = _digests(f, c)
    with pytest.warns(InputFormatWarning, match=r"features_eu\.csv: read as semicolon-separated; numbers with a "
                                                r"decimal comma were read with a decimal point in 5 column\(s\): "
                                                r"'age', 'tsize', 'pnodes', 'progrec', 'estrec'"):
        cohort = read_cohort(f, c, gbsg2_columns)
    assert _digests(f, c) == before
    np.testing.assert_allclose(cohort.features["tsize"].to_numpy(), feat["tsize"].to_numpy())
    np.testing.assert_allclose(cohort.time, gbsg2_tables.clin_df["time_days"].to_numpy())
    pair = type(gbsg2_tables)(f, c, feat, gbsg2_tables.clin_df)
    code, err = _inspect(pair, capsys)
    assert code == 0
    assert "warning (InputFormatWarning):" in err and "semicolon-separated" in err


def test_mixed_decimal_marks_are_refused_with_a_hint(tmp_path, gbsg2_tables, capsys):
    clin = gbsg2_tables.clin_df.copy()
    clin["time_days"] = clin["time_days"].astype(str)
    clin.loc[3, "time_days"] = "1814,5"
    pair = gbsg2_tables.write(clin_df=clin, suffix=".tsv")
    code, err = _inspect(pair, capsys)
    assert code == 2
    assert "clinical.tsv, column 'time_days': follow-up time is not a number in row 5" in err
    assert "decimal comma" in err


def test_spaces_around_ids_are_removed_and_counted(gbsg2_tables, capsys):
    clin = gbsg2_tables.clin_df.copy()
    clin.loc[[0, 4, 9], "patient_id"] = [" GB0000", "GB0004 ", "  GB0009  "]
    pair = gbsg2_tables.write(clin_df=clin)
    code, err = _inspect(pair, capsys)
    assert code == 0
    assert ("clinical.csv, column 'patient_id': spaces around 3 patient id(s) were removed (rows 2, 6, 11;"
            in err)


def test_workbook_with_several_sheets_needs_a_sheet_name(tmp_path, gbsg2_tables, capsys):
    clin = gbsg2_tables.clin_df
    book = tmp_path / "clinical.xlsx"
    with pd.ExcelWriter(book) as xw:  # a cohort split over two sheets, as users sometimes keep it
        clin.iloc[:400].to_excel(xw, sheet_name="centre A", index=False)
        clin.iloc[400:].to_excel(xw, sheet_name="centre B", index=False)
    pair = type(gbsg2_tables)(gbsg2_tables.features, book, gbsg2_tables.feat_df, clin)
    code, err = _inspect(pair, capsys)
    assert code == 2
    assert "clinical.xlsx: the workbook has 2 sheets holding data: 'centre A' (400 rows), 'centre B' (286 rows)" in err
    assert "--clinical-sheet" in err and "clinical_sheet" in err
    # naming a sheet reads that sheet only (the ids of the other sheet then do not match: said, not hidden)
    code, err = _inspect(pair, capsys, "--clinical-sheet", "centre A", "--keep-matched")
    assert code == 0
    assert "286 id(s) only in" in err


def test_workbook_with_one_data_sheet_says_which_was_read(tmp_path, gbsg2_tables, gbsg2_columns):
    book = tmp_path / "clinical.xlsx"
    with pd.ExcelWriter(book) as xw:
        pd.DataFrame().to_excel(xw, sheet_name="notes", index=False)
        gbsg2_tables.clin_df.to_excel(xw, sheet_name="patients", index=False)
    with pytest.warns(InputFormatWarning, match="read sheet 'patients', the only one of 2 sheets that holds data"):
        cohort = read_cohort(gbsg2_tables.features, book, gbsg2_columns)
    assert cohort.n == 686
    with pytest.raises(CohortError, match=r"no sheet 'Patients'; its sheets are 'notes', 'patients'"):
        read_cohort(gbsg2_tables.features, book, gbsg2_columns, clinical_sheet="Patients")


def test_duplicate_column_names_are_an_error(tmp_path, gbsg2_tables, capsys):
    text = gbsg2_tables.features.read_text().splitlines()
    text[0] = text[0].replace("pnodes", "tsize")  # header: patient_id,age,tsize,tsize,progrec,estrec
    gbsg2_tables.features.write_text("\n".join(text) + "\n")
    code, err = _inspect(gbsg2_tables, capsys)
    assert code == 2
    assert "features.csv: column names appear more than once in the header: 'tsize' in columns C, D" in err
    assert "nothing was renamed automatically" in err


def test_unnamed_column_with_values_is_an_error(tmp_path, gbsg2_tables, capsys):
    gbsg2_tables.feat_df.to_csv(gbsg2_tables.features, index=True)  # row numbers saved as an unnamed column
    code, err = _inspect(gbsg2_tables, capsys)
    assert code == 2
    assert "features.csv: column(s) A hold values but have no name in the header row" in err


def test_column_in_both_tables_needs_a_mapping(gbsg2_tables, capsys):
    clin = gbsg2_tables.clin_df.assign(age=gbsg2_tables.feat_df["age"])
    pair = gbsg2_tables.write(clin_df=clin)
    code, err = _inspect(pair, capsys)
    assert code == 2
    assert "column(s) 'age' appear in both" in err and "would be used twice" in err
    assert "--take-from age=clinical" in err and "[data.take_from]" in err
    code, _ = _inspect(pair, capsys, "--take-from", "age=clinical")
    assert code == 0
    cols = ColumnMap(id="patient_id", time="time_days", event="status", time_unit="days",
                     event_codes=("recurrence",), censor_codes=("censored",), take_from={"age": "clinical"})
    cohort = read_cohort(pair.features, pair.clinical, cols)
    assert "age" in cohort.clinical.columns and "age" not in cohort.feature_names


@pytest.mark.parametrize("value, what", [("inf", "infinite follow-up time in row 4"),
                                         ("1e308", "follow-up longer than 120 years in row 4")])
def test_infinite_or_absurd_times_are_errors(gbsg2_tables, capsys, value, what):
    clin = gbsg2_tables.clin_df.astype({"time_days": object})
    clin.loc[2, "time_days"] = value
    pair = gbsg2_tables.write(clin_df=clin)
    code, err = _inspect(pair, capsys)
    assert code == 2
    assert f"clinical.csv, column 'time_days': {what}" in err


@pytest.mark.parametrize("value", ["inf", "-1e308"])
def test_infinite_or_absurd_features_are_errors(gbsg2_tables, capsys, value):
    feat = gbsg2_tables.feat_df.astype({"estrec": object})
    feat.loc[[5, 6], "estrec"] = value
    pair = gbsg2_tables.write(feat_df=feat)
    code, err = _inspect(pair, capsys)
    assert code == 2
    assert "features.csv: infinite or absurdly large values (beyond 1e+15 in size) in 1 imaging feature column(s): " \
           "'estrec' (rows 7, 8" in err


def test_zero_follow_up_is_an_error(gbsg2_tables, capsys):
    clin = gbsg2_tables.clin_df.copy()
    clin.loc[[10, 20], "time_days"] = 0.0
    pair = gbsg2_tables.write(clin_df=clin)
    code, err = _inspect(pair, capsys)
    assert code == 2
    assert "clinical.csv, column 'time_days': follow-up time is 0 in rows 12, 22" in err
    assert "Remove these rows, or give the real time" in err


def test_days_declared_as_months_name_the_likely_unit(gbsg2_tables, capsys):
    code, err = _inspect(gbsg2_tables, capsys, time_unit="months")
    assert code == 2
    assert "follow-up longer than 120 years" in err
    assert 'If the times are in days' in err and "--time-unit days" in err


def test_median_follow_up_in_another_unit_warns(gbsg2_tables, gbsg2_columns):
    clin = gbsg2_tables.clin_df.copy()
    clin["time_days"] = clin["time_days"] / 30.4375  # months, then declared as years below
    pair = gbsg2_tables.write(clin_df=clin)
    cols = ColumnMap(id="patient_id", time="time_days", event="status", time_unit="years",
                     event_codes=("recurrence",), censor_codes=("censored",))
    with pytest.warns(UnitWarning, match=r"the median follow-up time in the table is .* years .* If the times are "
                                         r"in months"):
        read_cohort(pair.features, pair.clinical, cols)


def test_plain_gbsg2_reads_without_any_input_warning(gbsg2_tables, gbsg2_columns):
    with warnings.catch_warnings():
        warnings.simplefilter("error", InputFormatWarning)
        warnings.simplefilter("error", UnitWarning)
        assert read_cohort(gbsg2_tables.features, gbsg2_tables.clinical, gbsg2_columns).n == 686


def test_undetectable_delimiter_is_explained(tmp_path, gbsg2_tables, capsys):
    lines = gbsg2_tables.clinical.read_text().replace(",", ";").splitlines()
    lines[3] += ";extra"  # one row with a field too many: no delimiter splits every line alike
    gbsg2_tables.clinical.write_text("\n".join(lines) + "\n")
    code, err = _inspect(gbsg2_tables, capsys)
    assert code == 2
    assert "clinical.csv: the patient id column 'patient_id' is not in the table." in err
    assert "several names run together" in err and "Save it as a comma-separated file" in err


def test_summary_file_never_overwrites_an_input_table(gbsg2_tables, capsys):
    code, err = _inspect(gbsg2_tables, capsys, "--json", str(gbsg2_tables.clinical))
    assert code == 2
    assert f"--json {gbsg2_tables.clinical} is one of the input tables" in err
