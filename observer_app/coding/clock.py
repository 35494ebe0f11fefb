"""The two clocks a live session reads, behind one small interface so tests can drive time.

Why two: the monotonic clock never jumps, so it decides how long a window has run;
the wall clock (UTC) is what gets written to the store, because the log server's
stamps are wall-clock stamps and sync/ maps one onto the other.
"""
from __future__ import annotations

import time
from datetime import datetime, timedelta, timezone
from typing import Protocol


class Clock(Protocol):
    def monotonic(self) -> float:
        """Seconds on a clock that only moves forward (comparable within one boot)."""

    def now_utc(self) -> datetime:
        """This device's wall-clock time, timezone-aware UTC."""


class SystemClock:
    """The device's real clocks."""

    def monotonic(self) -> float:
        return time.monotonic()

    def now_utc(self) -> datetime:
        return datetime.now(timezone.utc)


class FakeClock:
    """Both clocks under the caller's control; ``advance`` moves them together."""

    def __init__(self, monotonic: float = 1000.0, wall: datetime | None = None) -> None:
        self._monotonic = float(monotonic)
        self._wall = wall or datetime(2026, 3, 9, 8, 0, tzinfo=timezone.utc)
        if self._wall.tzinfo is None:
            raise ValueError("FakeClock needs a timezone-aware wall time")

    def monotonic(self) -> float:
        return self._monotonic

    def now_utc(self) -> datetime:
        return self._wall

    def advance(self, seconds: float) -> None:
        self._monotonic += seconds
        self._wall += timedelta(seconds=seconds)
