"""The live session model driven with a fake clock; the store is read back with plain sqlite3.

Expected learners come from the roster file order and plain arithmetic on the slot grid
(slot = floor(seconds since start / window), common practice for fixed-interval
momentary time sampling), never from the schedule code itself.
"""
from __future__ import annotations

import math
import sqlite3
from collections import Counter
from datetime import timedelta

import pandas as pd
import pytest

from observer_app.coding.live import LiveSession, elapsed_since_start, find_interrupted_session
from observer_app.coding.clock import FakeClock
from observer_app.coding.session_events import EventKind, SessionEvent
from observer_app.study.store import Store
from observer_app.study.folder import load_study
from tests.app.conftest import make_study

ROSTER_ORDER = [f"L{n:02d}" for n in range(1, 7)]  # the order written in conftest.ROSTER


def raw(study, query: str, params: tuple = ()) -> list[tuple]:
    """Read the store file directly, outside the project's own read side."""
    with sqlite3.connect(study.store_path) as connection:
        return connection.execute(query, params).fetchall()


def test_solo_advances_as_soon_as_every_dimension_is_coded(study, store, clock):
    session = LiveSession.start(study, store, clock, coder="ana", device="laptop-1")
    assert session.state().learner == "L01" and session.state().label == "Bench 1"
    assert session.state().next_label == "Bench 2"
    clock.advance(3)
    assert session.press("1")
    assert session.state().learner == "L01"
    assert session.state().missing == ("affect",)
    clock.advance(2)
    assert session.press("q")
    state = session.state()
    assert state.learner == "L02" and state.missing == ("activity", "affect")
    assert state.time_left == pytest.approx(20.0)  # a fresh full window from the moment of advance
    rows = raw(study, "SELECT o.learner, c.dimension, c.code FROM codes c JOIN observations o USING (observation_id) ORDER BY c.rowid")
    assert rows == [("L01", "activity", "on_task"), ("L01", "affect", "focused")]
    # the window really ended when the last code went in (5 s), not at the planned 20 s
    view = store.observations(["activity", "affect"])
    first = view[view["learner"] == "L01"].iloc[0]
    assert (first["window_end"] - first["window_start"]).total_seconds() == pytest.approx(5.0)


def test_solo_window_that_ends_uncoded_is_an_explicit_no_code_row(study, store, clock):
    session = LiveSession.start(study, store, clock, coder="ana", device="laptop-1")
    clock.advance(20.5)
    session.tick()
    assert session.state().learner == "L02"
    rows = raw(study, "SELECT learner, slot, no_code FROM observations")
    assert rows == [("L01", 0, 1)]
    assert raw(study, "SELECT count(*) FROM codes") == [(0,)]


def test_paired_session_advances_only_on_the_slot_boundary(study, store, clock):
    start = clock.now_utc()
    session = LiveSession.start(study, store, clock, coder="ana", device="laptop-1", typed_clock_difference_s=0.0, paired_start=start)
    session.press("2")
    session.press("w")
    assert session.state().learner == "L01"  # all coded, still the same learner
    assert session.state().missing == ()
    clock.advance(19.9)
    session.tick()
    assert session.state().learner == "L01"
    clock.advance(0.1)
    session.tick()
    assert session.state().learner == "L02" and session.state().slot == 1


def test_paired_start_in_the_future_waits_and_refuses_codes(study, store, clock):
    start = clock.now_utc() + timedelta(seconds=45)
    session = LiveSession.start(study, store, clock, coder="ana", device="laptop-1", typed_clock_difference_s=0.0, paired_start=start)
    state = session.state()
    assert state.waiting and state.time_left == pytest.approx(45)
    assert session.press("1")  # a code key, but nothing is stored before the start
    assert raw(study, "SELECT count(*) FROM codes") == [(0,)]
    clock.advance(45 + 20 * 3 + 1)  # three whole slots after the shared start
    session.tick()
    assert session.state().slot == 3 and session.state().learner == ROSTER_ORDER[3]
    assert raw(study, "SELECT slot FROM observations WHERE no_code = 1 ORDER BY slot") == [(0,), (1,), (2,)]


def test_late_joiner_in_a_paired_run_starts_on_the_shared_grid(study, store, clock):
    start = clock.now_utc() - timedelta(seconds=130)  # the partner began 130 s ago
    session = LiveSession.start(study, store, clock, coder="ben", device="laptop-2", typed_clock_difference_s=0.0, paired_start=start)
    expected_slot = math.floor(130 / 20)
    assert session.state().slot == expected_slot
    assert session.state().learner == ROSTER_ORDER[expected_slot % 6]
    assert session.state().time_left == pytest.approx(20 * (expected_slot + 1) - 130)
    assert raw(study, "SELECT count(*) FROM observations") == [(0,)]  # nothing written for slots before joining


def test_undo_writes_a_retraction_and_keeps_the_original(study, store, clock):
    session = LiveSession.start(study, store, clock, coder="ana", device="laptop-1", typed_clock_difference_s=0.0, paired_start=clock.now_utc())
    session.press("3")
    session.press("e")
    assert session.undo()
    assert session.state().coded == {"activity": "off_task"}
    assert session.state().missing == ("affect",)
    rows = raw(study, "SELECT code_id, dimension, code, supersedes FROM codes ORDER BY rowid")
    assert len(rows) == 3
    original, retraction = rows[1], rows[2]
    assert original[1:] == ("affect", "frustrated", None)  # the original row is still there
    assert retraction[1:3] == ("affect", None) and retraction[3] == original[0]
    current = store.observations(study.scheme.dimension_names)
    assert current.loc[0, "activity"] == "off_task" and pd.isna(current.loc[0, "affect"])
    assert bool(current.loc[0, "corrected"])
    assert session.undo()  # then the activity code
    assert session.state().coded == {}
    assert not session.undo()  # nothing left
    assert len(raw(study, "SELECT * FROM codes")) == 4


def test_recoding_a_dimension_supersedes_the_earlier_code(study, store, clock):
    session = LiveSession.start(study, store, clock, coder="ana", device="laptop-1", typed_clock_difference_s=0.0, paired_start=clock.now_utc())
    session.press("1")
    session.press("3")
    rows = raw(study, "SELECT code_id, code, supersedes FROM codes ORDER BY rowid")
    assert rows[1][1:] == ("off_task", rows[0][0])
    assert session.state().coded == {"activity": "off_task"}
    session.undo()  # undo retracts the correction; the superseded code is not resurrected
    assert session.state().coded == {}
    assert not session.undo()


def test_could_not_observe_key_codes_every_remaining_dimension(study, store, clock):
    session = LiveSession.start(study, store, clock, coder="ana", device="laptop-1")
    session.press("4")
    session.code_remaining_not_observed()
    assert session.state().learner == "L02"
    assert raw(study, "SELECT dimension, code FROM codes ORDER BY rowid") == [
        ("activity", "rapid_guessing"), ("affect", "unclear")]  # "unclear": scheme.toml's could_not_observe for affect


def test_could_not_observe_after_a_window_ran_out_codes_one_window_whole(study, store, clock):
    """F8 pressed after L01's window ran out but before the screen's next tick: L01's window is
    closed as missed and F8 codes every dimension of L02's (it coded L02's first dimension only)."""
    session = LiveSession.start(study, store, clock, coder="ana", device="laptop-1")
    clock.advance(20.5)  # no tick
    assert session.code_remaining_not_observed()
    assert raw(study, "SELECT learner, no_code FROM observations ORDER BY rowid") == [("L01", 1), ("L02", 0)]
    assert raw(study, "SELECT o.learner, c.dimension, c.code FROM codes c JOIN observations o USING (observation_id) "
                      "ORDER BY c.rowid") == [("L02", "activity", "not_visible"), ("L02", "affect", "unclear")]  # scheme.toml's could_not_observe codes
    assert session.state().learner == "L03"


def test_absent_learner_is_skipped_and_returned_learner_is_picked_up(study, store, clock):
    session = LiveSession.start(study, store, clock, coder="ana", device="laptop-1")
    session.mark_absent("L03")
    seen = []
    for _ in range(6):
        seen.append(session.state().learner)
        session.press("1")
        session.press("q")
    assert seen == ["L01", "L02", "L04", "L05", "L06", "L01"]
    session.mark_returned("L03")
    for _ in range(3):
        seen.append(session.state().learner)
        session.press("1")
        session.press("q")
    assert seen[6:] == ["L02", "L03", "L04"]
    assert raw(study, "SELECT learner, state FROM absences ORDER BY rowid") == [("L03", "absent"), ("L03", "returned")]


def test_marking_the_current_learner_absent_ends_their_solo_turn(study, store, clock):
    session = LiveSession.start(study, store, clock, coder="ana", device="laptop-1")
    clock.advance(4)
    session.mark_absent()
    assert session.state().learner == "L02"
    assert "L01" in session.state().absent
    assert raw(study, "SELECT learner, no_code FROM observations") == [("L01", 1)]


def test_solo_pause_stops_time_and_resume_gives_a_fresh_window(study, store, clock):
    session = LiveSession.start(study, store, clock, coder="ana", device="laptop-1")
    clock.advance(8)
    session.pause()
    clock.advance(300)
    session.tick()
    state = session.state()
    assert state.paused and state.learner == "L01" and state.time_left == pytest.approx(12)
    session.press("1")
    assert raw(study, "SELECT count(*) FROM codes") == [(0,)]  # no coding while paused
    session.resume()
    assert session.state().time_left == pytest.approx(20)
    clock.advance(19)
    session.tick()
    assert session.state().learner == "L01"
    clock.advance(1)
    session.tick()
    assert session.state().learner == "L02"


def test_paired_pause_keeps_the_shared_grid(study, store, clock):
    session = LiveSession.start(study, store, clock, coder="ana", device="laptop-1", typed_clock_difference_s=0.0, paired_start=clock.now_utc())
    session.pause()
    clock.advance(65)
    session.tick()
    assert session.state().slot == 3
    session.resume()
    assert session.state().slot == 3 and session.state().time_left == pytest.approx(15)
    assert raw(study, "SELECT slot FROM observations WHERE no_code = 1 ORDER BY slot") == [(0,), (1,), (2,)]


def test_sync_mark_stores_the_device_time_and_current_learner(study, store, clock):
    session = LiveSession.start(study, store, clock, coder="ana", device="laptop-1")
    clock.advance(2.25)
    marked = session.sync_mark()
    assert marked == clock.now_utc()
    stored = raw(study, "SELECT learner, marked_ns FROM sync_marks")
    assert stored == [("L01", int(pd.Timestamp(marked).value))]


def test_note_is_attached_to_the_current_window(study, store, clock):
    session = LiveSession.start(study, store, clock, coder="ana", device="laptop-1")
    assert session.note("left the bench to fetch cable")
    session.press("5")
    session.press("t")
    frame = store.observations(study.scheme.dimension_names)
    assert len(frame) == 1
    assert frame.loc[0, "note"] == "left the bench to fetch cable"
    assert frame.loc[0, "activity"] == "away" and not bool(frame.loc[0, "no_code"])


def test_a_failed_write_is_not_shown_as_saved(study, clock, tmp_path):
    store = Store(study.store_path)
    session = LiveSession.start(study, store, clock, coder="ana", device="laptop-1")
    store.close()  # any further write raises sqlite3.ProgrammingError, a sqlite3.Error
    session.press("1")
    state = session.state()
    assert state.coded == {} and state.saved_count == 0
    assert state.error and "NOT SAVED" in state.error


def test_listeners_hear_every_change(study, store, clock):
    session = LiveSession.start(study, store, clock, coder="ana", device="laptop-1")
    heard = []
    session.add_listener(heard.append)
    session.press("1")
    session.tick()
    assert heard == [SessionEvent(EventKind.CHANGED), SessionEvent(EventKind.TICK)]


def test_listeners_hear_moved_when_another_learner_is_up(study, store, clock):
    session = LiveSession.start(study, store, clock, coder="ana", device="laptop-1")
    heard = []
    session.add_listener(heard.append)
    session.press("1")
    session.press("q")  # solo: every dimension coded, the next learner is up at once
    assert session.state().learner == ROSTER_ORDER[1]
    clock.advance(5)
    session.tick()  # the same window: only the time moved
    clock.advance(20)
    session.tick()  # the window ran out: another learner
    assert session.state().learner == ROSTER_ORDER[2]
    assert [event.kind for event in heard] == [EventKind.CHANGED, EventKind.MOVED, EventKind.TICK, EventKind.MOVED]


def test_end_of_session_counts_match_the_keys_pressed(study, store, clock):
    keys = {"1": ("activity", "on_task"), "3": ("activity", "off_task"), "q": ("affect", "focused"),
            "r": ("affect", "bored")}
    session = LiveSession.start(study, store, clock, coder="ana", device="laptop-1")
    pressed: Counter = Counter()
    plan = ["1q", "3r", "", "1r", "1q", "3q", "", "3r", "1q"]
    for pair in plan:
        learner = session.state().learner
        if not pair:
            clock.advance(20)
            session.tick()
            continue
        for key in pair:
            clock.advance(1.5)
            session.press(key)
            pressed[(learner, *keys[key])] += 1
    session.sync_mark()
    summary = session.end()
    counted = {(r.learner, r.dimension, r.code): r.count for r in summary.counts.itertuples()}
    assert counted == dict(pressed)
    assert summary.windows == len(plan) and summary.missed_windows == 2
    assert summary.coded_windows == 7 and summary.sync_marks == 1
    missed = summary.per_learner.set_index("learner")["missed_windows"].to_dict()
    assert missed["L03"] == 1 and missed["L01"] == 1  # the 3rd and 7th windows: L03 and L01 (roster order)
    assert raw(study, "SELECT count(*) FROM session_ends") == [(1,)]
    assert find_interrupted_session(study, store, "laptop-1") is None


def test_two_paired_devices_stay_on_the_same_learner_for_an_hour(tmp_path):
    """Two coders, own devices and stores, typing the same shared start; one joins 37 s late."""
    studies = [load_study(make_study(tmp_path / name, order="shuffled")) for name in ("north", "south")]
    first = FakeClock(monotonic=5000.0)
    second = FakeClock(monotonic=123.0, wall=first.now_utc() + timedelta(seconds=37))
    shared = first.now_utc() + timedelta(seconds=30)
    stores = [Store(s.store_path) for s in studies]
    ana = LiveSession.start(studies[0], stores[0], first, coder="ana", device="laptop-1", typed_clock_difference_s=0.0, paired_start=shared)
    ben = LiveSession.start(studies[1], stores[1], second, coder="ben", device="laptop-2", typed_clock_difference_s=0.0, paired_start=shared)
    first.advance(37)
    keys = "123qwe0t"
    compared = 0
    for step in range(1, 1801):  # every two seconds for an hour
        first.advance(2.0)
        second.advance(2.0)
        if step % 7 == 0:
            ana.press(keys[step % len(keys)])
        if step % 11 == 0:
            ben.press(keys[(step // 3) % len(keys)])
        if step == 375:  # both coders see L04 leave at the same moment
            ana.mark_absent("L04")
            ben.mark_absent("L04")
        if step == 1000:
            ana.mark_returned("L04")
            ben.mark_returned("L04")
        ana.tick()
        ben.tick()
        one, two = ana.state(), ben.state()
        assert (one.slot, one.learner) == (two.slot, two.learner)
        elapsed = (first.now_utc() - shared).total_seconds()
        assert one.slot == math.floor(elapsed / 20)
        compared += 1
    assert compared == 1800
    assert ana.state().slot >= 180
    slots = [s.observations(studies[0].scheme.dimension_names).set_index("slot")["learner"] for s in stores]
    common = slots[0].index.intersection(slots[1].index)
    assert len(common) > 150
    assert (slots[0][common] == slots[1][common]).all()
    for store in stores:
        store.close()


def test_elapsed_time_uses_the_wall_clock_when_monotonic_is_not_comparable():
    clock = FakeClock(monotonic=50.0)  # after a reboot the monotonic clock starts again
    started_at = clock.now_utc() - timedelta(seconds=600)
    assert elapsed_since_start(4000.0, started_at, clock) == pytest.approx(600)
    assert elapsed_since_start(-550.0, started_at, clock) == pytest.approx(600)  # comparable: 600 s either way
    suspended = FakeClock(monotonic=4100.0, wall=started_at + timedelta(seconds=900))
    assert elapsed_since_start(4000.0, started_at, suspended) == pytest.approx(900)  # suspend: wall clock wins


@pytest.mark.parametrize("paired", [False, True])
def test_reopening_resumes_an_interrupted_session(study, clock, paired):
    store = Store(study.store_path)
    session = LiveSession.start(study, store, clock, coder="ana", device="laptop-1",
                                typed_clock_difference_s=0.0, paired_start=clock.now_utc() if paired else None)
    for _ in range(4):  # four learners fully coded
        clock.advance(6)
        session.press("1")
        clock.advance(1)
        session.press("q")
        if paired:
            clock.advance(13)
            session.tick()
    session.mark_absent("L06")
    clock.advance(2)
    session.press("4")  # fifth learner half coded, then the app dies
    store.close()
    clock.advance(47)
    store = Store(study.store_path)
    interrupted = find_interrupted_session(study, store, "laptop-1")
    assert interrupted is not None and interrupted.session_id == session.session_id
    assert interrupted.codes_saved == 9
    resumed = LiveSession.reopen(study, store, clock, interrupted.session_id)
    state = resumed.state()
    if paired:
        expected = math.floor((4 * 20 + 2 + 47) / 20)  # 129 s on the grid -> slot 6
        assert state.slot == expected
        assert state.learner == "L01"  # slot 6: L06 absent keeps slot 5 (skipped), so slot 6 opens round 2
        assert state.skipped is False
        # the slot the app died in: L05 coded; L06's slot passed while it was down, skipped, so no row
        assert raw(study, "SELECT slot, no_code FROM observations WHERE slot >= 4 ORDER BY slot") == [(4, 0)]
    else:
        assert state.slot == 4 and state.learner == "L05"
        assert state.coded == {"activity": "rapid_guessing"} and state.missing == ("affect",)
        assert state.time_left == pytest.approx(20)
        resumed.press("w")
        assert resumed.state().learner == "L01"  # L06 is still absent after the resume
    assert state.saved_count == 9
    assert "L06" in state.absent
    store.close()


def test_solo_resume_after_a_window_that_ran_out_moves_to_the_next_learner(study, clock):
    store = Store(study.store_path)
    session = LiveSession.start(study, store, clock, coder="ana", device="laptop-1")
    session.press("1")
    session.press("q")
    clock.advance(21)
    session.tick()  # Bench 2's window ran out: a no-code row
    store.close()
    clock.advance(30)
    with Store(study.store_path) as reopened:
        resumed = LiveSession.reopen(study, reopened, clock, session.session_id)
        assert resumed.state().learner == "L03" and resumed.state().slot == 2
