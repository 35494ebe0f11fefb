"""The observation store: append-only, corrections supersede, durable settings, migrations."""
from __future__ import annotations

import sqlite3
from datetime import datetime, timedelta, timezone
from pathlib import Path

import pandas as pd
import pytest

from observer_app.study.foreign_store import read_foreign_store
from observer_app.study.store import SCHEMA_VERSION, Store
from observer_app.study.tables import OBSERVATION_COLUMNS, OBSERVATION_TAIL_COLUMNS
from sync.errors import InputError

T0 = datetime(2026, 3, 2, 8, 0, tzinfo=timezone.utc)


def session(store: Store, **overrides) -> str:
    settings = dict(coder="ana", device="laptop-a", mode="live", started_at=T0, monotonic_start=10.0,
                    window_seconds=20, order="fixed", seed=1, scheme_hash="h1")
    settings.update(overrides)
    return store.start_session(**settings)


def code(store: Store, session_id: str, observation: str, dimension: str, value: str | None, seconds: float,
         supersedes: str | None = None) -> str:
    return store.record_code(
        observation_id=observation, session_id=session_id, learner="L01", window_start=T0,
        window_end=T0 + timedelta(seconds=20), dimension=dimension, code=value,
        entered_at=T0 + timedelta(seconds=seconds), scheme_hash="h1", slot=0, supersedes=supersedes)


def test_pragmas_give_durability_and_concurrency(tmp_path: Path) -> None:
    # sqlite.org "PRAGMA synchronous": FULL (2) syncs on every commit; WAL lets readers and a writer coexist
    with Store(tmp_path / "o.sqlite") as store:
        connection = store._connection
        assert connection.execute("PRAGMA journal_mode").fetchone()[0] == "wal"
        assert connection.execute("PRAGMA synchronous").fetchone()[0] == 2
        assert store.schema_version == SCHEMA_VERSION


def test_rows_can_never_be_updated_or_deleted(tmp_path: Path) -> None:
    with Store(tmp_path / "o.sqlite") as store:
        code(store, session(store), "o1", "activity", "on_task", 2)
    connection = sqlite3.connect(tmp_path / "o.sqlite")
    for statement in ("UPDATE codes SET code = 'off_task'", "DELETE FROM codes", "DELETE FROM observations",
                      "UPDATE sessions SET coder = 'x'"):
        with pytest.raises(sqlite3.DatabaseError, match="append-only"):
            connection.execute(statement)


def test_a_correction_supersedes_and_the_audit_trail_keeps_everything(tmp_path: Path) -> None:
    with Store(tmp_path / "o.sqlite") as store:
        sid = session(store)
        first = code(store, sid, "o1", "activity", "on_task", 2)
        code(store, sid, "o1", "activity", "off_task", 5, supersedes=first)
        code(store, sid, "o1", "affect", "bored", 6)
        retracted = code(store, sid, "o1", "affect", None, 7)
        view = store.observations(["activity", "affect"])
        trail = store.codes_log()
    assert retracted in set(trail["code_id"])
    assert len(view) == 1
    row = view.iloc[0]
    assert row["activity"] == "off_task" and pd.isna(row["affect"])
    assert bool(row["corrected"]) and not bool(row["no_code"])
    assert row["coded_at"] == pd.Timestamp(T0 + timedelta(seconds=7))
    assert list(trail["code"].fillna("-")) == ["on_task", "off_task", "bored", "-"]


def test_read_side_matches_the_documented_contract(tmp_path: Path) -> None:
    with Store(tmp_path / "o.sqlite") as store:
        sid = session(store, paired_start=T0)
        code(store, sid, "o1", "activity", "on_task", 2)
        store.record_no_code(session_id=sid, learner="L02", window_start=T0 + timedelta(seconds=20),
                             window_end=T0 + timedelta(seconds=40), scheme_hash="h1", slot=1)
        store.record_note("o1", "leaned over to the neighbour", T0 + timedelta(seconds=3))
        view = store.observations(["activity", "affect"])
    assert list(view.columns) == list(OBSERVATION_COLUMNS) + ["activity", "affect"] + list(OBSERVATION_TAIL_COLUMNS)
    for column in ("paired_start", "window_start", "window_end", "coded_at"):
        assert str(view[column].dtype) == "datetime64[ns, UTC]", column
    assert list(view["no_code"]) == [False, True]
    assert view.loc[0, "note"] == "leaned over to the neighbour"
    assert list(view["slot"]) == [0, 1]


def test_naive_datetimes_are_refused(tmp_path: Path) -> None:
    with Store(tmp_path / "o.sqlite") as store, pytest.raises(ValueError, match="naive"):
        session(store, started_at=datetime(2026, 3, 2, 8, 0))


def test_a_store_from_a_newer_version_is_refused(tmp_path: Path) -> None:
    path = tmp_path / "o.sqlite"
    Store(path).close()
    connection = sqlite3.connect(path)
    connection.execute(f"PRAGMA user_version = {SCHEMA_VERSION + 1}")
    connection.close()
    with pytest.raises(InputError, match="newer fieldmark"):
        Store(path)


def test_reopening_keeps_everything_and_migrates_nothing_twice(tmp_path: Path) -> None:
    path = tmp_path / "o.sqlite"
    with Store(path) as store:
        code(store, session(store), "o1", "activity", "on_task", 2)
    with Store(path) as store:
        assert store.schema_version == SCHEMA_VERSION
        assert len(store.observations()) == 1


def test_merging_another_device_is_idempotent_and_keeps_correction_order(tmp_path: Path) -> None:
    with Store(tmp_path / "device.sqlite") as device:
        sid = session(device)
        first = code(device, sid, "o1", "activity", "on_task", 2)
        code(device, sid, "o1", "activity", "away", 4, supersedes=first)
        device.record_sync_mark(session_id=sid, learner="L01", marked_at=T0 + timedelta(seconds=9))
    with Store(tmp_path / "study.sqlite") as study:
        added = study.append_rows(read_foreign_store(tmp_path / "device.sqlite", None).rows)
        again = study.append_rows(read_foreign_store(tmp_path / "device.sqlite", None).rows)
        view = study.observations(["activity"])
        marks = study.sync_marks()
    assert added["codes"] == 2 and added["sync_marks"] == 1
    assert sum(again.values()) == 0
    assert view.loc[0, "activity"] == "away"
    assert marks.loc[0, "device"] == "laptop-a"


def test_a_version_1_store_migrates_forward_and_keeps_its_rows(tmp_path: Path) -> None:
    from observer_app.study.store import MIGRATIONS, _statements
    path = tmp_path / "old.sqlite"
    connection = sqlite3.connect(path)
    for statement in _statements(MIGRATIONS[0]):
        connection.execute(statement)
    connection.execute("PRAGMA user_version = 1")
    connection.execute("INSERT INTO sessions VALUES ('s1','ana','laptop-a','live',NULL,0,0.0,20,'fixed',1,'h1','')")
    connection.execute("INSERT INTO observations VALUES ('o1','s1','L01',0,'',0,20000000000,1,0,'h1')")
    connection.execute("INSERT INTO codes VALUES ('c1','o1','activity','on_task',1,NULL)")
    connection.commit()
    connection.close()
    with Store(path) as store:
        assert store.schema_version == SCHEMA_VERSION == len(MIGRATIONS)
        assert store.replay_plans().empty  # every later table exists after migrating forward
        assert store.observations(["activity"]).loc[0, "activity"] == "on_task"
        store.record_window_end("o1", datetime(1970, 1, 1, 0, 0, 7, tzinfo=timezone.utc))
        assert store.observations(["activity"]).loc[0, "window_end"] == pd.Timestamp("1970-01-01T00:00:07Z")
    with Store(tmp_path / "study.sqlite") as study:  # a newer store imports an older one's rows
        assert study.append_rows(read_foreign_store(path, None).rows)["codes"] == 1
        assert study.sessions()["pairing_id"].isna().all()  # columns an older store lacks take their defaults


def test_an_older_device_store_without_pairing_columns_merges_by_column_name(tmp_path: Path) -> None:
    from observer_app.study.store import MIGRATION_PAIRED_SIGNAL, MIGRATIONS, _statements
    path = tmp_path / "device.sqlite"
    connection = sqlite3.connect(path)
    before = MIGRATIONS.index(MIGRATION_PAIRED_SIGNAL)
    for step in range(before):
        for statement in _statements(MIGRATIONS[step]):
            connection.execute(statement)
    connection.execute(f"PRAGMA user_version = {before}")
    connection.execute("INSERT INTO sessions VALUES ('s1','ana','laptop-a','live',5,0,0.0,20,'fixed',1,'h1','')")
    connection.execute("INSERT INTO sync_marks VALUES ('m1','s1','L01',7,'attempt seen')")
    connection.commit()
    connection.close()
    with Store(tmp_path / "study.sqlite") as study:
        first = study.append_rows(read_foreign_store(path, None).rows)
        assert first["sessions"] == 1 and first["sync_marks"] == 1
        assert sum(study.append_rows(read_foreign_store(path, None).rows).values()) == 0  # idempotent
        marks, sessions = study.sync_marks(), study.sessions()
    assert list(marks["kind"]) == [""] and marks["pairing_id"].isna().all()
    assert sessions.loc[0, "paired_start"] == pd.Timestamp(5, tz="UTC") and pd.isna(sessions.loc[0, "pairing_id"])
    assert pd.isna(sessions.loc[0, "typed_clock_difference_s"])


def test_a_signal_start_mark_gives_the_session_its_paired_start(tmp_path: Path) -> None:
    from observer_app.study.store import SIGNAL_START
    with Store(tmp_path / "o.sqlite") as store:
        sid = store.start_session(coder="ana", device="laptop-a", mode="live", started_at=T0, monotonic_start=1.0,
                                  window_seconds=20, order="fixed", seed=1, scheme_hash="h", pairing_id="KM7QX")
        assert store.sessions()["paired_start"].isna().all()  # awaiting the signal
        store.record_sync_mark(session_id=sid, marked_at=T0 + timedelta(seconds=9), pairing_id="KM7QX",
                               kind=SIGNAL_START)
        assert store.sessions().loc[0, "paired_start"] == pd.Timestamp(T0 + timedelta(seconds=9))
        with pytest.raises(ValueError):
            store.record_sync_mark(session_id=sid, marked_at=T0, kind="whenever")


def test_an_early_window_end_replaces_the_planned_end_exactly(tmp_path: Path) -> None:
    with Store(tmp_path / "o.sqlite") as store:
        code(store, session(store), "o1", "activity", "on_task", 2)
        early = T0 + timedelta(seconds=7, microseconds=123457)
        store.record_window_end("o1", early)
        view = store.observations(["activity"])
    assert view.loc[0, "window_end"] == pd.Timestamp(early)  # nanosecond-exact, no float rounding
