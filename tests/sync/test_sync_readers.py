"""Readers -> EVENTS, checked against outside references: xAPI 1.0.3 examples, zoneinfo,
DuckDB reading the same Parquet file."""
from __future__ import annotations

import json
from datetime import datetime, timezone
from zoneinfo import ZoneInfo

import duckdb
import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq
import pytest

from sync.errors import InputError
from sync.log_spec import log_spec_from_toml
from sync.logs import read_logs
from sync.tables import EVENT_COLUMNS
from sync.xapi_reader import iso_duration_seconds


def utc_ns(*parts, tz=timezone.utc) -> int:
    """Reference instant computed by the standard library, not by fieldmark."""
    return int(datetime(*parts, tzinfo=tz).timestamp()) * 10**9


def test_csv_with_semicolons_mixed_offsets_and_outcome_words(tmp_path):
    (tmp_path / "north.csv").write_text(
        "trainee;timestamp;event;result;step;skill;seconds;unused\n"
        "n-0002;2026-03-02T09:00:05+01:00;wire;RIGHT;s1;breaker;2.5;x\n"
        "n-0001;2026-03-02T08:00:00Z;check;wrong;s2;;;x\n"
        "n-0001;2026-03-02 09:00:01;done;finished;s3;;1;x\n", encoding="utf-8")
    spec = log_spec_from_toml({"path": "north.csv", "format": "csv", "timezone": "Europe/Berlin",
                               "columns": {"learner": "trainee", "time": "timestamp", "action": "event",
                                           "outcome": "result", "item": "step", "skill": "skill",
                                           "duration": "seconds"}}, tmp_path, 1)
    events, report = read_logs([spec], known_log_ids=["n-0001"])
    assert list(events.columns) == list(EVENT_COLUMNS)
    # Sorted by (learner, time): n-0001's two rows first.
    assert list(events["learner"].astype(str)) == ["n-0001", "n-0001", "n-0002"]
    assert list(events["time_ns"]) == [utc_ns(2026, 3, 2, 8, 0, 0), utc_ns(2026, 3, 2, 8, 0, 1),
                                       utc_ns(2026, 3, 2, 8, 0, 5)]
    assert list(events["outcome"].astype(str)) == ["incorrect", "completed", "correct"]
    assert list(events["source_row"]) == [2, 3, 1]
    assert np.isnan(events["duration_s"].iloc[0]) and events["duration_s"].iloc[2] == 2.5
    assert report.rows_per_file == {str(tmp_path / "north.csv"): 3}
    assert report.unknown_learners == {"n-0002": 1}


def test_csv_epoch_milliseconds_and_declared_encoding(tmp_path):
    (tmp_path / "south.csv").write_bytes("who,ms,event\nn-0003,1772438400000,Schalter geprüft\n".encode("cp1252"))
    spec = log_spec_from_toml({"path": "south.csv", "format": "csv", "encoding": "cp1252",
                               "columns": {"learner": "who", "time": "ms", "action": "event"}}, tmp_path, 1)
    events, _ = read_logs([spec])
    assert events["time_ns"].iloc[0] == utc_ns(2026, 3, 2, 8, 0, 0)
    assert events["action"].iloc[0] == "Schalter geprüft"


def test_folder_entry_reads_every_matching_file(tmp_path):
    folder = tmp_path / "logs"
    folder.mkdir()
    for day in (2, 3):
        (folder / f"day{day}.csv").write_text(f"who,at\nn-0001,2026-03-0{day}T08:00:00Z\n")
    (folder / "notes.md").write_text("not a log")
    spec = log_spec_from_toml({"path": "logs", "format": "csv", "columns": {"learner": "who", "time": "at"}}, tmp_path, 1)
    events, report = read_logs([spec])
    assert len(events) == 2 and len(report.rows_per_file) == 2


def test_parquet_reads_mapped_columns_dictionary_encoded_and_matches_duckdb(tmp_path):
    rng = np.random.default_rng(7)
    n = 5000
    stamps = pd.Timestamp("2026-03-02T08:00:00Z").value + np.sort(rng.integers(0, 3600 * 10**9, n))
    table = pa.table({
        "trainee": pa.array([f"n-{i:04d}" for i in rng.integers(1, 20, n)]),
        "at": pa.array(stamps, pa.timestamp("ns", tz="UTC")),
        "event": pa.array(rng.choice(["wire", "check", "reset"], n)),
        "blob": pa.array([[1, 2, 3]] * n),  # an unmapped column of a type EVENTS has no place for
    })
    path = tmp_path / "big.parquet"
    pq.write_table(table, path)
    spec = log_spec_from_toml({"path": "big.parquet", "format": "parquet",
                               "columns": {"learner": "trainee", "time": "at", "action": "event"}}, tmp_path, 1)
    events, _ = read_logs([spec])
    assert isinstance(events["learner"].dtype, pd.CategoricalDtype)
    assert isinstance(events["action"].dtype, pd.CategoricalDtype)
    # Reference: DuckDB's own Parquet reader, per learner count and first/last instant.
    reference = duckdb.sql(
        f"SELECT trainee, count(*) AS n, min(epoch_ns(\"at\")) AS first_ns, max(epoch_ns(\"at\")) AS last_ns "
        f"FROM read_parquet('{path}') GROUP BY trainee ORDER BY trainee").df()
    ours = events.groupby("learner", observed=True)["time_ns"].agg(["count", "min", "max"]).reset_index()
    ours = ours.assign(learner=ours["learner"].astype(str)).sort_values("learner")
    assert list(ours["learner"].astype(str)) == list(reference["trainee"])
    assert list(ours["count"]) == list(reference["n"])
    assert list(ours["min"]) == list(reference["first_ns"])
    assert list(ours["max"]) == list(reference["last_ns"])


def test_parquet_naive_timestamps_are_local_times(tmp_path):
    naive = pd.to_datetime(["2026-07-01 10:00:00"]).as_unit("ns")
    pq.write_table(pa.table({"who": ["n-0001"], "at": pa.array(naive.asi8, pa.timestamp("ns"))}), tmp_path / "l.parquet")
    spec = log_spec_from_toml({"path": "l.parquet", "format": "parquet", "timezone": "America/New_York",
                               "columns": {"learner": "who", "time": "at"}}, tmp_path, 1)
    events, _ = read_logs([spec])
    assert events["time_ns"].iloc[0] == utc_ns(2026, 7, 1, 10, 0, 0, tz=ZoneInfo("America/New_York"))


# --- xAPI -----------------------------------------------------------------------------
VERB = {"id": "http://adlnet.gov/expapi/verbs/answered", "display": {"en-US": "answered"}}


def statement(actor, **extra):
    return {"actor": actor, "verb": VERB, "object": {"id": "https://sim.example.org/panel/7"},
            "timestamp": "2026-03-02T09:00:00+01:00", **extra}


def read_xapi(tmp_path, statements, as_lines=True, name="statements.jsonl", **entry):
    text = "\n".join(json.dumps(s) for s in statements) if as_lines else json.dumps(statements, indent=2)
    (tmp_path / name).write_text(text)
    return read_logs([log_spec_from_toml({"path": name, "format": "xapi", **entry}, tmp_path, 1)])


def test_xapi_actor_forms_map_to_the_inverse_functional_identifier(tmp_path):
    statements = [
        # xAPI 1.0.3 Part Two 2.4.2.3 Inverse Functional Identifier: account {homePage, name}
        statement({"objectType": "Agent", "account": {"homePage": "http://www.example.com", "name": "1625378"}}),
        # ... mbox, a mailto IRI (2.4.2.3); Agent objectType may be left out (2.4.2.1)
        statement({"mbox": "mailto:xapi@adlnet.gov", "name": "Example Learner"}),
        # ... mbox_sha1sum, the hex SHA1 of the mailto IRI (2.4.2.3)
        statement({"mbox_sha1sum": "ebd31e95054c018b10727ccffd2ef2ec3a016ee9"}),
        # ... openid (2.4.2.3)
        statement({"openid": "http://openid.example.org/12345"}),
        # Identified Group (2.4.2.2): the group's own identifier
        statement({"objectType": "Group", "account": {"homePage": "http://www.example.com", "name": "bench-3"},
                   "member": [{"mbox": "mailto:a@example.com"}]}),
        # Anonymous Group (2.4.2.2): no identifier -> left out and reported
        statement({"objectType": "Group", "member": [{"mbox": "mailto:a@example.com"}]}),
    ]
    events, report = read_xapi(tmp_path, statements)
    assert sorted(events["learner"].astype(str)) == sorted([
        "1625378", "mailto:xapi@adlnet.gov", "ebd31e95054c018b10727ccffd2ef2ec3a016ee9",
        "http://openid.example.org/12345", "bench-3"])
    assert any("anonymous group" in w for w in report.warnings)
    assert set(events["action"].astype(str)) == {VERB["id"]}
    assert set(events["item"].astype(str)) == {"https://sim.example.org/panel/7"}
    # 2.4.7 Timestamp with a time zone offset: 09:00+01:00 is 08:00 UTC.
    assert set(events["time_ns"]) == {utc_ns(2026, 3, 2, 8, 0, 0)}


def test_xapi_result_outcome_and_json_array_line_numbers(tmp_path):
    actor = {"account": {"homePage": "https://sim.example.org", "name": "n-0001"}}
    statements = [
        statement(actor, result={"success": True, "completion": True}, timestamp="2026-03-02T08:00:00Z"),
        statement(actor, result={"success": False}, timestamp="2026-03-02T08:00:01Z"),
        statement(actor, result={"completion": True}, timestamp="2026-03-02T08:00:02Z"),
        statement(actor, result={"score": {"scaled": 0.5}}, timestamp="2026-03-02T08:00:03Z"),
    ]
    events, _ = read_xapi(tmp_path, statements, as_lines=False, name="array.json")
    # xAPI 1.0.3 Part Two 2.4.5 Result: success and completion are booleans.
    assert list(events["outcome"].astype(str)) == ["correct", "incorrect", "completed", ""]
    text = (tmp_path / "array.json").read_text().splitlines()
    for row in events["source_row"]:
        assert text[row - 1].strip() == "{"
    assert len(set(events["source_row"])) == 4


def test_xapi_statement_without_timestamp_uses_stored(tmp_path):
    actor = {"account": {"homePage": "https://sim.example.org", "name": "n-0001"}}
    s = statement(actor, stored="2026-03-02T08:00:09.250Z")
    del s["timestamp"]
    events, report = read_xapi(tmp_path, [s])
    # 2.4.8 Stored: set by the LRS, always present on statements it returns.
    assert events["time_ns"].iloc[0] == utc_ns(2026, 3, 2, 8, 0, 9) + 250_000_000
    assert any("stored" in w for w in report.warnings)


def test_xapi_naive_timestamp_needs_a_timezone(tmp_path):
    actor = {"account": {"homePage": "https://sim.example.org", "name": "n-0001"}}
    # 1.0.3 Part Two 2.4.7: a timestamp SHOULD (not MUST) include the time zone.
    with pytest.raises(InputError, match="timezone"):
        read_xapi(tmp_path, [statement(actor, timestamp="2026-03-02T09:00:00")])
    events, _ = read_xapi(tmp_path, [statement(actor, timestamp="2026-03-02T09:00:00")], timezone="Europe/Berlin")
    assert events["time_ns"].iloc[0] == utc_ns(2026, 3, 2, 8, 0, 0)


@pytest.mark.parametrize(("text", "seconds"), [
    ("PT1H0M0S", 3600.0),            # xAPI 1.0.3 Part Two 2.4.5 Result example (from memory)
    ("PT4H35M59.14S", 16559.14),     # xAPI 1.0.3 Part Two 4.6 ISO 8601 Durations example (from memory)
    ("PT0.01S", 0.01),               # 4.6: precision of 0.01 s is what comparisons keep
    ("P1DT12H", 129600.0),           # ISO 8601 PnDTnH
    ("P2W", 1209600.0),              # ISO 8601 PnW (weeks alone)
    ("PT0,5S", 0.5),                 # ISO 8601 allows a decimal comma (from memory)
    ("PT90S", 90.0),                 # carry-over values are allowed
])
def test_iso_durations_in_seconds(text, seconds):
    assert iso_duration_seconds(text) == pytest.approx(seconds, abs=1e-9)


@pytest.mark.parametrize("text", ["P", "PT", "1H", "PT1.5", "P1Y", "P1M", "PT-5S", "P1DT"])
def test_unreadable_or_calendar_durations_are_refused(text):
    with pytest.raises(ValueError):
        iso_duration_seconds(text)


def test_xapi_duration_lands_in_duration_s(tmp_path):
    actor = {"account": {"homePage": "https://sim.example.org", "name": "n-0001"}}
    events, _ = read_xapi(tmp_path, [statement(actor, result={"duration": "PT1M30.5S"})])
    assert events["duration_s"].iloc[0] == 90.5


def test_parquet_epoch_numbers_by_magnitude_or_by_declaration(tmp_path):
    # 1772438400 s = 2026-03-02T08:00:00Z (standard library reference below).
    table = pa.table({"who": ["n-0001", "n-0002"], "s": [1772438400, 1772438401],
                      "ms": pa.array([1772438400000, 1772438400500], pa.int64())})
    pq.write_table(table, tmp_path / "epoch.parquet")

    def read(column, time_format):
        spec = log_spec_from_toml({"path": "epoch.parquet", "format": "parquet", "time_format": time_format,
                                   "columns": {"learner": "who", "time": column}}, tmp_path, 1)
        return list(read_logs([spec])[0]["time_ns"])

    second = utc_ns(2026, 3, 2, 8, 0, 0)
    assert read("s", "auto") == [second, second + 10**9]
    assert read("ms", "auto") == [second, second + 500_000_000]
    # Declared, so believed -- and seconds read as milliseconds land in January 1970, outside the
    # plausible range (sync/plausible_values.py): refused with the rows named, never stored as 1970.
    with pytest.raises(InputError, match="between 1990 and 2100"):
        read("s", "epoch_ms")
    with pytest.raises(InputError, match="holds numbers"):
        read("s", "iso")
