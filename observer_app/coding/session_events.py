"""What a coding session tells the screens that listen to it: one typed event per change.

A screen subscribes with ``add_listener`` and redraws from the session's ``state()``;
the event only says how much to redraw, so a screen never compares strings and a
new kind of change is a new enum member the type checker sees.
"""
from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass
from enum import Enum


class EventKind(Enum):
    """How much of the screen a change touches."""

    TICK = "tick"  # only the time moved: redraw the clock
    CHANGED = "changed"  # the same window or clip, something in it or in the session changed: redraw all
    MOVED = "moved"  # the current window or clip is another one since the last event: redraw all, its content too


@dataclass(frozen=True)
class SessionEvent:
    """One change of a coding session, sent to every listener after the change is durable."""

    kind: EventKind


Listener = Callable[[SessionEvent], None]
