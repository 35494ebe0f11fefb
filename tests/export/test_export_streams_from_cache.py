"""`fieldmark export` reads CSV and Parquet logs through the parsed-log cache block by block
(each file parsed into it first when it has no entry; entries sorted by learner, then time;
files that share learners merged): the windows file, its manifest and the summary are those
of the whole read, bit for bit, and no cached log is loaded whole."""
from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pyarrow.parquet as pq
import pytest

import observer_app.pipeline.alignment
import sync.log_cache
import sync.sorted_parquet
from export.writer import manifest_path
from observer_app.pipeline.alignment import PARSED_LOGS_DIR
from sync.log_cache import LogCache
from sync.logs import ReadReport
from tests.conftest import call_cli
from tests.export.small_studies import LOG_COLUMNS, START, solo_laptops_study

ACTIONS = ["connect_wire", "strip_insulation", "measure_voltage", "test_circuit", "hint", "label_terminal",
           "check_breaker", "open_manual", "reset_panel", "select_tool", "submit_step", "undo", "help_request"]
ROW_GROUP_ROWS = 40  # cache entries in row groups this small: blocks are cut inside learners' logs


def write_logs(study, files: dict[str, list[str]], seed: int = 11) -> None:
    """One CSV per file name with those learners' events (rows shuffled): ten minutes of history
    before the observed windows, varied actions (one rare action only in one learner's rows),
    outcomes written as a lab writes them, items and skills."""
    rng = np.random.default_rng(seed)
    entries = []
    for name, log_ids in files.items():
        lines = []
        for log_id in log_ids:
            seconds = np.cumsum(rng.integers(1, 5, 340)) - 600
            actions = rng.choice(ACTIONS[:-1], len(seconds))
            if log_id == "n-0003":
                actions[::7] = "rare_probe"
            for second, action in zip(seconds, actions):
                moment = (START + pd.Timedelta(seconds=int(second))).isoformat()
                result = rng.choice(["correct", "wrong", "", "Right", "done"])
                lines.append(f"{log_id},{moment},{action},{result},step-{rng.integers(1, 6)},"
                             f"{rng.choice(['breaker', 'terminal', ''])},{rng.integers(1, 9)}")
        rng.shuffle(lines)
        (study / "logs" / name).write_text("\n".join([LOG_COLUMNS, *lines]) + "\n")
        entries.append(name)
    toml = (study / "study.toml").read_text()
    first = toml.index("\n[[logs]]") + 1
    last = toml.index("\n\n", first) + 1
    entry = toml[first:last]
    toml = toml[:first] + "".join(entry.replace('"logs/centre_north.csv"', f'"logs/{name}"') for name in entries) \
        + toml[last:]
    (study / "study.toml").write_text(toml)


def export(study, out, *extra) -> dict:
    result = call_cli("export", study, "--out", out, "--json", "--help-actions", "hint,help_request",
                      "--top-actions", "20", *extra)
    assert result.returncode == 0, result.stderr
    return json.loads(result.stdout)


def assert_same_export(streamed, whole, streamed_summary: dict, whole_summary: dict) -> None:
    first, second = pq.read_table(streamed), pq.read_table(whole)
    assert first.schema == second.schema  # column names, types and descriptions
    for name in first.column_names:  # bit for bit, NaN where NaN
        left, right = first.column(name).to_pandas().to_numpy(), second.column(name).to_pandas().to_numpy()
        assert left.dtype == right.dtype and pd.isna(left).tolist() == pd.isna(right).tolist(), name
        assert (left[~pd.isna(left)] == right[~pd.isna(right)]).all(), name
    assert json.loads(manifest_path(streamed).read_text()) == json.loads(manifest_path(whole).read_text())
    ignored = ("out", "manifest")
    assert {k: v for k, v in streamed_summary.items() if k not in ignored} == \
        {k: v for k, v in whole_summary.items() if k not in ignored}


@pytest.fixture
def study(tmp_path, monkeypatch):
    monkeypatch.setattr(sync.log_cache, "ROW_GROUP_ROWS", ROW_GROUP_ROWS)
    return solo_laptops_study(tmp_path)


def counting_blocks(monkeypatch) -> list[int]:
    """Rows of every block the export reads from a sorted file (the learner/time pass and the features' pass)."""
    rows: list[int] = []
    real = sync.sorted_parquet.parquet_learner_blocks

    def counted(path, columns=None):
        for block in real(path, columns):
            rows.append(block.num_rows)
            yield block

    monkeypatch.setattr(sync.sorted_parquet, "parquet_learner_blocks", counted)
    return rows


def whole_read_export(study, out, monkeypatch) -> dict:
    """The export as it runs without blocks: the logs read whole into one EVENTS table."""
    with monkeypatch.context() as patch:
        patch.setattr(observer_app.pipeline.alignment, "cached_learner_blocks",
                      lambda *arguments, **options: (None, ReadReport()))
        return export(study, out)


def never_loaded_whole(patch) -> None:
    patch.setattr(LogCache, "load", lambda *arguments: pytest.fail("a cached log was loaded whole"))


def test_export_streams_learner_blocks_from_its_first_run_and_matches_the_whole_read(study, tmp_path, monkeypatch):
    write_logs(study, {"centre_north.csv": ["n-0001", "n-0002", "n-0003", "n-0004", "n-0100"],
                       "centre_south.csv": ["n-0005", "n-0006"]})
    blocks = counting_blocks(monkeypatch)
    with monkeypatch.context() as patch:  # no entry yet: each file parsed into the cache, then streamed
        never_loaded_whole(patch)
        first_summary = export(study, tmp_path / "first.parquet")
    assert len(blocks) == 2 * 6  # two passes (coverage, features), one block per observed learner
    assert max(blocks) < 400 and sum(blocks) == 2 * first_summary["events"] == 2 * 6 * 340
    assert "n-0100" not in (tmp_path / "first.parquet").read_text(errors="ignore")
    entries = sorted((study / PARSED_LOGS_DIR).glob("*.parquet"))
    for entry in entries:  # the cache keeps each file sorted by learner, then time
        table = pq.read_table(entry).to_pandas()
        if len(table):
            order = np.lexsort((table["time_ns"].to_numpy(), table["learner"].astype(str).to_numpy()))
            assert (order == np.arange(len(table))).all()  # (each learner's times are distinct here)
    assert max(pq.ParquetFile(entry).num_row_groups for entry in entries) > 5

    blocks.clear()
    with monkeypatch.context() as patch:  # the next run: straight from the cache
        never_loaded_whole(patch)
        streamed_summary = export(study, tmp_path / "streamed.parquet")
    assert len(blocks) == 2 * 6
    whole_summary = whole_read_export(study, tmp_path / "whole.parquet", monkeypatch)
    assert_same_export(tmp_path / "first.parquet", tmp_path / "whole.parquet", first_summary, whole_summary)
    assert_same_export(tmp_path / "streamed.parquet", tmp_path / "whole.parquet", streamed_summary, whole_summary)
    windows = pd.read_parquet(tmp_path / "streamed.parquet")
    assert windows["action_rare_probe"].sum() > 0 and windows["history_attempts"].min() > 0
    assert windows["outcome_correct"].sum() > 0 and "outcome_right" not in windows  # "Right" read as correct


def test_learners_in_several_log_files_stream_merged_with_the_same_result(study, tmp_path, monkeypatch):
    """A log cut by day: the same learners in every file (and one learner in two files only)."""
    write_logs(study, {"centre_north.csv": ["n-0001", "n-0002", "n-0003", "n-0004"],
                       "centre_south.csv": ["n-0004", "n-0005", "n-0006", "n-0001"],
                       "day_three.csv": ["n-0002", "n-0003", "n-0005", "n-0006", "n-0001"]}, seed=12)
    blocks = counting_blocks(monkeypatch)
    with monkeypatch.context() as patch:
        never_loaded_whole(patch)
        streamed = export(study, tmp_path / "streamed.parquet")
    assert blocks and max(blocks) < 400  # read block by block from the three sorted entries
    assert sum(blocks) == 2 * streamed["events"] == 2 * 13 * 340
    whole = whole_read_export(study, tmp_path / "whole.parquet", monkeypatch)
    assert_same_export(tmp_path / "streamed.parquet", tmp_path / "whole.parquet", streamed, whole)


def test_an_observed_id_without_events_is_refused_alike_with_the_cache(study, tmp_path) -> None:
    write_logs(study, {"centre_north.csv": ["n-0001", "n-0002", "n-0003", "n-0004", "n-0005"]})
    results = [call_cli("export", study, "--out", tmp_path / f"{run}.parquet") for run in range(2)]
    assert [result.returncode for result in results] == [2, 2]
    assert results[0].stderr == results[1].stderr and "n-0006" in results[0].stderr
    assert not list(tmp_path.glob("*.parquet"))


def test_a_log_taken_out_of_the_study_leaves_no_parsed_copy(study, tmp_path):
    """A lab deletes a log (a learner withdrew consent, common practice under data-protection
    law): the next command must not keep that file's parsed events in parsed_logs/."""
    write_logs(study, {"centre_north.csv": ["n-0001", "n-0002", "n-0003", "n-0004", "n-0005", "n-0006"],
                       "withdrawn.csv": ["n-0001", "n-0099"]})
    export(study, tmp_path / "before.parquet")
    cache = study / PARSED_LOGS_DIR
    withdrawn = LogCache.prefix(study / "logs" / "withdrawn.csv")
    kept = LogCache.prefix(study / "logs" / "centre_north.csv")
    assert {path.name.split("-", 1)[0] for path in cache.iterdir()} >= {withdrawn, kept}
    (study / "logs" / "withdrawn.csv").unlink()
    toml = (study / "study.toml").read_text()
    first = toml.index("[[logs]]", toml.index("withdrawn.csv") - 200)
    (study / "study.toml").write_text(toml[:first] + toml[toml.index("\n\n", first) + 2:])
    assert "withdrawn.csv" not in (study / "study.toml").read_text()
    export(study, tmp_path / "after.parquet")
    prefixes = {path.name.split("-", 1)[0] for path in cache.iterdir()}
    assert withdrawn not in prefixes and kept in prefixes
    assert b"n-0099" not in b"".join(path.read_bytes() for path in cache.iterdir())


@pytest.mark.parametrize("damage", ["flipped byte", "cut short", "sidecar of another table"])
def test_a_damaged_parsed_copy_is_parsed_again_never_read(study, tmp_path, damage):
    """A study folder copied in half, or a sync tool's conflict copy, leaves parsed_logs/
    entries that are not what was stored: the export parses the log again (same windows
    file, bit for bit), never a traceback and never a silently wrong time."""
    write_logs(study, {"centre_north.csv": ["n-0001", "n-0002", "n-0003"],
                       "centre_south.csv": ["n-0004", "n-0005", "n-0006"]})
    first = export(study, tmp_path / "first.parquet")
    tables = sorted((study / PARSED_LOGS_DIR).glob("*.parquet"))
    table = tables[0]
    data = bytearray(table.read_bytes())
    if damage == "flipped byte":
        data[len(data) // 3] ^= 0x01
        table.write_bytes(bytes(data))
    elif damage == "cut short":
        table.write_bytes(bytes(data[: len(data) // 2]))
    else:
        table.write_bytes(tables[1].read_bytes())
    second = export(study, tmp_path / "second.parquet")
    assert second["events"] == first["events"] == 6 * 340
    assert pd.read_parquet(tmp_path / "second.parquet").equals(pd.read_parquet(tmp_path / "first.parquet"))
