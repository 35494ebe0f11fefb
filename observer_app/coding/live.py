"""The live coding session: every decision the observing screen shows, with no Qt in sight.

A ``LiveSession`` is the live kind of coding session (observer_app/coding/
coding_session.py decides what a key, an undo or a note does to a window, and that a
code counts as saved only once it is durable).  It owns the round-robin schedule and a
clock (observer_app/coding/clock.py) and decides whose turn it is, how much time is
left and when a window ends; the Qt view only listens (``add_listener``, typed
SessionEvents), renders ``state()`` and forwards keys.

Time: the session measures time in *elapsed seconds on the schedule's grid*, read from
the monotonic clock (it never jumps).  The grid's zero is the session start (solo),
the coder's key press on the spoken "now" (paired, signal start: observer_app/coding/
shared_start.py), or the shared start time both coders typed (paired, typed start), so
two paired devices count the same slots.  The signal start reads no wall clock, so two
devices whose clocks differ by half a minute still share the grid to within the coders'
reaction times; the press is stored as a paired sync mark (kind "signal start", the
run's pairing id), and so is a second countdown at the end of the run ("signal end"),
from which align reads the devices' relative offset and drift.  A typed start needs the
clock difference the coders read off the clock-check screen, within a bound.  Window
bounds written to the store are the zero (on this device's wall clock) plus the grid
offsets; entry times are the device's wall clock at the moment of the key press.

Rules this module decides (one home each):
- Solo: the turn ends as soon as every dimension is coded, or at the window end.
  Paired: the turn ends on the slot boundary only.
- A turn that ends with no row (nothing coded, no note) is written as a no-code row.
  Turns that ended before this coder joined a paired run are not written.
- Pause, solo: time stops; on resume the same learner gets a fresh full window.
  Pause, paired: the shared grid runs on (windows that pass become no-code rows);
  only coding is blocked, so both coders stay on the same learner.
- Marking the current learner absent ends their turn at once in solo mode; in paired
  mode the turn runs to the boundary so both devices stay aligned, and the learner's
  later slots are skipped (nothing coded, nothing written), never removed.
- Resume: an interrupted session (no end row) continues on the same grid.  Elapsed
  time comes from the monotonic clock when it is still comparable with the wall clock
  (same boot, no suspend), else from wall-clock time since the session started.
  Paired: the slot follows from elapsed time; windows missed while the app was down
  become no-code rows.  After a reboot a signal-started run is re-anchored from the
  wall clock and the stored press (the grid's zero on this device's wall clock), and
  the session says so: the coders compare check codes.  Solo: the downtime counts as a pause; an unfinished window
  continues, a finished one is followed by the next learner.
"""
from __future__ import annotations

import math
from collections.abc import Iterable
from dataclasses import dataclass
from datetime import datetime, timedelta
from zoneinfo import ZoneInfo

import pandas as pd

from observer_app.coding.schedule import RoundRobin, Turn
from observer_app.coding.clock import Clock
from observer_app.coding.coding_session import CodedUnit, CodingSession, UndoEntry
from observer_app.coding.session_events import EventKind
from observer_app.coding.shared_start import (
    TYPED_START_BOUND_S, Countdown, read_clock_difference, schedule_check_code,
)
from observer_app.study.scheme_binding import scheme_fits_store
from observer_app.study.store import SIGNAL_END, SIGNAL_START, Store, new_id
from observer_app.study.folder import Study
from observer_app.study.counts import code_counts, window_counts
from observer_app.study.importing import IMPORTED_ORDER

# Monotonic and wall-clock elapsed time may differ by this much and still be "comparable";
# a reboot (monotonic restarts) or a suspend (monotonic pauses) exceeds it.
COMPARABLE_TOLERANCE_SECONDS = 5.0


@dataclass
class _Window(CodedUnit):
    """The current turn as the session sees it: its row in the store and the codes in effect."""

    turn: Turn


@dataclass(frozen=True)
class SessionState:
    """Everything the observing screen shows, at one moment."""

    session_id: str
    learner: str | None
    label: str  # roster label of the learner whose turn it is ("" when nobody is present)
    next_label: str  # roster label of who comes next ("" when nobody)
    slot: int
    round: int
    window_seconds: float
    time_left: float  # seconds left in the window; before a typed paired start, seconds until it
    waiting: bool  # paired run whose start (typed time or signal) is still ahead
    paused: bool
    ended: bool
    paired: bool
    coded: dict[str, str]  # dimension -> code in effect in this window
    missing: tuple[str, ...]  # dimensions not coded yet in this window, scheme order
    saved_count: int  # code rows this session has made durable (corrections included)
    coded_windows: int  # windows of this session with at least one code in effect
    missed_windows: int  # windows of this session that ran out with nothing coded (no-code rows)
    last_saved_at: datetime | None
    last_code_id: str | None  # the newest code row made durable (its id in the store)
    absent: tuple[str, ...]  # learner ids currently marked absent
    message: str  # what the last action did, for the status line
    error: str | None  # a failed write: shown until the next successful one
    awaiting_signal: bool = False  # signal start: waiting for this coder's key press on "now"
    pairing_id: str = ""  # the code both devices of a paired run share ("" when solo)
    check_code: str = ""  # paired, started: equal on both screens when both are in step
    skipped: bool = False  # paired: the current learner is absent, their slot is skipped
    countdown: str = ""  # the countdown word to read aloud now ("" when none is running)


@dataclass(frozen=True)
class SessionSummary:
    """End-of-session figures, read back from the store (so they show what is durable).

    counts: learner, dimension, code, count -- codes in effect per learner.
    per_learner: learner, windows, coded_windows, missed_windows.
    """

    session_id: str
    windows: int
    coded_windows: int
    missed_windows: int  # windows that ended with nothing coded (no-code rows)
    sync_marks: int
    counts: pd.DataFrame
    per_learner: pd.DataFrame


@dataclass(frozen=True)
class InterruptedSession:
    """A live session with no end row: the app offers to resume it."""

    session_id: str
    coder: str
    device: str
    started_at: datetime
    paired_start: datetime | None  # start of slot 0 on this device (None: solo, or a signal not given yet)
    codes_saved: int
    pairing_id: str | None = None


def elapsed_since_start(monotonic_start: float, started_at: datetime, clock: Clock) -> float:
    """Seconds since a session started: monotonic when still comparable, else wall clock.

    Why: the monotonic clock is immune to wall-clock corrections but restarts on reboot
    and stops during suspend; then only the wall clock knows how much time passed.
    """
    return _elapsed_and_source(monotonic_start, started_at, clock)[0]


def _elapsed_and_source(monotonic_start: float, started_at: datetime, clock: Clock) -> tuple[float, bool]:
    """(seconds since start, whether the wall clock had to be used)."""
    by_monotonic = clock.monotonic() - monotonic_start
    by_wall = (clock.now_utc() - started_at).total_seconds()
    if by_monotonic >= 0 and abs(by_monotonic - by_wall) <= COMPARABLE_TOLERANCE_SECONDS:
        return by_monotonic, False
    return by_wall, True


def _session_codes(store: Store, session_id: str) -> pd.DataFrame:
    """codes_log rows (oldest first) of one session's observations."""
    codes = store.codes_log()
    observations = store.observations([])
    ids = observations.loc[observations["session_id"] == session_id, "observation_id"].astype(str)
    return codes[codes["observation_id"].isin(set(ids))]


def find_interrupted_session(study: Study, store: Store, device: str) -> InterruptedSession | None:
    """The newest live session of this scheme and this device without an end row, or None.

    Sessions imported from a CSV or merged from another device's store are not this
    device's to resume (a CSV session never has an end row).
    """
    sessions = store.sessions()
    open_sessions = sessions[(sessions["mode"] == "live") & sessions["ended_at"].isna()
                             & ((sessions["scheme_hash"] == study.scheme.content_hash) | scheme_fits_store(study, store))
                             & (sessions["order"] != IMPORTED_ORDER) & (sessions["device"] == device)]
    if open_sessions.empty:
        return None
    row = open_sessions.iloc[-1]
    paired_start = None if pd.isna(row["paired_start"]) else row["paired_start"].to_pydatetime()
    return InterruptedSession(
        session_id=str(row["session_id"]), coder=str(row["coder"]), device=str(row["device"]),
        started_at=row["started_at"].to_pydatetime(), paired_start=paired_start,
        codes_saved=len(_session_codes(store, str(row["session_id"]))),
        pairing_id=None if pd.isna(row["pairing_id"]) else str(row["pairing_id"]),
    )


class LiveSession(CodingSession):
    """One coder's live session (a kind of CodingSession: the schedule and the clock).  Create with
    ``start`` or ``reopen``."""

    def __init__(self, study: Study, store: Store, clock: Clock, *, session_id: str, coder: str, device: str,
                 schedule: RoundRobin, origin_wall: datetime, origin_monotonic: float, start_elapsed: float,
                 pairing_id: str | None = None, awaiting_signal: bool = False) -> None:
        super().__init__(study, store, clock, session_id=session_id)
        self.coder = coder
        self.device = device
        self.schedule = schedule
        self._origin_wall = origin_wall
        self._origin_monotonic = origin_monotonic
        self._start_elapsed = start_elapsed
        self._window = _Window(schedule.current)
        self._recorded_slots: set[int] = set()
        self._paused = False
        self._paused_time_left = 0.0
        self._coded_windows: set[str] = set()  # observation ids with a code in effect
        self._missed_windows = 0
        self.pairing_id = pairing_id
        self._awaiting_signal = awaiting_signal
        self.countdown = Countdown(clock.monotonic)  # "3, 2, 1, now" for the coder who reads it aloud

    # -- creation ----------------------------------------------------------------------
    @classmethod
    def start(cls, study: Study, store: Store, clock: Clock, *, coder: str, device: str,
              paired_start: datetime | None = None, present: Iterable[str] | None = None,
              pairing_id: str | None = None, signal: bool = False, typed_clock_difference_s: float | None = None,
              difference_bound_s: float = TYPED_START_BOUND_S) -> LiveSession:
        """Write the session row and begin at slot 0 (solo), on the typed shared grid, or
        (``signal``) wait for this coder's key press on the countdown's "now".

        A typed start (``paired_start``) needs ``typed_clock_difference_s``, the clock
        difference the coders read off the clock-check screen; above
        ``difference_bound_s`` it is refused with an InputError that offers the signal.
        """
        if signal and (paired_start is not None or not pairing_id):
            raise ValueError("a signal start takes a pairing id and no typed start time")
        if paired_start is not None:
            if typed_clock_difference_s is None:
                raise ValueError("a typed paired start needs the clock difference the coders typed")
            typed_clock_difference_s = read_clock_difference(str(typed_clock_difference_s), difference_bound_s)
        learners = list(study.roster["learner"].astype(str))
        chosen = set(learners if present is None else present)
        present_list = [learner for learner in learners if learner in chosen]
        started_at, monotonic_start = clock.now_utc(), clock.monotonic()
        session_id = store.start_session(
            coder=coder, device=device, mode="live", started_at=started_at, monotonic_start=monotonic_start,
            window_seconds=study.window_seconds, order=study.order, seed=study.seed,
            scheme_hash=study.scheme.content_hash, paired_start=paired_start, present=present_list,
            pairing_id=pairing_id, typed_clock_difference_s=typed_clock_difference_s,
        )
        origin_wall = paired_start or started_at
        start_elapsed = (started_at - origin_wall).total_seconds()
        schedule = RoundRobin(learners, study.window_seconds, order=study.order, seed=study.seed,
                              paired=paired_start is not None or signal, present=present_list)
        session = cls(study, store, clock, session_id=session_id, coder=coder, device=device, schedule=schedule,
                      origin_wall=origin_wall, origin_monotonic=monotonic_start - start_elapsed,
                      start_elapsed=start_elapsed, pairing_id=pairing_id, awaiting_signal=signal)
        session._message = ("Waiting for the start signal: press Enter on \"now\"" if signal
                            else "Session started")
        session._catch_up()
        return session

    @classmethod
    def reopen(cls, study: Study, store: Store, clock: Clock, session_id: str) -> LiveSession:
        """Continue an interrupted session on its own grid (see the module docstring)."""
        sessions = store.sessions()
        row = sessions[sessions["session_id"] == session_id].iloc[0]
        started_at = row["started_at"].to_pydatetime()
        paired_start = None if pd.isna(row["paired_start"]) else row["paired_start"].to_pydatetime()
        pairing_id = None if pd.isna(row["pairing_id"]) else str(row["pairing_id"])
        signal = pairing_id is not None and pd.isna(row["typed_clock_difference_s"])
        origin_wall = paired_start or started_at
        since_start, by_wall = _elapsed_and_source(float(row["monotonic_start"]), started_at, clock)
        now_elapsed = (started_at - origin_wall).total_seconds() + since_start
        # a signal run's coder joined at the press (slot 0), whatever the session row says
        start_elapsed = 0.0 if signal else (started_at - origin_wall).total_seconds()
        learners = list(study.roster["learner"].astype(str))
        present = [learner for learner in str(row["present"]).split("\n") if learner]
        seed = 0 if pd.isna(row["seed"]) else int(row["seed"])
        schedule = RoundRobin(learners, float(row["window_seconds"]), order=str(row["order"]), seed=seed,
                              paired=paired_start is not None or signal, present=present)
        awaiting = signal and paired_start is None
        session = cls(study, store, clock, session_id=session_id, coder=str(row["coder"]), device=str(row["device"]),
                      schedule=schedule, origin_wall=origin_wall, origin_monotonic=clock.monotonic() - now_elapsed,
                      start_elapsed=start_elapsed, pairing_id=pairing_id, awaiting_signal=awaiting)
        if awaiting:
            session._message = "Resumed: still waiting for the start signal; press Enter on \"now\""
            return session
        session._replay(now_elapsed)
        session._message = f"Resumed at slot {session.schedule.current.slot + 1}"
        if by_wall and schedule.paired:
            session._message += (" after a restart: re-anchored from this device's wall clock and the stored "
                                 "start; compare check codes with your partner")
        return session

    def _replay(self, now_elapsed: float) -> None:
        """Rebuild the schedule and the current window from what the store holds."""
        observations = self.store.observations(self._dimensions)
        observations = observations[observations["session_id"] == self.session_id].sort_values("slot", kind="stable")
        absences = self.store.absences()
        absences = absences[absences["session_id"] == self.session_id]
        events = [((at.to_pydatetime() - self._origin_wall).total_seconds(), str(learner), str(state))
                  for at, learner, state in zip(absences["at"], absences["learner"], absences["state"])]
        codes = _session_codes(self.store, self.session_id)
        self._saved_count = len(codes)
        if len(codes):
            self._last_saved_at = codes["entered_at"].iloc[-1].to_pydatetime()
        latest = codes.groupby(["observation_id", "dimension"], sort=False).tail(1)
        code_ids = {(o, d): (c, i) for o, d, c, i in zip(latest["observation_id"], latest["dimension"],
                                                         latest["code"], latest["code_id"]) if c is not None}
        rows = {int(slot): str(oid) for slot, oid in zip(observations["slot"], observations["observation_id"])}
        self._coded_windows = {observation_id for observation_id, _ in code_ids}
        self._missed_windows = int((observations["no_code"].astype(bool) & observations["note"].eq("")).sum())
        self._recorded_slots = set(rows)

        def apply_until(moment: float) -> None:
            """Replay absences up to ``moment`` (live, they were stored after the schedule caught up)."""
            while events and events[0][0] <= moment:
                event_moment, learner, state = events.pop(0)
                if self.schedule.paired:
                    ended.extend(self.schedule.advance_to(min(event_moment, now_elapsed)))
                (self.schedule.mark_absent if state == "absent" else self.schedule.mark_returned)(learner)

        ended: list[Turn] = []
        if self.schedule.paired:
            apply_until(float("inf"))
            ended += self.schedule.advance_to(now_elapsed)
        else:
            for slot, start in zip(observations["slot"], observations["window_start"]):
                moment = (start.to_pydatetime() - self._origin_wall).total_seconds()
                apply_until(moment)
                while self.schedule.current.slot < int(slot):
                    self.schedule.finish_early(moment)
            if rows:
                last = observations.iloc[-1]
                last_learner = str(last["learner"])
                finished_at = None
                if all(pd.notna(last[d]) for d in self._dimensions):
                    finished_at = (last["coded_at"].to_pydatetime() - self._origin_wall).total_seconds()
                elif bool(last["no_code"]) and not last["note"]:  # written only when its window ended
                    finished_at = (last["window_end"].to_pydatetime() - self._origin_wall).total_seconds()
                gone = [moment for moment, learner, state in events if learner == last_learner and state == "absent"]
                if gone:
                    finished_at = gone[0] if finished_at is None else min(finished_at, gone[0])
                if finished_at is not None:
                    apply_until(finished_at)
                    self.schedule.finish_early(finished_at)
            apply_until(float("inf"))
            self.schedule.restart_at(now_elapsed)
        current = self.schedule.current
        self._window = _Window(current, observation_id=rows.get(current.slot, new_id()))
        if current.slot in rows:
            self._window.has_row = True
            self._window.coded = {d: code_ids[(rows[current.slot], d)] for d in self._dimensions
                                  if (rows[current.slot], d) in code_ids}
        for turn in ended:
            self._close(turn, None)

    # -- time ----------------------------------------------------------------------------
    @property
    def elapsed(self) -> float:
        """Seconds on the schedule's grid (negative before a paired start; -inf until the signal)."""
        if self._awaiting_signal:
            return -math.inf
        return self.clock.monotonic() - self._origin_monotonic

    def _wall(self, elapsed: float) -> datetime:
        return self._origin_wall + timedelta(seconds=elapsed)

    def _turn_row(self, turn: Turn) -> dict[str, object]:
        """A turn's observation row: its learner and bounds on this device's wall clock."""
        return {"learner": turn.learner, "window_start": self._wall(turn.start), "window_end": self._wall(turn.end),
                "slot": turn.slot}

    def tick(self) -> None:
        """Called often by the view's timer: close windows whose time is up (MOVED when one closed)."""
        if self._ended:
            return
        self._catch_up()
        self._emit(EventKind.TICK)

    def _catch_up(self) -> None:
        if self._ended or (self._paused and not self.schedule.paired):
            return
        ended = self.schedule.advance_to(self.elapsed)
        if not ended:
            return
        window = self._window
        for turn in ended:
            self._close(turn, window if turn.slot == window.turn.slot else None)
        self._window = _Window(self.schedule.current)

    def _close(self, turn: Turn, window: _Window | None) -> None:
        """A turn ended: write a no-code row unless it has a row or was before this coder joined."""
        if turn.learner is None or turn.skipped or turn.end <= self._start_elapsed or turn.slot in self._recorded_slots:
            return
        if window is not None and window.has_row:
            if turn.end < window.turn.end:  # solo: finished early, so the window really ended now
                self._durable(f"window end of {self.label(turn.learner)}", lambda: self.store.record_window_end(
                    window.observation_id, self._wall(turn.end)), notify=False)
            return
        written = self._durable(f"empty window of {self.label(turn.learner)}", lambda: self.store.record_no_code(
            session_id=self.session_id, scheme_hash=self.study.scheme.content_hash,
            observation_id=None if window is None else window.observation_id, **self._turn_row(turn)), notify=False)
        if written is None:
            return
        self._missed_windows += 1
        self._message = f"Time ran out: {self.label(turn.learner)} not coded (counted as missed)"

    def _finish_turn(self) -> None:
        """Solo: end the current turn now and move to the next learner."""
        window = self._window
        ended = self.schedule.finish_early(self.elapsed)
        self._close(ended, window)
        self._window = _Window(self.schedule.current)

    # -- coding: the kind's part of CodingSession --------------------------------------------
    def _current(self) -> _Window:
        return self._window

    def _row_fields(self, unit: CodedUnit) -> dict[str, object]:
        return self._turn_row(unit.turn)

    def _unit_name(self, unit: CodedUnit) -> str:
        return self.label(unit.turn.learner)

    def _blocked(self) -> str | None:
        reason = super()._blocked()
        if reason:
            return reason
        if self._paused:
            return "Paused: press Space to go on"
        if self._awaiting_signal:
            return "Waiting for the start signal: press Enter on \"now\""
        if self.elapsed < 0:
            return "The shared start time has not come yet"
        if self._window.turn.learner is None:
            return "Nobody is present to observe"
        if self._window.turn.skipped:
            return f"{self.label(self._window.turn.learner)} is absent: this slot is skipped"
        return None

    def _note_blocked(self) -> str | None:
        return "No window to attach the note to" if self._ended or self._window.turn.learner is None else None

    def _coded(self, unit: CodedUnit) -> None:
        """Solo: the turn ends as soon as every dimension is coded."""
        self._coded_windows.add(unit.observation_id)
        if not self.schedule.paired and not self.missing:
            self._finish_turn()

    def _undone(self, entry: UndoEntry) -> str:
        if not entry.unit.coded:
            self._coded_windows.discard(entry.unit.observation_id)
        return f"Undone for {self.label(entry.unit.turn.learner)}: {entry.dimension} {self._code_label(entry)}"

    # -- presence, pause, sync -------------------------------------------------------------
    def mark_absent(self, learner: str | None = None) -> bool:
        """Skip a learner (default: the current one) from their next turn on; stored durably."""
        self._catch_up()
        learner = learner or self._window.turn.learner
        if self._ended or learner is None or learner not in self.schedule.present:
            return False
        if not self._record_presence(learner, "absent"):
            return False
        self.schedule.mark_absent(learner)
        if learner == self._window.turn.learner and not self.schedule.paired and not self._paused \
                and self.elapsed >= 0:
            self._finish_turn()
        self._message = f"{self.label(learner)} marked absent"
        self._emit()
        return True

    def mark_returned(self, learner: str) -> bool:
        self._catch_up()
        if self._ended or learner in self.schedule.present or learner not in self._labels:
            return False
        if not self._record_presence(learner, "returned"):
            return False
        self.schedule.mark_returned(learner)
        self._message = f"{self.label(learner)} is back"
        self._emit()
        return True

    def _record_presence(self, learner: str, state: str) -> bool:
        return self._durable(state, lambda: self.store.record_absence(
            session_id=self.session_id, learner=learner, state=state, at=self.clock.now_utc())) is not None

    def pause(self) -> None:
        self._catch_up()
        if self._paused or self._ended:
            return
        self._paused = True
        self._paused_time_left = max(0.0, self.schedule.current.end - self.elapsed)
        self._message = "Paused" + (" (the shared grid runs on)" if self.schedule.paired else "")
        self._emit()

    def resume(self, message: str = "Going on") -> None:
        if not self._paused or self._ended:
            return
        self._paused = False
        if not self.schedule.paired:
            self._window.turn = self.schedule.restart_at(self.elapsed)
        self._catch_up()
        self._message = message
        self._emit()

    def hold_until_observing(self) -> None:
        """Solo: hold the first window while the coder is on the clock check; ``begin_observing``
        starts it whole when the observing screen appears (a paired grid runs on its own time)."""
        if not self.schedule.paired:
            self.pause()

    def begin_observing(self) -> None:
        """End the hold: the current learner gets a whole window from now."""
        self.resume("Session started")

    def toggle_pause(self) -> None:
        (self.resume if self._paused else self.pause)()

    def sync_mark(self, note: str = "") -> datetime | None:
        """Store this device's clock reading now (with the current learner); returns it."""
        marked_at = self.clock.now_utc()
        if self._durable("sync mark", lambda: self.store.record_sync_mark(
                session_id=self.session_id, marked_at=marked_at, learner=self._window.turn.learner or "",
                note=note)) is None:
            return None
        local = marked_at.astimezone(ZoneInfo(self.study.timezone))
        self._message = f"Sync mark at {local:%H:%M:%S %Z}"
        self._emit()
        return marked_at

    def signal_start(self) -> bool:
        """This coder pressed the start key on "now": slot 0 begins here, on this device's
        monotonic clock; the press is stored as the run's paired start mark."""
        if not self._awaiting_signal or self._ended:
            return False
        monotonic, wall = self.clock.monotonic(), self.clock.now_utc()
        if self._paired_mark(SIGNAL_START, wall) is None:
            return False
        self._awaiting_signal = False
        self._origin_monotonic, self._origin_wall, self._start_elapsed = monotonic, wall, 0.0
        self.schedule.advance_to(0.0)
        self._window = _Window(self.schedule.current)
        self._message = f"Started on the signal at {wall:%H:%M:%S} on this clock"
        self._emit()
        return True

    def signal_end(self) -> bool:
        """This coder pressed the key on the closing countdown's "now": a second paired mark,
        so align can read the two clocks' drift as well as their offset."""
        if self._awaiting_signal or self._ended or not self.pairing_id:
            return self._refuse("The closing signal is for a paired run that has started")
        wall = self.clock.now_utc()
        if self._paired_mark(SIGNAL_END, wall) is None:
            return False
        self._message = f"Closing signal stored at {wall:%H:%M:%S}; end the session with F10 twice"
        self._emit()
        return True

    def _paired_mark(self, kind: str, wall: datetime) -> str | None:
        return self._durable(kind, lambda: self.store.record_sync_mark(
            session_id=self.session_id, marked_at=wall, note="countdown", pairing_id=self.pairing_id, kind=kind))

    def end(self) -> SessionSummary:
        """Write the session's end row; the summary is read back from the store."""
        self._write_end()
        return self.summary()

    # -- reading -------------------------------------------------------------------------
    def state(self) -> SessionState:
        turn = self.schedule.current
        elapsed = self.elapsed
        waiting = elapsed < 0
        if self._paused and not self.schedule.paired:
            time_left = self._paused_time_left
        elif waiting:
            time_left = -elapsed
        else:
            time_left = max(0.0, turn.end - elapsed)
        check_code = ""
        if self.schedule.paired and not waiting:
            run_key = self.pairing_id or f"{self._origin_wall:%Y-%m-%dT%H:%M:%S}"
            check_code = schedule_check_code(run_key, self.schedule.learners, self.schedule.window,
                                             self.schedule.order, self.schedule.seed, turn.slot, turn.learner)
        upcoming = self.schedule.upcoming(1)[0] if self.schedule.present else None
        return SessionState(
            session_id=self.session_id, learner=turn.learner, label=self.label(turn.learner),
            next_label=self.label(upcoming), slot=turn.slot, round=turn.round,
            window_seconds=self.schedule.window, time_left=time_left, waiting=waiting, paused=self._paused,
            ended=self._ended, paired=self.schedule.paired,
            coded={d: code for d, (code, _) in self._window.coded.items()}, missing=self.missing,
            saved_count=self._saved_count, coded_windows=len(self._coded_windows),
            missed_windows=self._missed_windows, last_saved_at=self._last_saved_at, last_code_id=self._last_code_id,
            absent=tuple(learner for learner in self.schedule.learners if learner not in self.schedule.present),
            message=self._message, error=self._error, awaiting_signal=self._awaiting_signal,
            pairing_id=self.pairing_id or "", check_code=check_code, skipped=turn.skipped,
            countdown=self.countdown.word(),
        )

    def summary(self) -> SessionSummary:
        return summarise_session(self.store, self.session_id, self._dimensions)


def summarise_session(store: Store, session_id: str, dimensions: Iterable[str]) -> SessionSummary:
    """Counts per learner and code, and missed windows, for one session as stored."""
    dimensions = list(dimensions)
    frame = store.observations(dimensions)
    frame = frame[frame["session_id"] == session_id]
    marks = store.sync_marks()
    missed = int(frame["no_code"].sum())
    return SessionSummary(
        session_id=session_id, windows=len(frame), coded_windows=len(frame) - missed, missed_windows=missed,
        sync_marks=int((marks["session_id"] == session_id).sum()), counts=code_counts(frame, dimensions),
        per_learner=window_counts(frame),
    )
