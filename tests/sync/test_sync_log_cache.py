"""A parsed log is kept in the study folder keyed by its digest: owner-only, reused
while the file is unchanged, parsed again (and the stale entry removed) when it changes."""
from __future__ import annotations

import json
import stat

import pytest

import sync.logs as logs
from sync.log_spec import log_spec_from_toml
from sync.logs import read_logs

CSV_ENTRY = {"path": "log.csv", "format": "csv", "columns": {"learner": "trainee", "time": "at", "action": "event"}}


def write_csv(folder, rows):
    (folder / "log.csv").write_text("trainee,at,event\n" + "".join(
        f"n-{n % 3},2026-03-02T09:{n:02d}:00Z,wire\n" for n in range(rows)))


def modes(folder):
    return {path.name: stat.S_IMODE(path.stat().st_mode) for path in folder.iterdir()}


def test_unchanged_file_is_not_parsed_again_and_a_changed_one_is(tmp_path, monkeypatch):
    write_csv(tmp_path, 12)
    spec, cache = log_spec_from_toml(CSV_ENTRY, tmp_path, 1), tmp_path / "parsed_logs"
    first, first_report = read_logs([spec], cache_dir=cache)
    assert stat.S_IMODE(cache.stat().st_mode) == 0o700
    assert set(modes(cache).values()) == {0o600} and len(modes(cache)) == 2  # table + sidecar

    def refuse(*arguments):
        raise AssertionError("parsed again")

    with monkeypatch.context() as patch:
        patch.setitem(logs.READERS, "csv", refuse)
        again, again_report = read_logs([spec], cache_dir=cache)
    assert again.equals(first) and again_report.rows_read == first_report.rows_read == 12
    write_csv(tmp_path, 15)
    changed, _ = read_logs([spec], cache_dir=cache)
    assert len(changed) == 15
    assert len(modes(cache)) == 2  # the stale entry of the old content is gone
    kept, report = read_logs([spec], only_log_ids=["n-1"], cache_dir=cache)
    assert (report.rows_read, report.rows) == (15, 5)  # another filter, another entry


def test_xapi_statements_come_back_with_their_cross_file_facts(tmp_path, monkeypatch):
    statement = {"actor": {"mbox": "mailto:n-0001@sim.example.org"}, "verb": {"id": "http://adlnet.gov/expapi/verbs/attempted"},
                 "object": {"id": "https://sim.example.org/panel/1"}}
    lines = [dict(statement, id=f"00000000-0000-4000-8000-{n:012d}", timestamp=f"2026-03-02T09:{n:02d}:00Z")
             for n in range(5)]
    voiding = {"actor": {"mbox": "mailto:admin@sim.example.org"}, "verb": {"id": "http://adlnet.gov/expapi/verbs/voided"},
               "object": {"objectType": "StatementRef", "id": lines[2]["id"]}}
    (tmp_path / "s.jsonl").write_text("\n".join(json.dumps(s) for s in lines + [voiding]))
    spec = log_spec_from_toml({"path": "s.jsonl", "format": "xapi"}, tmp_path, 1)
    first, _ = read_logs([spec], cache_dir=tmp_path / "parsed_logs")
    with monkeypatch.context() as patch:
        patch.setattr(logs, "read_xapi_log", lambda *arguments: pytest.fail("parsed again"))
        again, report = read_logs([spec], cache_dir=tmp_path / "parsed_logs")
    assert again.equals(first) and len(again) == 4  # the voided statement stays dropped
