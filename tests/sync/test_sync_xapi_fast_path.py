"""The fast path for plain JSON lines (Arrow's reader block by block, in threads; offset
stamps parsed by Arrow; UUID ids compared as numbers) checked against references outside
it: the standard library's json for each line, datetime.fromisoformat and zoneinfo for
each instant, a Python set of lower-cased ids for repeats."""
from __future__ import annotations

import json
import re
from datetime import datetime, timedelta, timezone
from zoneinfo import ZoneInfo

import numpy as np
import pytest

import sync.json_blocks as json_blocks
import sync.xapi_reader as xapi_reader
from sync.log_spec import log_spec_from_toml
from sync.logs import read_logs

OFFSETS = ["Z", "+01:00", "-05:30", "+0100", "+14:00", "-00:00", "+05"]


def reference_ns(stamp: str) -> int:
    """The instant by the standard library (fromisoformat; digits past microseconds added by hand)."""
    match = re.fullmatch(r"(.{19})(?:\.(\d+))?(.*)", stamp)
    head, fraction, zone = match.groups()
    zone = {"Z": "+00:00", "-00:00": "+00:00"}.get(zone, zone)
    zone = zone if len(zone) != 3 else zone + ":00"
    moment = datetime.fromisoformat(head.replace(" ", "T") + zone)
    digits = (fraction or "").ljust(9, "0")
    return int(moment.timestamp()) * 10**9 + int(digits)


def generated_statements(count: int, seed: int) -> list[dict]:
    rng = np.random.default_rng(seed)
    statements = []
    for number in range(count):
        moment = datetime(2026, 3, 2, tzinfo=timezone.utc).timestamp() + float(rng.integers(0, 86400 * 30))
        clock = datetime.fromtimestamp(moment, timezone.utc).strftime("%Y-%m-%d" + "T "[number % 2] + "%H:%M:%S")
        fraction = ["", ".5", ".037", ".123456", ".123456789"][number % 5]
        statements.append({
            "id": f"{int(rng.integers(0, 2**32)):08x}-0000-4000-8000-{number:012x}",
            "actor": {"account": {"homePage": "https://sim.example.org", "name": f"n-{int(rng.integers(0, 7)):04d}"}},
            "verb": {"id": f"http://adlnet.gov/expapi/verbs/{['attempted', 'answered'][number % 2]}"},
            "object": {"id": f"https://sim.example.org/steps/{number % 11}", "objectType": "Activity",
                       "definition": {"name": {"en-US": "step {" + "\\" * (number % 3) + '"]'}}},
            "result": {"success": bool(number % 3), "duration": f"PT{number % 50}.25S"},
            "timestamp": clock + fraction + OFFSETS[number % len(OFFSETS)],
        })
    return statements


def read(folder, name="statements.jsonl", **entry):
    return read_logs([log_spec_from_toml({"path": name, "format": "xapi", **entry}, folder, 1)])


def test_many_blocks_keep_every_statement_its_line_and_its_instant(tmp_path, monkeypatch):
    monkeypatch.setattr(json_blocks, "BLOCK_BYTES", 3000)  # dozens of blocks, several in flight at once
    statements = generated_statements(300, seed=1)
    path = tmp_path / "statements.jsonl"
    path.write_text("".join(json.dumps(s) + "\n" for s in statements))
    spec = log_spec_from_toml({"path": "statements.jsonl", "format": "xapi"}, tmp_path, 1)
    pieces = xapi_reader._read_with_arrow(spec, path, None)
    assert pieces is not None and len(pieces) > 20
    events, _ = read(tmp_path)
    # Reference: each line decoded by the standard library, its instant by fromisoformat.
    expected = sorted((s["actor"]["account"]["name"], reference_ns(s["timestamp"]), line, s["object"]["id"])
                      for line, s in enumerate(map(json.loads, path.read_text().splitlines()), start=1))
    got = sorted(zip(events["learner"].astype(str), events["time_ns"], events["source_row"], events["item"].astype(str)))
    assert got == expected


def test_a_blank_line_in_a_later_block_still_gives_each_statement_its_line(tmp_path, monkeypatch):
    monkeypatch.setattr(json_blocks, "BLOCK_BYTES", 3000)
    lines = [json.dumps(s) for s in generated_statements(120, seed=2)]
    lines.insert(90, "   ")
    path = tmp_path / "statements.jsonl"
    path.write_text("\n".join(lines) + "\n")
    spec = log_spec_from_toml({"path": "statements.jsonl", "format": "xapi"}, tmp_path, 1)
    assert xapi_reader._read_with_arrow(spec, path, None) is None  # Arrow would skip the line: the exact path reads
    events, _ = read(tmp_path)
    expected = sorted((number, reference_ns(json.loads(text)["timestamp"]))
                      for number, text in enumerate(lines, start=1) if text.strip())
    assert sorted(zip(events["source_row"], events["time_ns"])) == expected


def test_repeated_ids_are_counted_once_whatever_their_case_or_form(tmp_path):
    statements = generated_statements(40, seed=3)
    twins = [dict(statements[4], id=statements[4]["id"].upper(), timestamp="2026-03-03T10:00:00Z"),
             dict(statements[9], timestamp="2026-03-03T11:00:00Z")]
    # Ids sharing their first 64 bits must stay apart (they differ in the last 64).
    statements[10]["id"] = statements[11]["id"][:24] + "0" * 12
    lines = statements + twins
    (tmp_path / "statements.jsonl").write_text("".join(json.dumps(s) + "\n" for s in lines))
    events, report = read(tmp_path)
    # Reference: the first statement of each lower-cased id, by a Python set.
    seen, first = set(), []
    for line, statement in enumerate(lines, start=1):
        if statement["id"].lower() not in seen:
            seen.add(statement["id"].lower())
            first.append(line)
    assert sorted(events["source_row"]) == first
    assert any(f"{len(lines) - len(first)} statements appear more than once" in w for w in report.warnings)
    # Ids that are not UUIDs are compared as text, case ignored, in the same way.
    for number, statement in enumerate(lines):
        statement["id"] = f"Statement-{number % 30}" if number % 2 else f"statement-{number % 30}"
    (tmp_path / "statements.jsonl").write_text("".join(json.dumps(s) + "\n" for s in lines))
    events, _ = read(tmp_path)
    assert len(events) == len({s["id"].lower() for s in lines})


@pytest.mark.parametrize("hour_only", [False, True])
def test_offset_stamps_beside_local_times_read_each_as_written(tmp_path, hour_only):
    """A column mixing offset stamps with local ones (and, once, an offset stamp with an
    hour but no minutes, which the one-pass parse leaves to the general reader)."""
    stamps = ["2026-03-29T01:30:00+01:00", "2026-03-29 03:30:00", "2026-03-29T04:15:00.25Z", "2026-10-25 02:30:00"]
    if hour_only:
        stamps[0] = "2026-03-29T01+01:00"
    rows = "".join(f"n-0001,{stamp},step\n" for stamp in stamps)
    (tmp_path / "log.csv").write_text("who,at,what\n" + rows)
    spec = log_spec_from_toml({"path": "log.csv", "format": "csv", "timezone": "Europe/Berlin",
                               "columns": {"learner": "who", "time": "at", "action": "what"}}, tmp_path, 1)
    events, _ = read_logs([spec])
    berlin = ZoneInfo("Europe/Berlin")  # reference: zoneinfo, fold=0 (the first of a repeated hour)
    first = datetime(2026, 3, 29, 1, 0 if hour_only else 30, tzinfo=timezone(timedelta(hours=1)))
    expected = sorted([int(first.timestamp() * 10**9),
                       int(datetime(2026, 3, 29, 3, 30, tzinfo=berlin).timestamp()) * 10**9,
                       int(datetime(2026, 3, 29, 4, 15, tzinfo=timezone.utc).timestamp()) * 10**9 + 250_000_000,
                       int(datetime(2026, 10, 25, 2, 30, tzinfo=berlin).timestamp()) * 10**9])
    assert sorted(events["time_ns"]) == expected


def test_every_stamp_the_one_pass_parse_reads_is_the_instant_pandas_reads(tmp_path):
    """Dates, separators, times and zones combined (valid and not); of those Arrow's parser
    reads, the whole column through parse_time_column against pandas' ISO 8601 reader."""
    import itertools

    import pandas as pd
    import pyarrow as pa
    import pyarrow.compute as pc

    from sync.plausible_values import FIRST_NS, LAST_NS
    from sync.time_column import parse_time_column

    dates = ["2026-03-02", "2026-3-2", "2024-02-29", "2026-02-29", "2026-13-01", "20260302", "2099-12-31", "2026-04-31"]
    times = ["07:00:00", "07:00", "07", "070000", "7:00:00", "07:00:00.5", "07:00:00.123456", "07:00:00.1234567891",
             "07:00:00,5", "24:00:00", "23:59:60", "07:00:00.", "23:59:59.999999999"]
    zones = ["Z", "z", "+01:00", "-01:00", "+0100", "+01", "+1", "+14:00", "+24:00", "-00:00", " Z", "+01:00:00", "UTC", ""]
    stamps = ["".join(parts) for parts in itertools.product(dates, ["T", " ", "t", ""], times, zones)]

    def arrow_reads(stamp: str) -> bool:
        try:
            pc.cast(pa.array([stamp]), pa.timestamp("ns", "UTC"))
            return True
        except pa.ArrowInvalid:
            return False

    readable = pd.Series([s for s in stamps if arrow_reads(s)], dtype="str")
    reference = pd.to_datetime(readable, format="ISO8601", utc=True, errors="coerce").dt.as_unit("ns")
    inside = reference.notna() & (reference.array.asi8 >= FIRST_NS) & (reference.array.asi8 < LAST_NS)
    assert inside.sum() > 200  # the comparison covers many shapes
    got, _ = parse_time_column(readable[inside].reset_index(drop=True), "iso", None, "x.csv", "at",
                               np.arange(1, int(inside.sum()) + 1))
    assert got.tolist() == reference[inside].array.asi8.tolist()
