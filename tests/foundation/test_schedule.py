"""The round-robin schedule: exact boundaries over a long day, rounds, absences, paired mode."""
from __future__ import annotations

from collections import Counter

import pytest

from observer_app.coding.schedule import RoundRobin

LEARNERS = [f"L{i:02d}" for i in range(1, 25)]


def test_eight_hours_of_slots_have_exact_boundaries() -> None:
    # 8 h of 20 s windows = 1440 slots; boundary n must be exactly n * 20 s after the start
    # (no accumulated drift), checked with a fake clock ticking every 0.25 s.
    schedule = RoundRobin(LEARNERS, 20, order="shuffled", seed=5, paired=True)
    ended = []
    tick = 0.0
    while tick <= 8 * 3600:
        ended.extend(schedule.advance_to(tick))
        tick += 0.25
    assert len(ended) == 1440
    for n, turn in enumerate(ended):
        assert turn.slot == n
        assert turn.start == n * 20.0 and turn.end == (n + 1) * 20.0
    # an odd window length that is not exact in binary floating point behaves the same
    odd = RoundRobin(LEARNERS, 7.3, paired=True)
    turns = odd.advance_to(8 * 3600)
    assert all(t.start == t.slot * 7.3 for t in turns)


def test_solo_schedule_without_early_finish_also_never_drifts() -> None:
    schedule = RoundRobin(LEARNERS, 15, order="fixed")
    turns = schedule.advance_to(8 * 3600)
    assert [t.start for t in turns] == [n * 15.0 for n in range(len(turns))]


def test_every_round_visits_each_present_learner_once() -> None:
    schedule = RoundRobin(LEARNERS, 20, order="shuffled", seed=11, paired=True)
    turns = schedule.advance_to(24 * 20 * 10)
    rounds: dict[int, list[str]] = {}
    for turn in turns:
        rounds.setdefault(turn.round, []).append(turn.learner)
    assert len(rounds) == 10
    assert all(sorted(order) == LEARNERS for order in rounds.values())
    assert len({tuple(order) for order in rounds.values()}) > 1, "shuffled rounds should differ"


def test_fixed_order_follows_the_roster() -> None:
    schedule = RoundRobin(["a", "b", "c"], 10)
    assert [t.learner for t in schedule.advance_to(60)] == ["a", "b", "c", "a", "b", "c"]


def test_shuffled_order_is_reproducible_from_the_seed() -> None:
    first = [t.learner for t in RoundRobin(LEARNERS, 20, order="shuffled", seed=3).advance_to(2000)]
    again = [t.learner for t in RoundRobin(LEARNERS, 20, order="shuffled", seed=3).advance_to(2000)]
    other = [t.learner for t in RoundRobin(LEARNERS, 20, order="shuffled", seed=4).advance_to(2000)]
    assert first == again and first != other


def test_absent_learners_are_skipped_without_losing_time_and_return_in_place() -> None:
    schedule = RoundRobin(["a", "b", "c", "d"], 10)
    schedule.mark_absent("c")
    turns = schedule.advance_to(60)
    assert [t.learner for t in turns] == ["a", "b", "d", "a", "b", "d"]
    assert [t.start for t in turns] == [0, 10, 20, 30, 40, 50]
    schedule.mark_returned("c")  # current turn is 'a' of round 2; c has not passed yet
    assert [t.learner for t in schedule.advance_to(100)] == ["a", "b", "c", "d"]


def test_nobody_present_gives_an_empty_turn_not_a_hang() -> None:
    schedule = RoundRobin(["a", "b"], 10, present=[])
    assert schedule.current.learner is None
    assert all(t.learner is None for t in schedule.advance_to(50))
    schedule.mark_returned("b")
    assert schedule.advance_to(60)[-1].learner is None and schedule.current.learner == "b"


def test_solo_early_finish_starts_the_next_turn_at_once() -> None:
    schedule = RoundRobin(["a", "b", "c"], 20)
    ended = schedule.finish_early(7.5)
    assert (ended.learner, ended.start, ended.end) == ("a", 0.0, 7.5)
    assert (schedule.current.learner, schedule.current.start, schedule.current.end) == ("b", 7.5, 27.5)
    assert [t.end for t in schedule.advance_to(70)] == [27.5, 47.5, 67.5]


def test_restart_after_pause_gives_the_same_learner_a_full_window() -> None:
    schedule = RoundRobin(["a", "b"], 20)
    schedule.advance_to(25)
    turn = schedule.restart_at(100.0)
    assert (turn.learner, turn.start, turn.end) == ("b", 100.0, 120.0)


def test_paired_coders_stay_on_the_same_learner_in_every_slot() -> None:
    # two coders, same settings and shared start; their devices tick at different moments
    first = RoundRobin(LEARNERS, 20, order="shuffled", seed=9, paired=True)
    second = RoundRobin(LEARNERS, 20, order="shuffled", seed=9, paired=True)
    for tick in range(0, 3600 * 4, 3):
        first.advance_to(tick + 0.01)
        second.advance_to(tick + 0.97)
        if tick == 1800:  # both mark the same absence at the same slot
            first.mark_absent("L05")
            second.mark_absent("L05")
        assert first.current.slot == second.current.slot
        assert first.current.learner == second.current.learner
    with pytest.raises(RuntimeError):
        first.finish_early(10.0)


def test_upcoming_does_not_move_the_schedule() -> None:
    schedule = RoundRobin(["a", "b", "c"], 10)
    assert schedule.upcoming(4) == ["b", "c", "a", "b"]
    assert schedule.current.learner == "a"
    counts = Counter(t.learner for t in schedule.advance_to(90))
    assert counts == {"a": 3, "b": 3, "c": 3}
