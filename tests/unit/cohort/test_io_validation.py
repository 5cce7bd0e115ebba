"""One test per validation rule of cohort reading, asserting the message text.

Tables are the GBSG2 data shipped with scikit-survival (see conftest.py), broken
on purpose in each test.
"""

from __future__ import annotations

import hashlib
import warnings

import numpy as np
import pytest

from workbench.cohort.io import ColumnMap, read_cohort, read_table
from workbench.errors import CohortError, DataQualityWarning


def read(pair, cols, **kw):
    return read_cohort(pair.features, pair.clinical, cols, **kw)


def test_reads_gbsg2_and_joins(gbsg2_tables, gbsg2_columns, gbsg2_frames):
    _, _, y = gbsg2_frames
    c = read(gbsg2_tables, gbsg2_columns)
    assert c.n == 686 and c.n_events == int(y["cens"].sum()) == 299
    np.testing.assert_allclose(c.time, y["time"])
    assert c.feature_names == ["age", "tsize", "pnodes", "progrec", "estrec"]
    assert list(c.clinical.columns) == ["horTh", "menostat", "tgrade"]
    assert c.y.dtype.names == ("event", "time")
    assert len(c.source.data_hash) == 64


@pytest.mark.parametrize("suffix", [".tsv", ".parquet", ".xlsx"])
def test_reads_other_formats(gbsg2_tables, gbsg2_columns, suffix):
    pair = gbsg2_tables.write(suffix=suffix)
    c = read(pair, gbsg2_columns)
    assert c.n == 686 and c.n_events == 299


def test_join_follows_clinical_order_when_feature_rows_are_shuffled(gbsg2_tables, gbsg2_columns):
    base = read(gbsg2_tables, gbsg2_columns)
    feat = gbsg2_tables.feat_df.sample(frac=1.0, random_state=3)
    c = read(gbsg2_tables.write(feat_df=feat), gbsg2_columns)
    np.testing.assert_array_equal(c.ids, base.ids)
    np.testing.assert_allclose(c.features.to_numpy(), base.features.to_numpy())


def test_event_as_zero_one_and_true_false(gbsg2_tables):
    clin = gbsg2_tables.clin_df.copy()
    clin["status"] = np.where(clin["status"] == "recurrence", "1", "0")
    c = read(gbsg2_tables.write(clin_df=clin), ColumnMap(time="time_days", event="status", time_unit="days"))
    assert c.n_events == 299
    clin["status"] = np.where(clin["status"] == "1", "TRUE", "false")
    c = read(gbsg2_tables.write(clin_df=clin), ColumnMap(time="time_days", event="status", time_unit="days"))
    assert c.n_events == 299


def test_unreadable_file(tmp_path, gbsg2_columns, gbsg2_tables):
    bad = tmp_path / "broken.xlsx"
    bad.write_bytes(b"this is not a spreadsheet")
    with pytest.raises(CohortError, match=r"broken\.xlsx: cannot be read as EXCEL"):
        read_cohort(bad, gbsg2_tables.clinical, gbsg2_columns)


def test_missing_file_and_unknown_format(tmp_path):
    with pytest.raises(CohortError, match="file not found"):
        read_table(tmp_path / "nope.csv")
    (tmp_path / "x.json").write_text("{}")
    with pytest.raises(CohortError, match=r"unknown table format '\.json'"):
        read_table(tmp_path / "x.json")


def test_empty_file(tmp_path):
    (tmp_path / "empty.csv").write_text("")
    with pytest.raises(CohortError, match="empty"):
        read_table(tmp_path / "empty.csv")
    (tmp_path / "header.csv").write_text("a,b\n")
    with pytest.raises(CohortError, match="header but no rows"):
        read_table(tmp_path / "header.csv")


def test_missing_time_column_suggests_close_name(gbsg2_tables):
    cols = ColumnMap(time="time_day", event="status", event_codes=("recurrence",), censor_codes=("censored",))
    with pytest.raises(CohortError, match=r"clinical\.csv: the time column 'time_day' is not in the table\. Did you mean 'time_days'"):
        read(gbsg2_tables, cols)


def test_missing_event_and_id_columns(gbsg2_tables):
    with pytest.raises(CohortError, match=r"the event column 'state' is not in the table\. Did you mean 'status'"):
        read(gbsg2_tables, ColumnMap(time="time_days", event="state"))
    with pytest.raises(CohortError, match=r"the patient id column 'patientid' is not in the table\. Did you mean 'patient_id'"):
        read(gbsg2_tables, ColumnMap(id="patientid", time="time_days", event="status"))


def test_duplicate_ids_are_listed(gbsg2_tables, gbsg2_columns):
    clin = gbsg2_tables.clin_df.copy()
    clin.loc[5, "patient_id"] = clin.loc[2, "patient_id"]
    with pytest.raises(CohortError, match=r"1 patient id\(s\) appear more than once: GB0002 \(rows 4, 7\)"):
        read(gbsg2_tables.write(clin_df=clin), gbsg2_columns)


def test_ids_in_one_table_only_stop_by_default(gbsg2_tables, gbsg2_columns):
    feat = gbsg2_tables.feat_df.iloc[3:].copy()
    with pytest.raises(CohortError, match=r"3 id\(s\) only in .*clinical\.csv \(first: GB0000, GB0001, GB0002\); 683 ids are in both"):
        read(gbsg2_tables.write(feat_df=feat), gbsg2_columns)


def test_ids_in_one_table_only_can_keep_intersection(gbsg2_tables, gbsg2_columns):
    feat = gbsg2_tables.feat_df.iloc[3:].copy()
    with pytest.warns(DataQualityWarning, match="Keeping the 683 matched patients"):
        c = read(gbsg2_tables.write(feat_df=feat), gbsg2_columns, on_unmatched="intersect")
    assert c.n == 683
    assert c.source.dropped_ids == ("GB0000", "GB0001", "GB0002")


def test_negative_time(gbsg2_tables, gbsg2_columns):
    clin = gbsg2_tables.clin_df.copy()
    clin["time_days"] = clin["time_days"].astype(object)
    clin.loc[[0, 9], "time_days"] = -3
    with pytest.raises(CohortError, match=r"column 'time_days': negative follow-up time in rows 2, 11"):
        read(gbsg2_tables.write(clin_df=clin), gbsg2_columns)


def test_missing_time(gbsg2_tables, gbsg2_columns):
    clin = gbsg2_tables.clin_df.copy()
    clin["time_days"] = clin["time_days"].astype(object)
    clin.loc[4, "time_days"] = None
    with pytest.raises(CohortError, match=r"column 'time_days': follow-up time is missing in row 6\b"):
        read(gbsg2_tables.write(clin_df=clin), gbsg2_columns)


def test_text_in_time_column(gbsg2_tables, gbsg2_columns):
    clin = gbsg2_tables.clin_df.copy()
    clin["time_days"] = clin["time_days"].astype(object)
    clin.loc[1, "time_days"] = "about a year"
    with pytest.raises(CohortError, match=r"follow-up time is not a number in row 3 \(values such as 'about a year'\)"):
        read(gbsg2_tables.write(clin_df=clin), gbsg2_columns)


def test_event_value_outside_codes(gbsg2_tables, gbsg2_columns):
    clin = gbsg2_tables.clin_df.copy()
    clin.loc[7, "status"] = "lost"
    with pytest.raises(CohortError, match=r"event values 'lost' in row 9 are not among the allowed codes \('censored', 'recurrence'\)"):
        read(gbsg2_tables.write(clin_df=clin), gbsg2_columns)


def test_event_words_without_codes(gbsg2_tables):
    with pytest.raises(CohortError, match=r"are not 0/1 or true/false\. If the column holds words"):
        read(gbsg2_tables, ColumnMap(time="time_days", event="status"))


def test_missing_event(gbsg2_tables, gbsg2_columns):
    clin = gbsg2_tables.clin_df.copy()
    clin.loc[0, "status"] = None
    with pytest.raises(CohortError, match=r"event status is missing in row 2\b"):
        read(gbsg2_tables.write(clin_df=clin), gbsg2_columns)


def test_non_numeric_feature(gbsg2_tables, gbsg2_columns):
    feat = gbsg2_tables.feat_df.copy()
    feat["tsize"] = feat["tsize"].astype(object)
    feat.loc[12, "tsize"] = "n/a?"
    with pytest.raises(CohortError, match=r"features\.csv: imaging feature columns must be numeric; text found in 1 column\(s\): 'tsize' \(row 14: 'n/a\?'\)"):
        read(gbsg2_tables.write(feat_df=feat), gbsg2_columns)


def test_constant_and_empty_features_stop_or_drop(gbsg2_tables, gbsg2_columns):
    feat = gbsg2_tables.feat_df.copy()
    feat["flat"] = 1.0
    feat["blank"] = np.nan
    pair = gbsg2_tables.write(feat_df=feat)
    with pytest.raises(CohortError, match=r"2 feature column\(s\) carry no information \(all values missing: blank; the same value for every patient: flat\)"):
        read(pair, gbsg2_columns)
    with pytest.warns(DataQualityWarning, match="They were dropped"):
        c = read(pair, gbsg2_columns, drop_unusable_features=True)
    assert "flat" not in c.feature_names and "blank" not in c.feature_names


def test_zero_events(gbsg2_tables, gbsg2_columns):
    clin = gbsg2_tables.clin_df.copy()
    clin["status"] = "censored"
    with pytest.raises(CohortError, match=r"no events at all among 686 patients"):
        read(gbsg2_tables.write(clin_df=clin), gbsg2_columns)


def test_fewer_than_ten_events(gbsg2_tables, gbsg2_columns):
    clin = gbsg2_tables.clin_df.copy()
    ev = np.flatnonzero(clin["status"] == "recurrence")
    clin.loc[ev[9:], "status"] = "censored"
    with pytest.raises(CohortError, match=r"only 9 events among 686 patients; at least 10 are needed"):
        read(gbsg2_tables.write(clin_df=clin), gbsg2_columns)


def test_missing_centre_column_and_missing_centre_values(gbsg2_tables, gbsg2_columns):
    from dataclasses import replace

    with pytest.raises(CohortError, match=r"the centre column 'hospital' is not in the table"):
        read(gbsg2_tables, replace(gbsg2_columns, centre="hospital"))
    clin = gbsg2_tables.clin_df.copy()
    clin["hospital"] = "A"
    clin.loc[3, "hospital"] = None
    with pytest.raises(CohortError, match=r"column 'hospital': missing values in row 5\b"):
        read(gbsg2_tables.write(clin_df=clin), replace(gbsg2_columns, centre="hospital"))


def test_missing_feature_values_warn(gbsg2_tables, gbsg2_columns):
    feat = gbsg2_tables.feat_df.copy()
    feat.loc[[1, 2], "estrec"] = np.nan
    with pytest.warns(DataQualityWarning, match=r"2 missing imaging values in 1 column\(s\) \(first: estrec\)"):
        c = read(gbsg2_tables.write(feat_df=feat), gbsg2_columns)
    assert c.features["estrec"].isna().sum() == 2


def test_input_files_are_never_modified(gbsg2_tables, gbsg2_columns):
    def digest(p):
        return hashlib.sha256(p.read_bytes()).hexdigest(), p.stat().st_mtime_ns

    before = [digest(gbsg2_tables.features), digest(gbsg2_tables.clinical)]
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        read(gbsg2_tables, gbsg2_columns)
    after = [digest(gbsg2_tables.features), digest(gbsg2_tables.clinical)]
    assert before == after


def test_data_hash_changes_with_content(gbsg2_tables, gbsg2_columns):
    h1 = read(gbsg2_tables, gbsg2_columns).source.data_hash
    feat = gbsg2_tables.feat_df.copy()
    feat.loc[0, "age"] += 1
    h2 = read(gbsg2_tables.write(feat_df=feat), gbsg2_columns).source.data_hash
    assert h1 != h2
