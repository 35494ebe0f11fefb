"""Whose turn it is: the round-robin schedule, as plain Python with no clock of its own.

Every time is *elapsed seconds since the session's monotonic start*, given by the
caller, so the schedule is deterministic and testable.  Turn boundaries are computed
as ``anchor + n * window`` (multiplication, never repeated addition), so they do not
drift over a long day.

Rules:
- A round visits every roster learner once, in roster order ("fixed") or in an order
  drawn from ``(seed, round number)`` ("shuffled").  Learners absent when their turn
  comes are skipped without using up time; a returning learner is picked up at their
  place in the current round if it has not passed yet, else in the next round.
- Paired mode: turn n always covers [n * window, (n + 1) * window) and always belongs
  to the same learner: an absent learner keeps their slot, which is skipped (the turn
  says so), not removed.  So two coders with the same settings and roster are on the
  same learner in the same slot even when one marks an absence the other does not.
- Solo mode: a turn may finish early (all dimensions coded); the next turn starts at
  that moment and later boundaries are counted from it.
"""
from __future__ import annotations

import random
from dataclasses import dataclass
from collections.abc import Sequence


@dataclass(frozen=True)
class Turn:
    """One window of the schedule: ``slot`` is the turn number from 0."""

    slot: int
    learner: str | None  # None when nobody is present
    start: float
    end: float
    round: int
    skipped: bool = False  # paired mode: the learner was absent when the slot began


class RoundRobin:
    """The schedule.  ``learners`` in roster order; ``present`` those there at the start."""

    def __init__(
        self, learners: Sequence[str], window_seconds: float, *, order: str = "fixed", seed: int = 0,
        paired: bool = False, present: Sequence[str] | None = None,
    ) -> None:
        if window_seconds <= 0:
            raise ValueError("window_seconds must be positive")
        if order not in ("fixed", "shuffled"):
            raise ValueError(f"unknown order {order!r}")
        if len(set(learners)) != len(learners):
            raise ValueError("learners must be unique")
        self.learners = tuple(learners)
        self.window = float(window_seconds)
        self.order = order
        self.seed = seed
        self.paired = paired
        self._present = set(self.learners if present is None else present)
        self._round = 0
        self._round_order = self.round_order(0)
        self._position = -1  # index in the current round of the current turn's learner
        self._anchor = 0.0  # solo mode: elapsed time that boundaries are counted from
        self._anchor_slot = 0
        self._current = self._next_turn(slot=0, start=0.0)

    # -- decisions ---------------------------------------------------------------
    def round_order(self, round_number: int) -> tuple[str, ...]:
        """The order of one round: roster order, or shuffled from (seed, round)."""
        if self.order == "fixed":
            return self.learners
        shuffled = list(self.learners)
        random.Random(f"{self.seed}:{round_number}").shuffle(shuffled)
        return tuple(shuffled)

    def _boundary(self, slot: int) -> float:
        if self.paired:
            return slot * self.window
        return self._anchor + (slot - self._anchor_slot) * self.window

    def _next_turn(self, slot: int, start: float) -> Turn:
        """Pick the next present learner after the current position, moving rounds as needed."""
        learner = None
        for _ in range(2 * len(self.learners) + 1):
            self._position += 1
            if self._position >= len(self._round_order):
                self._round += 1
                self._round_order = self.round_order(self._round)
                self._position = 0
            candidate = self._round_order[self._position] if self._round_order else None
            if candidate in self._present or (self.paired and candidate is not None):
                learner = candidate
                break
        if learner is None:
            self._position = -1 if not self._round_order else self._position
        return Turn(slot=slot, learner=learner, start=start, end=self._boundary(slot + 1), round=self._round,
                    skipped=learner is not None and learner not in self._present)

    # -- queries and events --------------------------------------------------------
    @property
    def current(self) -> Turn:
        return self._current

    @property
    def present(self) -> frozenset[str]:
        return frozenset(self._present)

    def advance_to(self, elapsed: float) -> list[Turn]:
        """Move to the turn covering ``elapsed``; return the turns that ended on the way."""
        ended: list[Turn] = []
        while self._current.end <= elapsed:
            ended.append(self._current)
            self._current = self._next_turn(self._current.slot + 1, self._current.end)
        return ended

    def finish_early(self, elapsed: float) -> Turn:
        """Solo mode: end the current turn now and start the next one; returns the ended turn."""
        if self.paired:
            raise RuntimeError("paired sessions advance on the slot boundary only")
        ended = Turn(self._current.slot, self._current.learner, self._current.start, elapsed, self._current.round,
                     self._current.skipped)
        self._anchor, self._anchor_slot = elapsed, self._current.slot + 1
        self._current = self._next_turn(self._current.slot + 1, elapsed)
        return ended

    def restart_at(self, elapsed: float) -> Turn:
        """Solo mode, after a pause: the same learner gets a fresh full window from now."""
        if self.paired:
            raise RuntimeError("paired sessions stay on the shared slot grid; use advance_to")
        self._anchor, self._anchor_slot = elapsed, self._current.slot
        turn = self._current
        self._current = Turn(turn.slot, turn.learner, elapsed, self._boundary(turn.slot + 1), turn.round, turn.skipped)
        return self._current

    def mark_absent(self, learner: str) -> None:
        """Skip this learner from their next turn on (the current turn is not cut short;
        paired mode: their slots stay, skipped)."""
        self._present.discard(learner)

    def mark_returned(self, learner: str) -> None:
        if learner not in self.learners:
            raise KeyError(learner)
        self._present.add(learner)

    def upcoming(self, count: int = 1) -> list[str | None]:
        """Who comes next, without moving the schedule (absences as they stand now)."""
        probe = RoundRobin.__new__(RoundRobin)
        probe.__dict__ = {**self.__dict__, "_present": set(self._present)}
        names = []
        for _ in range(count):
            probe._current = probe._next_turn(probe._current.slot + 1, probe._current.end)
            names.append(probe._current.learner)
        return names
