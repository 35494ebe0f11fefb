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


def test_two_processes_storing_the_same_entry_at_once_both_succeed(tmp_path):
    """The app and a verb may parse the same log at the same moment: neither may rename
    away the other's half-written entry (found by the screen-fit walk's parallel runs)."""
    import threading

    import pyarrow as pa

    from sync.log_cache import LogCache

    cache = LogCache(tmp_path / "parsed_logs")
    table = pa.table({"learner": ["L01"] * 1000, "time_ns": list(range(1000))})
    start, failures = threading.Barrier(4), []

    def write() -> None:
        start.wait()
        try:
            for _ in range(25):
                cache.store("prefix", "prefix-entry", table, {"rows_read": 1000})
        except OSError as error:  # what a shared temporary name gave: FileNotFoundError
            failures.append(error)

    threads = [threading.Thread(target=write) for _ in range(4)]
    for thread in threads:
        thread.start()
    for thread in threads:
        thread.join()
    assert failures == []
    loaded, meta = cache.load("prefix-entry")  # (load checks the table against its sidecar's SHA-256)
    assert loaded.equals(table) and meta.pop("table_sha256") and meta == {"rows_read": 1000}
    assert not list((tmp_path / "parsed_logs").glob("*.partial"))


def test_cached_learner_blocks_hold_the_events_and_report_of_the_whole_read(tmp_path):
    """What export streams from the cache: the same rows in the same order, the same report
    (DST counts and warning, unknown learners, rows per file, digests), without parsing."""
    import hashlib

    import pandas as pd

    from sync.logs import cached_learner_blocks

    rows = [f"n-{n % 4},2026-10-25T02:{n % 60:02d}:{n // 60:02d},wire" for n in range(150)]  # Berlin's repeated hour
    (tmp_path / "log.csv").write_text("trainee,at,event\n" + "\n".join(reversed(rows)) + "\n")
    spec = log_spec_from_toml({**CSV_ENTRY, "timezone": "Europe/Berlin"}, tmp_path, 1)
    cache, known = tmp_path / "parsed_logs", ["n-0", "n-1", "n-2"]
    assert cached_learner_blocks([spec], known, None, cache)[0] is None  # nothing cached yet
    events, report = read_logs([spec], known_log_ids=known, cache_dir=cache)
    with pytest.MonkeyPatch.context() as patch:
        patch.setitem(logs.READERS, "csv", lambda *arguments: pytest.fail("parsed again"))
        blocks, streamed_report = cached_learner_blocks([spec], known, None, cache)
    assert streamed_report == report and report.ambiguous_local_times == 150
    assert report.unknown_learners == {"n-3": 37} and len(report.warnings) == 2
    # Outside reference: hashlib over the file's bytes.
    assert report.digests[str(tmp_path / "log.csv")] == hashlib.sha256((tmp_path / "log.csv").read_bytes()).hexdigest()
    parts = list(blocks.blocks())
    assert len(blocks) == len(events) == 150 and blocks.learners == {"n-0", "n-1", "n-2", "n-3"}
    streamed = pd.concat([part.to_pandas() for part in parts], ignore_index=True)
    for column in events.columns:
        assert streamed[column].astype(str).tolist() == events[column].astype(str).tolist(), column


def test_a_read_of_no_learners_never_stands_in_for_a_read_of_all(tmp_path):
    """A read filtered to no learner keeps nothing; a later read of every learner (replay,
    coverage) must still get every event, not the empty read's cached result."""
    write_csv(tmp_path, 12)
    spec, cache = log_spec_from_toml(CSV_ENTRY, tmp_path, 1), tmp_path / "parsed_logs"
    nothing, _ = read_logs([spec], only_log_ids=[], cache_dir=cache)
    everything, report = read_logs([spec], cache_dir=cache)
    assert len(nothing) == 0 and len(everything) == report.rows == 12


def test_align_before_any_coding_parses_no_log(tmp_path):
    """`fieldmark align` run before observations are imported says so without parsing the
    logs (a platform's dataset can take minutes) and leaves no parsed copy behind."""
    from observer_app.pipeline.alignment import PARSED_LOGS_DIR, read_study_logs
    from observer_app.study.folder import load_study
    from tests.conftest import call_cli
    from tests.export.small_studies import LOG_IDS, write_log, write_roster

    study = tmp_path / "study"
    assert call_cli("init", study).returncode == 0
    write_roster(study, LOG_IDS)
    write_log(study, LOG_IDS)
    refused = call_cli("align", study)
    assert refused.returncode == 2 and "no coding sessions" in refused.stderr
    assert not (study / PARSED_LOGS_DIR).exists()
    events, report = read_study_logs(load_study(study))
    written = sum(1 for _ in open(study / "logs" / "centre_north.csv")) - 1  # the file's own rows, header aside
    assert len(events) == report.rows == written > 0


def test_reads_for_different_learners_do_not_evict_each_other(tmp_path, monkeypatch):
    """align, export and replay read different learners of one file: each keeps its entry (the
    newest few settings of the file's current bytes), so none parses the file again."""
    write_csv(tmp_path, 12)
    spec, cache = log_spec_from_toml(CSV_ENTRY, tmp_path, 1), tmp_path / "parsed_logs"
    filters = [None, ["n-1"], ["n-0", "n-2"]]
    first = [read_logs([spec], only_log_ids=only, cache_dir=cache)[0] for only in filters]

    def refuse(*arguments):
        raise AssertionError("parsed again")

    with monkeypatch.context() as patch:
        patch.setitem(logs.READERS, "csv", refuse)
        again = [read_logs([spec], only_log_ids=only, cache_dir=cache)[0] for only in filters]
    assert all(left.equals(right) for left, right in zip(first, again))
    for only in (["n-1", "n-2"], ["n-0"]):  # more settings than are kept: the oldest go
        read_logs([spec], only_log_ids=only, cache_dir=cache)
    assert len(modes(cache)) == 2 * 4
