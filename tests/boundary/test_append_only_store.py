"""The store is append-only against every route, and `fieldmark verify` names the first break.

Routes tried: fieldmark's own connection (INSERT OR REPLACE), a plain SQLite connection
(UPDATE, DELETE, REPLACE, INSERT), and a person who drops the guards and edits rows --
which the hash chain reveals.  SQLite behaviours relied on (sqlite.org/lang_conflict.html,
"REPLACE ... delete triggers fire if and only if recursive triggers are enabled";
sqlite.org/pragma.html#pragma_recursive_triggers).
"""
from __future__ import annotations

import os
import shutil
import sqlite3
import stat
from datetime import datetime, timedelta, timezone
from pathlib import Path

import pytest

from observer_app.study.foreign_store import reference_triggers
from observer_app.study.store import CHAIN_VERSION, MIGRATIONS, SCHEMA_VERSION, Store, _statements
from tests.conftest import assert_user_error, call_cli

T0 = datetime(2026, 3, 10, 8, 0, tzinfo=timezone.utc)


def filled_store(path: Path) -> Path:
    with Store(path) as store:
        session = store.start_session(coder="ana", device="laptop-a", mode="live", started_at=T0, monotonic_start=0.0,
                                      window_seconds=20, order="fixed", seed=1, scheme_hash="h")
        for number in range(3):
            start = T0 + timedelta(seconds=20 * number)
            store.record_code(observation_id=f"o{number}", session_id=session, learner="L01", window_start=start,
                              window_end=start + timedelta(seconds=20), dimension="activity", code="on_task",
                              entered_at=start + timedelta(seconds=5), scheme_hash="h", code_id=f"c{number}")
        store.record_import("abc", "file.csv", T0)
        store.end_session(session, T0 + timedelta(minutes=5))
    return path


def test_insert_or_replace_through_fieldmark_is_refused(tmp_path: Path) -> None:
    path = filled_store(tmp_path / "o.sqlite")
    with Store(path) as store:
        connection = store._connection
        with pytest.raises(sqlite3.DatabaseError, match="append-only"):
            connection.execute("INSERT OR REPLACE INTO codes VALUES ('c0','o0','activity','off_task',1,NULL)")
        assert store.codes_log().set_index("code_id").loc["c0", "code"] == "on_task"


@pytest.mark.parametrize("statement", [
    "UPDATE imports SET source = 'elsewhere'", "DELETE FROM imports", "UPDATE row_chain SET link = 'x'",
    "DELETE FROM row_chain", "UPDATE codes SET code = 'off_task'", "DELETE FROM observations",
])
def test_a_plain_sqlite_connection_cannot_update_or_delete(tmp_path: Path, statement: str) -> None:
    path = filled_store(tmp_path / "o.sqlite")
    connection = sqlite3.connect(path)
    with pytest.raises(sqlite3.DatabaseError, match="append-only"):
        connection.execute(statement)
    connection.close()


def test_a_plain_sqlite_connection_cannot_insert_or_replace(tmp_path: Path) -> None:
    """A shell lacks fieldmark's link function, so the chain trigger refuses any insert, REPLACE included."""
    path = filled_store(tmp_path / "o.sqlite")
    connection = sqlite3.connect(path)
    for statement in ("INSERT OR REPLACE INTO codes VALUES ('c0','o0','activity','off_task',1,NULL)",
                      "INSERT INTO notes VALUES ('n1','o0','hello',1)"):
        with pytest.raises(sqlite3.OperationalError, match="fieldmark_link"):
            connection.execute(statement)
    connection.close()
    assert call_cli("verify", path).returncode == 0


def test_store_and_its_write_ahead_log_are_owner_only(tmp_path: Path) -> None:
    path = tmp_path / "o.sqlite"
    store = Store(path)
    store.start_session(coder="ana", device="d", mode="live", started_at=T0, monotonic_start=0.0, window_seconds=20,
                        order="fixed", seed=1, scheme_hash="h")
    for file in (path, Path(f"{path}-wal")):
        assert stat.S_IMODE(os.stat(file).st_mode) == 0o600, file
    store.close()


def test_ending_a_session_checkpoints_so_the_file_alone_holds_every_code(tmp_path: Path) -> None:
    path = tmp_path / "o.sqlite"
    store = Store(path)  # stays open, like the app between sessions
    session = store.start_session(coder="ana", device="d", mode="live", started_at=T0, monotonic_start=0.0,
                                  window_seconds=20, order="fixed", seed=1, scheme_hash="h")
    store.record_code(observation_id="o1", session_id=session, learner="L01", window_start=T0,
                      window_end=T0 + timedelta(seconds=20), dimension="activity", code="on_task",
                      entered_at=T0 + timedelta(seconds=3), scheme_hash="h")
    store.end_session(session, T0 + timedelta(minutes=1))
    copied = tmp_path / "copied.sqlite"
    shutil.copyfile(path, copied)  # the main file only, as a careless copy would take it
    connection = sqlite3.connect(copied)
    assert connection.execute("SELECT count(*) FROM codes").fetchone()[0] == 1
    connection.close()
    store.close()


def test_verify_passes_an_untouched_store(tmp_path: Path) -> None:
    path = filled_store(tmp_path / "o.sqlite")
    result = call_cli("verify", path)
    assert result.returncode == 0 and "intact" in result.stdout


def _edit_behind_fieldmark(path: Path, sql: str) -> None:
    """A person with a SQLite shell who knows to drop the guards first, and puts them back exactly."""
    guards = reference_triggers(SCHEMA_VERSION)
    connection = sqlite3.connect(path)
    connection.executescript("DROP TRIGGER codes_no_update; DROP TRIGGER codes_no_delete; DROP TRIGGER codes_chain;"
                             + sql + guards["codes_no_update"] + ";" + guards["codes_no_delete"] + ";")
    connection.close()
    Store(path).close()  # fieldmark opens it again: the chain trigger comes back, nothing is adopted


@pytest.mark.parametrize("sql, needle", [
    ("UPDATE codes SET code = 'off_task' WHERE code_id = 'c1';", "changed after it was written"),
    ("DELETE FROM codes WHERE code_id = 'c1';", "deleted or replaced"),
    ("INSERT OR REPLACE INTO codes VALUES ('c1','o1','activity','off_task',1,NULL);", "deleted or replaced"),
    ("INSERT INTO codes VALUES ('c9','o1','activity','off_task',1,NULL);", "not in the chain"),
])
def test_verify_names_the_first_break(tmp_path: Path, sql: str, needle: str) -> None:
    path = filled_store(tmp_path / "o.sqlite")
    _edit_behind_fieldmark(path, sql)
    assert_user_error(call_cli("verify", path), "table codes", needle)


def test_verify_notices_a_removed_guard(tmp_path: Path) -> None:
    path = filled_store(tmp_path / "o.sqlite")
    connection = sqlite3.connect(path)
    connection.execute("DROP TRIGGER imports_no_delete")
    connection.close()
    assert_user_error(call_cli("verify", path), "imports_no_delete", "removed")


def test_an_older_store_adopts_its_rows_into_the_chain_once(tmp_path: Path) -> None:
    path = tmp_path / "old.sqlite"
    connection = sqlite3.connect(path)
    for step in range(CHAIN_VERSION - 1):
        for statement in _statements(MIGRATIONS[step]):
            connection.execute(statement)
    connection.execute(f"PRAGMA user_version = {CHAIN_VERSION - 1}")
    connection.execute("INSERT INTO sessions (session_id, coder, device, mode, paired_start_ns, started_ns, "
                       "monotonic_start, window_seconds, schedule_order, seed, scheme_hash, present) "
                       "VALUES ('s1','ana','laptop-a','live',NULL,0,0.0,20,'fixed',1,'h1','')")
    connection.execute("INSERT INTO observations VALUES ('o1','s1','L01',0,'',0,20000000000,1,0,'h1')")
    connection.commit()
    connection.close()
    with Store(path) as store:
        assert store.schema_version == SCHEMA_VERSION
    assert call_cli("verify", path).returncode == 0
    connection = sqlite3.connect(path)
    assert connection.execute("SELECT count(*) FROM row_chain").fetchone()[0] == 2
    connection.close()


def test_verify_notices_a_weakened_guard(tmp_path: Path) -> None:
    """A guard replaced by one that lets updates through (same name, other body) is a break too."""
    path = filled_store(tmp_path / "o.sqlite")
    connection = sqlite3.connect(path)
    connection.executescript("DROP TRIGGER codes_no_update; CREATE TRIGGER codes_no_update BEFORE UPDATE ON codes "
                             "WHEN 0 BEGIN SELECT RAISE(ABORT, 'fieldmark stores are append-only'); END;")
    connection.close()
    assert_user_error(call_cli("verify", path), "codes_no_update", "changed")
