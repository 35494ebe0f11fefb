"""A log read twice counts every event twice: one file under two [[logs]] entries, or two
files with the same bytes (a download saved twice, a day exported twice), is refused with one
line naming both; what only looks alike is not (empty parts, the same bytes under other
partition folders, xAPI statements, whose ids already count once -- xAPI 1.0.3 Part Two 2.4.1,
from memory)."""
from __future__ import annotations

import shutil

import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq

from sync.log_spec import log_spec_from_toml
from sync.logs import read_logs
from tests.conftest import assert_user_error, call_cli
from tests.export.small_studies import solo_laptops_study


def _entries(study) -> tuple[str, int, int]:
    toml = (study / "study.toml").read_text()
    start = toml.index("\n[[logs]]") + 1
    return toml, start, toml.index("\n\n", start)


def test_one_file_under_two_entries_is_refused_by_every_reader_verb(tmp_path):
    study = solo_laptops_study(tmp_path)
    toml, start, end = _entries(study)
    (study / "study.toml").write_text(toml[:end] + "\n\n" + toml[start:end] + toml[end:])  # the entry pasted twice
    for verb in (["export", study, "--out", tmp_path / "windows.parquet"], ["align", study, "--method", "marks"]):
        assert_user_error(call_cli(*verb), "centre_north.csv", "entries #1 and #2", "count twice")
    assert not (tmp_path / "windows.parquet").exists()


def test_a_copied_file_in_a_folder_entry_is_refused_and_the_original_alone_is_read(tmp_path):
    study = solo_laptops_study(tmp_path)
    toml, _, _ = _entries(study)
    (study / "study.toml").write_text(toml.replace('"logs/centre_north.csv"', '"logs"'))
    copy = study / "logs" / "centre_north (1).csv"
    shutil.copy(study / "logs" / "centre_north.csv", copy)
    result = call_cli("export", study, "--out", tmp_path / "windows.parquet")
    assert_user_error(result, "centre_north (1).csv", "centre_north.csv", "same bytes", "count twice")
    assert not (tmp_path / "windows.parquet").exists()
    copy.unlink()
    assert call_cli("export", study, "--out", tmp_path / "windows.parquet").returncode == 0


def test_files_that_only_look_alike_are_read(tmp_path):
    """Two identical empty parts; the same bytes under learner=... folders (the learner comes
    from the folder, so the events differ); one xAPI file twice (counted once by id)."""
    cache = tmp_path / "parsed_logs"
    rows = pd.DataFrame({"at": pd.to_datetime(["2026-03-02T09:00:00Z", "2026-03-02T09:00:05Z"]), "event": ["hint", "undo"]})
    for learner in ("n-1", "n-2"):
        (tmp_path / "by_learner" / f"trainee={learner}").mkdir(parents=True)
        pq.write_table(pa.Table.from_pandas(rows, preserve_index=False),
                       tmp_path / "by_learner" / f"trainee={learner}" / "part-0.parquet")
        pq.write_table(pa.Table.from_pandas(rows.iloc[:0], preserve_index=False),
                       tmp_path / "by_learner" / f"trainee={learner}" / "part-1.parquet")  # empty, identical
    spec = log_spec_from_toml({"path": "by_learner", "format": "parquet",
                               "columns": {"learner": "trainee", "time": "at", "action": "event"}}, tmp_path, 1)
    events, report = read_logs([spec], cache_dir=cache)
    assert events["learner"].astype(str).value_counts().to_dict() == {"n-1": 2, "n-2": 2}
    assert sum("part-1.parquet" in warning for warning in report.warnings) == 2  # the empty parts, said

    statement = ('{"id": "6f1c2a8e-0d4b-4c1e-9a55-2b7d3e8f0a11", "actor": {"account": {"homePage": '
                 '"https://sim.example.org", "name": "n-1"}}, "verb": {"id": "http://adlnet.gov/expapi/verbs/attempted"}, '
                 '"object": {"id": "https://sim.example.org/steps/1"}, "timestamp": "2026-03-02T09:00:00Z"}\n')
    (tmp_path / "statements").mkdir()
    for name in ("a.jsonl", "b.jsonl"):
        (tmp_path / "statements" / name).write_text(statement)
    xapi = log_spec_from_toml({"path": "statements", "format": "xapi"}, tmp_path, 2)
    events, report = read_logs([xapi], cache_dir=cache)
    assert len(events) == 1 and any("more than once" in warning for warning in report.warnings)
