"""`fieldmark import` of another device's store or a CSV: nothing in the file is trusted.

(The malformed corpus covers one refusal per kind of damage; these tests pin what is
kept and what is left out when a file is accepted.)
"""
from __future__ import annotations

import shutil
import sqlite3
import time
from datetime import datetime, timezone
from pathlib import Path

import pytest

from observer_app.study.foreign_store import TIME_LIMIT_SECONDS
from observer_app.study.store import Store
from observer_app.study import row_chain
from tests.boundary.corpus import DEMO_STUDY, make_study, store_rows
from tests.conftest import assert_user_error, call_cli

DEVICE = DEMO_STUDY.parent / "devices" / "laptop-a" / "observations.sqlite"


@pytest.fixture(scope="module")
def pristine(tmp_path_factory: pytest.TempPathFactory) -> Path:
    return make_study(tmp_path_factory.mktemp("trust") / "study")


@pytest.fixture
def study(pristine: Path, tmp_path: Path) -> Path:
    return Path(shutil.copytree(pristine, tmp_path / "study"))


def device_copy(tmp_path: Path, sql: str = "") -> Path:
    path = tmp_path / "device.sqlite"
    shutil.copyfile(DEVICE, path)
    if sql:
        connection = sqlite3.connect(path)
        row_chain.register(connection)  # the store's chain triggers call fieldmark's link function
        connection.executescript(sql)
        connection.commit()
        connection.close()
    return path


def test_clock_models_in_a_device_store_are_never_imported(study: Path, tmp_path: Path) -> None:
    before = store_rows(study / "observations.sqlite")["clock_models"]
    device = device_copy(tmp_path, "INSERT INTO clock_models (model_id, device, model_json, at_ns) VALUES ('m1', 'laptop-a', '{\"offset_s\": 999}', "
                                   "9000000000000000000);")
    result = call_cli("import", study, device)
    assert result.returncode == 0, result.stderr
    assert "1 clock_models rows: never imported" in result.stdout
    assert store_rows(study / "observations.sqlite")["clock_models"] == before


def test_a_row_the_study_holds_with_other_content_is_refused(study: Path, tmp_path: Path) -> None:
    device = device_copy(tmp_path, "DROP TRIGGER codes_no_update; UPDATE codes SET code = 'off_task' "
                                   "WHERE rowid = (SELECT min(rowid) FROM codes WHERE code = 'on_task');")
    before = store_rows(study / "observations.sqlite")
    assert_user_error(call_cli("import", study, device), "device.sqlite", "table codes", "differs from the study's row")
    assert store_rows(study / "observations.sqlite") == before


def test_the_device_file_is_never_opened_for_writing(study: Path, tmp_path: Path) -> None:
    device = device_copy(tmp_path)
    device.chmod(0o444)
    stamp = device.stat().st_mtime_ns
    assert call_cli("import", study, device).returncode == 0
    assert device.stat().st_mtime_ns == stamp
    assert not Path(f"{device}-wal").exists() and not Path(f"{device}-shm").exists()


def test_a_device_store_with_new_rows_in_its_write_ahead_log_brings_them(tmp_path: Path) -> None:
    """The -wal file beside a copied store holds the newest codes; import reads it too."""
    study = make_study(tmp_path / "fresh")
    device = tmp_path / "device.sqlite"
    writer = Store(device)
    writer.start_session(coder="cy", device="tablet-c", mode="live", started_at=datetime(2026, 3, 10, 8, tzinfo=timezone.utc),
                         monotonic_start=0.0, window_seconds=20, order="fixed", seed=1, scheme_hash="x")
    assert Path(f"{device}-wal").stat().st_size > 0            # still in the log, not the file
    result = call_cli("import", study, device)
    writer.close()
    assert result.returncode == 0, result.stderr
    assert "1 sessions" in result.stdout


def test_a_slow_file_hits_the_time_limit(study: Path, tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    import observer_app.study.foreign_store as foreign_store

    monkeypatch.setattr(foreign_store, "TIME_LIMIT_SECONDS", 0.0)  # every query is then over its limit
    monkeypatch.setattr(foreign_store, "PROGRESS_STEPS", 1)        # and checked at every step
    started = time.monotonic()
    assert_user_error(call_cli("import", study, device_copy(tmp_path)), "device.sqlite", "longer than")
    assert time.monotonic() - started < 30 and TIME_LIMIT_SECONDS > 0


def test_conflicting_rows_in_one_csv_are_refused_naming_both_lines(study: Path, tmp_path: Path) -> None:
    csv = tmp_path / "codes.csv"
    csv.write_text("coder,learner,time,activity\n"
                   "ana,L01,2026-03-10T08:55:30+01:00,on_task\n"
                   "ana,L02,2026-03-10T08:55:50+01:00,on_task\n"
                   "ana,L01,2026-03-10T07:55:30Z,off_task\n")      # the same instant as line 2, written in UTC
    before = store_rows(study / "observations.sqlite")
    assert_user_error(call_cli("import", study, csv), "codes.csv", "lines 2 and 4", "'L01'")
    assert store_rows(study / "observations.sqlite") == before


@pytest.mark.parametrize("row, needle", [
    ("ana,L01,2026-03-10T08:55:30+01:00,2026-03-10T08:55:10+01:00,on_task", "end is not after time"),
    ("ana,L01,2026-03-10T08:55:30+01:00,2026-03-10T10:55:30+01:00,on_task", "window longer than 3600 s"),
    ("ana,L01,1500-03-10T08:55:30+01:00,,on_task", "time is not between 1990 and 2100"),
])
def test_csv_windows_are_checked_like_store_windows(study: Path, tmp_path: Path, row: str, needle: str) -> None:
    csv = tmp_path / "codes.csv"
    csv.write_text("coder,learner,time,end,activity\n" + row + "\n")
    assert_user_error(call_cli("import", study, csv), "line 2", needle)
