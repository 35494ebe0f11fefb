"""The CSV reader on Arrow: naive local times keep sync/local_time.py's DST rule (not
Arrow's), rows are numbered in errors, quoted line breaks are read, text is dictionary-
encoded, and the learner filter keeps exactly the rows a full read would."""
from __future__ import annotations

from datetime import datetime
from zoneinfo import ZoneInfo

import pyarrow as pa
import pyarrow.compute as pc
import pytest

from sync.errors import InputError
from sync.log_spec import log_spec_from_toml
from sync.logs import read_logs

COLUMNS = {"learner": "trainee", "time": "at", "action": "event"}


def read(folder, name, **extra):
    only = extra.pop("only_log_ids", None)
    return read_logs([log_spec_from_toml({"path": name, "format": "csv", "columns": COLUMNS, **extra}, folder, 1)],
                     only_log_ids=only)


def test_naive_times_in_a_dst_change_follow_our_rule_not_arrows(tmp_path):
    # Europe/Berlin 2026-03-29: 02:00-03:00 does not exist; 2026-10-25: 02:00-03:00 happens twice.
    stamps = ["2026-03-29 02:30:00", "2026-10-25 02:30:00", "2026-03-02 09:00:00"]
    (tmp_path / "log.csv").write_text("trainee,at,event\n" + "".join(f"n-0001,{s},wire\n" for s in stamps))
    events, report = read(tmp_path, "log.csv", timezone="Europe/Berlin")
    # Reference: the standard library's zoneinfo, fold=0 (PEP 495): the offset in force
    # before the change, for both the skipped and the repeated hour.
    expected = sorted(int(datetime.fromisoformat(s).replace(tzinfo=ZoneInfo("Europe/Berlin")).timestamp()) * 10**9
                      for s in stamps)
    assert sorted(events["time_ns"]) == expected
    assert (report.ambiguous_local_times, report.nonexistent_local_times) == (1, 1)
    # Arrow's own assume_timezone would put the skipped 02:30 at 01:00 UTC, half an hour off.
    arrow = pc.assume_timezone(pa.array([datetime(2026, 3, 29, 2, 30)], pa.timestamp("ns")), "Europe/Berlin",
                               nonexistent="latest")
    assert arrow.cast(pa.int64())[0].as_py() != expected[1]


def test_rows_are_numbered_in_errors_and_quoted_line_breaks_are_read(tmp_path):
    (tmp_path / "extra.csv").write_text("trainee,at,event\nn-1,2026-03-02T09:00:00Z,wire\nn-1,2026-03-02T09:00:01Z,a,b\n")
    with pytest.raises(InputError, match=r"extra.csv: row 2: cannot be read as CSV \('n-1,2026-03-02T09:00:01Z,a,b' "
                                         r"has 4 fields, the header 3\)"):
        read(tmp_path, "extra.csv")
    (tmp_path / "quoted.csv").write_text('trainee,at,event\nn-1,2026-03-02T09:00:00Z,"wire\nagain"\n'
                                         "n-2,2026-03-02T09:00:01Z,test\n")
    events, _ = read(tmp_path, "quoted.csv")
    assert list(events["action"].astype(str)) == ["wire\nagain", "test"]
    assert list(events["source_row"]) == [1, 2]
    (tmp_path / "late.csv").write_text("trainee,at,event\n" + "n-1,2026-03-02 09:00:00,wire\n" * 3
                                       + "n-1,soon,wire\n")
    with pytest.raises(InputError, match=r"late.csv: column at, row 4: 'soon' could not be read as a time"):
        read(tmp_path, "late.csv", timezone="Europe/Berlin")


def test_learner_filter_keeps_the_rows_of_a_full_read(tmp_path):
    lines = [f"n-{n % 4},2026-03-02T09:{n:02d}:00+01:00,step-{n}" for n in range(40)]
    (tmp_path / "log.csv").write_text("trainee;at;event\n" + "\n".join(line.replace(",", ";") for line in lines))
    everything, _ = read(tmp_path, "log.csv")
    kept, report = read(tmp_path, "log.csv", only_log_ids=["n-1", "n-3"])
    reference = everything[everything["learner"].isin(["n-1", "n-3"])].reset_index(drop=True)
    assert kept["source_row"].tolist() == reference["source_row"].tolist()
    assert kept["time_ns"].tolist() == reference["time_ns"].tolist()
    assert (report.rows_read, report.rows) == (40, 20)
