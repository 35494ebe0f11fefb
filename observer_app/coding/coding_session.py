"""What every coding session does the same way, live or replay, with no Qt in sight.

A coding session codes *units* one after another: a live window (a learner's turn on
the round-robin grid, observer_app/coding/live.py) or a replay clip (a learner's log
cut on the log's clock, observer_app/coding/replay.py).  The two kinds decide which
unit is current and when it ends; what is done *to* a unit is decided here, once:

- A scheme shortcut key means one code (the scheme's key map); any other key is not
  the session's.
- A code is refused, with the reason as the message, while the kind says coding is
  blocked (``_blocked``: ended here; paused, waiting, nobody present, every clip done
  in the kinds).
- Coding a dimension again with another code writes a correction that supersedes the
  earlier one (the earlier one leaves the undo list); the same code again writes nothing.
- Could-not-observe codes every dimension still missing in the current unit, and stops
  if the unit ends on the way.
- Undo retracts the newest code still in effect with a retraction row (code NULL) that
  supersedes it; nothing is deleted.
- A note attaches to the current unit, writing its no-code row first when it has none.
- Durability: every write goes through ``_durable``.  The store call returns only when
  SQLite committed it (synchronous=FULL); only then does the session change its state
  and tell its listeners.  A failed write changes nothing, and the state carries
  "NOT SAVED: ..." until the next code or note is saved.
- Listeners get a typed ``SessionEvent`` (observer_app/coding/session_events.py) after
  every change; MOVED when the current unit is another one than at the last event.
"""
from __future__ import annotations

import sqlite3
from collections.abc import Callable
from dataclasses import dataclass, field
from datetime import datetime
from typing import TypeVar

from observer_app.coding.clock import Clock
from observer_app.coding.session_events import EventKind, Listener, SessionEvent
from observer_app.study.folder import Study
from observer_app.study.store import Store, new_id

Written = TypeVar("Written")


@dataclass(kw_only=True)
class CodedUnit:
    """A window or clip being coded: its observation row and the codes in effect in it."""

    observation_id: str = field(default_factory=new_id)
    has_row: bool = False  # its observation row is in the store (a code or a no-code row)
    coded: dict[str, tuple[str, str]] = field(default_factory=dict)  # dimension -> (code, code_id)


@dataclass(frozen=True)
class UndoEntry:
    """A code that undo can retract (``code_id`` None: a kind's own step, e.g. a replay skip)."""

    code_id: str | None
    unit: CodedUnit
    dimension: str = ""
    code: str = ""


class CodingSession:
    """The part of a live and a replay session that is the same; the kinds fill in the hooks."""

    def __init__(self, study: Study, store: Store, clock: Clock, *, session_id: str) -> None:
        self.study = study
        self.store = store
        self.clock = clock
        self.session_id = session_id
        self._labels = dict(zip(study.roster["learner"].astype(str), study.roster["label"].astype(str)))
        self._key_map = study.scheme.key_map()
        self._dimensions = study.scheme.dimension_names
        self._undo: list[UndoEntry] = []
        self._listeners: list[Listener] = []
        self._announced: CodedUnit | None = None  # the current unit at the last event
        self._saved_count = 0
        self._last_saved_at: datetime | None = None
        self._last_code_id: str | None = None
        self._ended = False
        self._message = ""
        self._error: str | None = None

    # -- what a kind decides -------------------------------------------------------------
    def _current(self) -> CodedUnit:
        """The unit a key codes now."""
        raise NotImplementedError

    def _row_fields(self, unit: CodedUnit) -> dict[str, object]:
        """The unit's observation row: learner, window_start, window_end, slot and clip."""
        raise NotImplementedError

    def _unit_name(self, unit: CodedUnit) -> str:
        """How the messages name the unit (the learner's label, the clip number)."""
        raise NotImplementedError

    def _coded(self, unit: CodedUnit) -> None:
        """A code of ``unit`` is durable: move on when the kind's rule says the unit is done."""
        raise NotImplementedError

    def _undone(self, entry: UndoEntry) -> str:
        """An undo is durable (or a kind's own step was taken back): follow it; the message."""
        raise NotImplementedError

    def _blocked(self) -> str | None:
        """Why a code cannot be taken now, or None."""
        return "The session has ended" if self._ended else None

    def _note_blocked(self) -> str | None:
        """Why a note cannot be attached now, or None."""
        return self._blocked()

    def _catch_up(self) -> None:
        """Bring the current unit up to now before acting (a live window may have run out)."""

    # -- listening -----------------------------------------------------------------------
    def add_listener(self, listener: Listener) -> None:
        """``listener`` gets a SessionEvent after every change; it has seen the state as it is now."""
        self._listeners.append(listener)
        self._announced = self._current()

    def _emit(self, kind: EventKind = EventKind.CHANGED) -> None:
        unit = self._current()
        if unit is not self._announced:
            kind = EventKind.MOVED
        self._announced = unit
        event = SessionEvent(kind)
        for listener in list(self._listeners):
            listener(event)

    def _refuse(self, reason: str) -> bool:
        self._message = reason
        self._emit()
        return False

    def _durable(self, what: str, write: Callable[[], Written], *, notify: bool = True) -> Written | None:
        """Run one store write; None when it failed (state unchanged, "NOT SAVED: <what>" shown)."""
        try:
            return write()
        except sqlite3.Error as error:
            self._error = f"NOT SAVED: {what} ({error})"
            if notify:
                self._emit()
            return None

    # -- coding --------------------------------------------------------------------------
    @property
    def missing(self) -> tuple[str, ...]:
        """Dimensions not coded yet in the current unit, scheme order."""
        coded = self._current().coded
        return tuple(d for d in self._dimensions if d not in coded)

    def press(self, key: str) -> bool:
        """A scheme shortcut key -> code it; returns whether the key meant a code."""
        target = self._key_map.get(key.lower())
        if target is None:
            return False
        self.code(*target)
        return True

    def code(self, dimension: str, code: str) -> bool:
        """Code one dimension of the current unit; True once it is durable."""
        self._catch_up()
        reason = self._blocked()
        if reason:
            return self._refuse(reason)
        unit = self._current()
        previous = unit.coded.get(dimension)
        if previous is not None and previous[0] == code:
            return True
        code_id = self._write(unit, dimension, code, supersedes=None if previous is None else previous[1])
        if code_id is None:
            return False
        if previous is not None:
            self._undo = [entry for entry in self._undo if entry.code_id != previous[1]]
        unit.coded[dimension] = (code, code_id)
        self._undo.append(UndoEntry(code_id, unit, dimension, code))
        label = self.study.scheme.dimension(dimension).code(code).label
        self._message = (f"Saved for {self._unit_name(unit)}: {dimension} {label}"
                         + (" (corrected)" if previous else ""))
        self._coded(unit)
        self._emit()
        return True

    def code_remaining_not_observed(self) -> bool:
        """Every dimension still missing in the current unit gets its could-not-observe code
        (the unit as it stands now: a window that ran out since the last tick is closed first)."""
        self._catch_up()
        unit = self._current()
        done = True
        for dimension in self.missing:
            if self._current() is not unit:
                break
            done = self.code(dimension, self.study.scheme.dimension(dimension).could_not_observe) and done
        return done

    def _write(self, unit: CodedUnit, dimension: str, code: str | None, supersedes: str | None) -> str | None:
        """One code row (``code`` None retracts); its id once durable, None when the write failed."""
        entered_at = self.clock.now_utc()
        code_id = self._durable(dimension, lambda: self.store.record_code(
            observation_id=unit.observation_id, session_id=self.session_id, dimension=dimension, code=code,
            entered_at=entered_at, scheme_hash=self.study.scheme.content_hash, supersedes=supersedes,
            **self._row_fields(unit)))
        if code_id is None:
            return None
        unit.has_row = True
        self._error = None
        self._saved_count += 1
        self._last_saved_at = entered_at
        self._last_code_id = code_id
        return code_id

    def _write_row(self, unit: CodedUnit) -> str:
        """The unit's no-code row unless it has a row already; its observation id.

        Raises sqlite3.Error: call it inside ``_durable``.
        """
        if not unit.has_row:
            self.store.record_no_code(session_id=self.session_id, scheme_hash=self.study.scheme.content_hash,
                                      observation_id=unit.observation_id, **self._row_fields(unit))
            unit.has_row = True
        return unit.observation_id

    def undo(self) -> bool:
        """Retract the newest code still in effect (a retraction row; nothing is deleted)."""
        if self._ended or not self._undo:
            return self._refuse("Nothing to undo")
        entry = self._undo[-1]
        if entry.code_id is not None:
            if self._write(entry.unit, entry.dimension, None, supersedes=entry.code_id) is None:
                return False
            entry.unit.coded.pop(entry.dimension, None)
        self._undo.pop()
        self._message = self._undone(entry)
        self._emit()
        return True

    def _code_label(self, entry: UndoEntry) -> str:
        return self.study.scheme.dimension(entry.dimension).code(entry.code).label

    def note(self, text: str) -> bool:
        """Attach a free-text note to the current unit (writing its row first if it has none)."""
        text = text.strip()
        reason = self._note_blocked() or (None if text else "Empty note not saved")
        if reason:
            return self._refuse(reason)
        unit = self._current()

        def write() -> str:
            self._write_row(unit)
            return self.store.record_note(unit.observation_id, text, self.clock.now_utc())

        if self._durable("note", write) is None:
            return False
        self._error = None
        self._message = "Note saved"
        self._emit()
        return True

    def _write_end(self) -> None:
        """The session's end row (once)."""
        if not self._ended:
            self._catch_up()
            self.store.end_session(self.session_id, self.clock.now_utc())
            self._ended = True
            self._message = "Session ended"
            self._emit()

    # -- reading -------------------------------------------------------------------------
    def label(self, learner: str | None) -> str:
        """The learner's roster label ("" for nobody)."""
        return "" if learner is None else self._labels.get(learner, learner)
