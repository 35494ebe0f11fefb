"""Every reader rejects its malformed corpus (tests/data/malformed_logs/) with one clear
InputError naming the file, the place and what to do -- through ``read_logs``."""
from __future__ import annotations

from pathlib import Path

import pyarrow as pa
import pyarrow.parquet as pq
import pytest

from sync.errors import InputError
from sync.log_spec import log_spec_from_toml
from sync.logs import read_logs

CORPUS = Path(__file__).resolve().parents[1] / "data" / "malformed_logs"
CSV_COLUMNS = {"learner": "trainee", "time": "timestamp", "action": "event", "duration": "seconds"}

# (file, format, expected words in the message).  Each file is hand-written and tiny.
CASES = [
    ("empty.csv", "csv", ["empty.csv", "is empty"]),
    ("header_only.csv", "csv", ["header_only.csv", "no rows"]),
    ("missing_column.csv", "csv", ["missing_column.csv", "header", "time = 'timestamp'"]),
    ("bad_time.csv", "csv", ["bad_time.csv", "column timestamp, row 3", "'yesterday' could not be read as a time", "time_format", "study.toml"]),
    ("naive_without_timezone.csv", "csv", ["naive_without_timezone.csv", "timezone"]),
    ("bad_duration.csv", "csv", ["bad_duration.csv", "column seconds, row 2", "'about five'"]),
    ("not_utf8.csv", "csv", ["not_utf8.csv", "encoding"]),
    ("empty.jsonl", "xapi", ["empty.jsonl", "is empty"]),
    ("blank_lines.jsonl", "xapi", ["blank_lines.jsonl", "is empty"]),
    ("malformed_line3.jsonl", "xapi", ["malformed_line3.jsonl", "line 3", "malformed JSON"]),
    ("malformed_array_line7.json", "xapi", ["malformed_array_line7.json", "line 7", "malformed JSON"]),
    ("no_verb.jsonl", "xapi", ["no_verb.jsonl", "line 2", "verb.id"]),
    ("duration_in_months.jsonl", "xapi", ["duration_in_months.jsonl", "line 1", "months"]),
    ("bad_timestamp.jsonl", "xapi", ["bad_timestamp.jsonl", "line 2", "'March 2nd, 9am' could not be read as an ISO 8601 time"]),
    ("not_statements.json", "xapi", ["not_statements.json", "line 1", "not a statement"]),
    ("not_parquet.parquet", "parquet", ["not_parquet.parquet", "not a readable Parquet file"]),
]


@pytest.mark.parametrize(("name", "log_format", "needles"), CASES, ids=[case[0] for case in CASES])
def test_malformed_file_is_rejected_with_a_clear_message(name, log_format, needles):
    columns = dict(CSV_COLUMNS)
    if name != "bad_duration.csv":
        columns.pop("duration")
    entry = {"path": name, "format": log_format}
    if log_format != "xapi":
        entry["columns"] = columns
    spec = log_spec_from_toml(entry, CORPUS, 1)
    with pytest.raises(InputError) as caught:
        read_logs([spec])
    line = caught.value.line()
    assert "\n" not in line
    for needle in needles:
        assert needle in line, (needle, line)


def test_missing_log_file_names_the_path():
    spec = log_spec_from_toml({"path": "nowhere.csv", "format": "csv",
                               "columns": {"learner": "a", "time": "b"}}, CORPUS, 1)
    with pytest.raises(InputError, match="nowhere.csv.*does not exist"):
        read_logs([spec])


def test_parquet_without_the_mapped_column_or_rows_is_rejected(tmp_path):
    pq.write_table(pa.table({"trainee": ["n-0001"], "when": [1.0]}), tmp_path / "renamed.parquet")
    pq.write_table(pa.table({"trainee": pa.array([], pa.string()), "timestamp": pa.array([], pa.float64())}),
                   tmp_path / "no_rows.parquet")
    columns = {"learner": "trainee", "time": "timestamp"}
    renamed = log_spec_from_toml({"path": "renamed.parquet", "format": "parquet", "columns": columns}, tmp_path, 1)
    with pytest.raises(InputError, match=r"schema: has no column for time = 'timestamp'"):
        read_logs([renamed])
    empty = log_spec_from_toml({"path": "no_rows.parquet", "format": "parquet", "columns": columns}, tmp_path, 1)
    with pytest.raises(InputError, match="has no rows"):
        read_logs([empty])


@pytest.mark.parametrize(("entry", "needle"), [
    ({"path": "a.csv", "format": "csv", "colour": "red", "columns": {"learner": "a", "time": "b"}}, "key colour"),
    ({"path": "a.csv", "format": "excel"}, "key format"),
    ({"path": "a.csv", "format": "csv", "timezone": "Berlin", "columns": {"learner": "a", "time": "b"}}, "key timezone"),
    ({"path": "a.csv", "format": "csv", "encoding": "klingon", "columns": {"learner": "a", "time": "b"}}, "key encoding"),
    ({"path": "a.csv", "format": "csv", "delimiter": ";;", "columns": {"learner": "a", "time": "b"}}, "key delimiter"),
    ({"path": "a.csv", "format": "csv", "time_format": "unix", "columns": {"learner": "a", "time": "b"}}, "key time_format"),
    ({"path": "a.csv", "format": "csv", "columns": {"learner": "a"}}, "key columns.time"),
    ({"path": "a.csv", "format": "csv", "columns": {"learner": "a", "time": "b", "mood": "c"}}, "key columns.mood"),
    ({"path": "a.csv", "format": "csv"}, "key columns"),
    ({"path": "a.json", "format": "xapi", "columns": {"learner": "a", "time": "b"}}, "key columns"),
    ({"format": "csv"}, "key path"),
])
def test_bad_logs_entry_names_entry_and_key(entry, needle):
    with pytest.raises(InputError) as caught:
        log_spec_from_toml(entry, Path("."), 4)
    assert caught.value.file == "study.toml"
    assert f"[[logs]] #4 {needle}" in caught.value.line()


@pytest.mark.parametrize(("value", "hinted"), [("1,5", True), ("-0,25", True), ("about five", False), ("1,500,000", False)])
def test_a_decimal_comma_is_named_as_such(tmp_path, value, hinted):
    """A spreadsheet set to a decimal comma writes ';' between cells and '1,5' for one and a
    half (common practice in much of Europe): the message says so and how to fix it."""
    (tmp_path / "log.csv").write_text(f"trainee;timestamp;event;seconds\nn-1;2026-03-02T08:00:00Z;hint;2\n"
                                      f"n-1;2026-03-02T08:00:05Z;hint;{value}\n")
    spec = log_spec_from_toml({"path": "log.csv", "format": "csv", "columns": CSV_COLUMNS}, tmp_path, 1)
    with pytest.raises(InputError) as caught:
        read_logs([spec])
    line = caught.value.line()
    assert "column seconds, row 2" in line and repr(value) in line
    assert ("decimal comma" in line) == hinted
