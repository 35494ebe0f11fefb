"""What live and replay coding share (observer_app/coding/coding_session.py), driven through both kinds.

The store file is read back with plain sqlite3 on a connection of its own, outside the
project's read side: a row another connection can read is committed (sqlite.org,
"Write-Ahead Logging": readers see every transaction committed before they start).
"""
from __future__ import annotations

import contextlib
import shutil
import sqlite3

import pytest

from demo_sessions import committed_copy
from observer_app.coding.clock import FakeClock
from observer_app.coding.live import LiveSession
from observer_app.coding.replay import ReplaySession
from observer_app.coding.session_events import EventKind
from observer_app.study.folder import load_study
from observer_app.study.store import Store
from tests.app.conftest import make_study


@pytest.fixture(params=["live", "replay"])
def session(request, tmp_path):
    """A fresh session of each kind, its store closed after the test."""
    if request.param == "live":
        study = load_study(make_study(tmp_path / "study"))
        store = Store(study.store_path)
        made = LiveSession.start(study, store, FakeClock(), coder="ana", device="laptop-1")
    else:
        study = load_study(shutil.copytree(committed_copy(), tmp_path / "study"))
        store = Store(study.store_path)
        made = ReplaySession.start(study, store, FakeClock(), coder="rhea", device="laptop-r",
                                   learners=["L02", "L09"], sample=4, seed=11)
    yield made
    with contextlib.suppress(sqlite3.ProgrammingError):  # the failed-write test closed it already
        store.close()


def first_keys(session) -> list[str]:
    """The key of each dimension's first code, scheme order (read from the scheme file's codes)."""
    return [dimension.codes[0].key for dimension in session.study.scheme.dimensions]


def in_file(session) -> tuple[int, set[tuple[str, str]]]:
    """(code rows of this session, (dimension, code) pairs ever stored) as another connection reads them."""
    with sqlite3.connect(session.study.store_path) as connection:
        rows = connection.execute(
            "SELECT dimension, code FROM codes JOIN observations USING (observation_id) WHERE session_id = ?",
            (session.session_id,)).fetchall()
    return len(rows), {(dimension, code) for dimension, code in rows if code is not None}


def test_every_event_comes_after_what_it_shows_is_in_the_store_file(session):
    seen = []

    def listener(event) -> None:  # what a screen does: read the state when told
        state = session.state()
        count, stored = in_file(session)
        seen.append(event.kind)
        assert count == state.saved_count
        assert set(state.coded.items()) <= stored

    session.add_listener(listener)
    first, second = first_keys(session)
    session.press(first)
    session.press(second)  # every dimension coded: the next window or clip
    session.undo()
    session.press(second)
    assert session.note("meter read twice")
    assert len(seen) == 5 and session.state().saved_count == 4  # two codes, a retraction, a code again


def test_a_failed_write_changes_nothing_and_says_not_saved(session):
    heard = []
    session.add_listener(heard.append)
    before = session.state()
    session.store.close()  # every further write raises sqlite3.ProgrammingError, a sqlite3.Error
    assert session.press(first_keys(session)[0])  # the key meant a code...
    assert not session.note("meter read twice")  # ...and neither it nor the note was saved
    state = session.state()
    assert state.coded == {} and state.saved_count == 0 and state.learner == before.learner
    assert state.error.startswith("NOT SAVED: note")
    assert [event.kind for event in heard] == [EventKind.CHANGED, EventKind.CHANGED]
    assert in_file(session) == (0, set())


def test_a_code_while_blocked_is_refused_with_the_reason(session):
    session.end()
    heard = []
    session.add_listener(heard.append)
    assert not session.code(*session.study.scheme.key_map()[first_keys(session)[0]])
    assert session.state().message == "The session has ended"
    assert [event.kind for event in heard] == [EventKind.CHANGED]
    assert in_file(session) == (0, set())


def test_replay_says_moved_only_when_the_clip_changes(tmp_path):
    study = load_study(shutil.copytree(committed_copy(), tmp_path / "study"))
    with Store(study.store_path) as store:
        session = ReplaySession.start(study, store, FakeClock(), coder="rhea", device="laptop-r",
                                      learners=["L02", "L09"], sample=4, seed=11)
        heard = []
        session.add_listener(heard.append)
        first, second = first_keys(session)
        session.press(first)  # clip 1, one dimension
        session.note("meter read twice")  # clip 1 still
        session.press(second)  # clip 1 done: clip 2
        session.undo()  # back to clip 1
        session.skip()  # clip 1 has a row: on to clip 2
        positions = session.state().position
    assert [event.kind for event in heard] == [EventKind.CHANGED, EventKind.CHANGED, EventKind.MOVED,
                                               EventKind.MOVED, EventKind.MOVED]
    assert positions == 1
