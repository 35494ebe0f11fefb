"""Naive local times at DST changes, checked against Python's zoneinfo (PEP 495, fold=0)
as the reference, through the real CSV reader."""
from __future__ import annotations

from datetime import datetime, timedelta
from zoneinfo import ZoneInfo

import pandas as pd
import pytest

from sync.log_spec import log_spec_from_toml
from sync.local_time import local_to_utc_ns
from sync.logs import read_logs

# Transition days.  Europe/Berlin 2026: clocks go forward 2026-03-29 02:00 -> 03:00 and back
# 2026-10-25 03:00 -> 02:00 (EU rule: last Sunday of March/October at 01:00 UTC).
# America/New_York 2026: forward 2026-03-08 02:00 -> 03:00, back 2026-11-01 02:00 -> 01:00
# (US rule: second Sunday of March, first Sunday of November) -- common practice, from memory;
# the expected instants below come from zoneinfo, not from these notes.
CASES = [
    ("Europe/Berlin", datetime(2026, 3, 29, 1, 0), 1, 0),     # one non-existent hour
    ("Europe/Berlin", datetime(2026, 10, 25, 1, 0), 0, 1),    # one repeated hour
    ("America/New_York", datetime(2026, 3, 8, 1, 0), 1, 0),
    ("America/New_York", datetime(2026, 11, 1, 0, 0), 0, 1),
]
STEP = timedelta(minutes=7, seconds=30)
STEPS = 32  # four hours around each change


def zoneinfo_reference(naive: datetime, zone: str) -> int:
    """UTC ns of a wall-clock reading under zoneinfo's fold=0 rule (PEP 495)."""
    aware = naive.replace(tzinfo=ZoneInfo(zone), fold=0)
    return round(aware.timestamp() * 1e9)


@pytest.mark.parametrize(("zone", "start", "gaps", "repeats"), CASES, ids=[f"{c[0]}-{c[1]:%m-%d}" for c in CASES])
def test_naive_times_around_a_dst_change_match_zoneinfo(tmp_path, zone, start, gaps, repeats):
    readings = [start + i * STEP for i in range(STEPS)]
    lines = ["who,at"] + [f"n-0001,{r:%Y-%m-%d %H:%M:%S}" for r in readings]
    (tmp_path / "log.csv").write_text("\n".join(lines) + "\n")
    spec = log_spec_from_toml({"path": "log.csv", "format": "csv", "timezone": zone,
                               "columns": {"learner": "who", "time": "at"}}, tmp_path, 1)
    events, report = read_logs([spec])
    events = events.sort_values("source_row")
    expected = [zoneinfo_reference(r, zone) for r in readings]
    assert list(events["time_ns"]) == expected
    # Counts: readings inside the skipped or repeated hour, as zoneinfo sees them.
    tz = ZoneInfo(zone)
    skipped = sum(1 for r in readings
                  if r.replace(tzinfo=tz).astimezone(ZoneInfo("UTC")).astimezone(tz).replace(tzinfo=None) != r)
    repeated = sum(1 for r in readings
                   if r.replace(tzinfo=tz, fold=0).utcoffset() != r.replace(tzinfo=tz, fold=1).utcoffset()) - skipped
    assert report.nonexistent_local_times == skipped and (skipped > 0) == bool(gaps)
    assert report.ambiguous_local_times == repeated and (repeated > 0) == bool(repeats)


def test_berlin_rule_examples_in_words():
    """The documented rule on two hand-picked readings (EU rule, common practice)."""
    readings = pd.to_datetime(["2026-03-29 02:30:00", "2026-10-25 02:30:00"]).as_unit("ns").asi8
    utc, counts = local_to_utc_ns(readings, "Europe/Berlin")
    # 02:30 on 2026-03-29 does not exist in Berlin: moved forward by the one-hour gap,
    # i.e. read with the +01:00 offset in force before the change -> 01:30 UTC.
    # 02:30 on 2026-10-25 happens twice: the first occurrence (+02:00) -> 00:30 UTC.
    assert list(utc) == [pd.Timestamp("2026-03-29T01:30:00Z").value, pd.Timestamp("2026-10-25T00:30:00Z").value]
    assert (counts.nonexistent, counts.ambiguous) == (1, 1)
