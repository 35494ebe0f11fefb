"""Replay coding: a coder codes short clips cut from a learner's log, with no Qt in sight.

A ``ReplaySession`` reads the study's logs once, cuts the chosen learners' events into
clips, and lets the coder code each clip with the scheme's keys exactly as in a live
session (same key map, could-not-observe, undo by retraction, a note).  The Qt view
(observer_app/ui/replay.py) only listens, renders ``state()`` and forwards keys.

Rules this module decides (one home each):
- Clips: the log's own clock is cut into back-to-back clips of ``study.window_seconds``
  on a grid anchored at the Unix epoch (start = floor(time / window) * window), so the
  same log always gives the same clips, whoever replays it and whichever learners they
  pick.  Start is inclusive, end exclusive (as in sync/windows.py).  A clip's id is
  f"{log_id}@{start_ns}"; two coders replaying the same clip share that id, which is
  what agreement/pairing.py pairs replay codes by.
- Which clips are offered: with a plan (observer_app/coding/replay_plan.py) the clips
  the plan gives this coder, in the plan's seeded random order; the session row's
  order is "plan:<plan id>".  Without one, every clip with at least one event, for the
  learners the coder picked, in time order (ties in roster order); with ``sample=N`` a
  seeded random sample of N of those clips (numpy default_rng(seed), without
  replacement), still in time order (order "time" or "sample:N").  Reopening rebuilds
  the same list; a plan whose clips differ from this device's logs is refused.
- A clip ends as soon as every dimension is coded; the next clip follows.  Skipping a
  clip with nothing coded writes a no-code row; Backspace right after a skip undoes the
  skip (back to that clip; coding it later supersedes the no-code row).  Undo retracts the newest code still in
  effect (a retraction row; nothing is deleted) and, when that code belongs to an
  earlier clip, goes back to that clip so it can be coded again; once it is coded again
  the coder returns to the furthest clip reached.
- Window bounds written to the store are the clip's bounds on the log's clock (tz-aware
  UTC); slot is NULL, clip is the clip id.  Entry times are the device's wall clock.
- Resume: a replay session without an end row continues after the last clip (in list
  order) that has a row in the store; if that clip is only partly coded, on that clip.
"""
from __future__ import annotations

import sqlite3
from collections.abc import Callable, Iterable
import json
from dataclasses import asdict, dataclass
from datetime import datetime

import numpy as np
import pandas as pd

from observer_app.coding.replay_plan import ReplayRule, assign_clips, clips_digest, plan_id
from observer_app.pipeline.alignment import read_study_logs
from observer_app.coding.clock import Clock
from observer_app.study.scheme_binding import scheme_fits_store
from observer_app.study.store import Store, new_id
from observer_app.study.folder import Study
from observer_app.study.importing import IMPORTED_ORDER
from sync.errors import InputError

CHANGED = "changed"
ALL_CLIPS = "time"
SAMPLE_PREFIX = "sample:"
PLAN_PREFIX = "plan:"

Listener = Callable[[str], None]

# CLIPS table (``cut_clips``): one row per clip offered, in the order they are offered.
CLIP_COLUMNS: tuple[str, ...] = ("clip", "learner", "log_id", "start_ns", "end_ns", "events")


def cut_clips(events: pd.DataFrame, roster: pd.DataFrame, learners: Iterable[str], window_seconds: float,
              sample: int | None = None, seed: int = 0) -> pd.DataFrame:
    """The CLIPS table for ``learners`` (roster ids): every clip with an event, time order.

    ``events`` is the EVENTS table (sync/tables.py).  Vectorised: one floor division
    and one group-by over the chosen learners' events.
    """
    window_ns = int(round(window_seconds * 1e9))
    chosen = [str(learner) for learner in learners]
    log_ids = dict(zip(roster["learner"].astype(str), roster["log_id"].astype(str)))
    rank = {learner: number for number, learner in enumerate(roster["learner"].astype(str))}
    by_log = pd.DataFrame({"learner": chosen, "log_id": [log_ids[learner] for learner in chosen]})
    mine = events[events["learner"].astype(str).isin(set(by_log["log_id"]))]
    starts = (mine["time_ns"].to_numpy(dtype=np.int64) // window_ns) * window_ns
    counts = (pd.DataFrame({"log_id": mine["learner"].astype(str).to_numpy(), "start_ns": starts})
              .groupby(["log_id", "start_ns"]).size().rename("events").reset_index())
    clips = counts.merge(by_log, on="log_id")
    clips["end_ns"] = clips["start_ns"] + window_ns
    clips["clip"] = clips["log_id"] + "@" + clips["start_ns"].astype(str)
    clips["rank"] = clips["learner"].map(rank)
    clips = clips.sort_values(["start_ns", "rank"], kind="stable")
    if sample is not None and sample < len(clips):
        keep = np.sort(np.random.default_rng(seed).choice(len(clips), size=sample, replace=False))
        clips = clips.iloc[keep]
    return clips[list(CLIP_COLUMNS)].reset_index(drop=True)


def clip_events(events: pd.DataFrame, log_id: str, start_ns: int, end_ns: int) -> pd.DataFrame:
    """The events of one clip, oldest first, with ``offset_s`` (seconds since the clip start).

    ``events`` may be the whole EVENTS table or only this learner's rows (faster).
    """
    mine = events[events["learner"] == log_id]
    times = mine["time_ns"].to_numpy(dtype=np.int64)
    first, last = np.searchsorted(times, [start_ns, end_ns], side="left")  # sorted by time within a learner
    part = mine.iloc[first:last][["time_ns", "action", "outcome", "item"]].copy()
    part["offset_s"] = (part["time_ns"] - start_ns) / 1e9
    return part.reset_index(drop=True)


def _utc(ns: int) -> datetime:
    return pd.Timestamp(int(ns), tz="UTC").to_pydatetime()


def find_open_replay(study: Study, store: Store, coder: str, device: str) -> str | None:
    """The newest replay session of this coder, device and scheme without an end row, or None.

    Sessions imported from a CSV or merged from another device are never reopened here.
    """
    sessions = store.sessions()
    open_sessions = sessions[(sessions["mode"] == "replay") & sessions["ended_at"].isna()
                             & (sessions["coder"] == coder) & (sessions["device"] == device)
                             & (sessions["order"] != IMPORTED_ORDER)
                             & ((sessions["scheme_hash"] == study.scheme.content_hash) | scheme_fits_store(study, store))]
    return None if open_sessions.empty else str(open_sessions["session_id"].iloc[-1])


@dataclass(frozen=True)
class _UndoEntry:
    code_id: str | None  # None: the entry is a skip
    position: int
    dimension: str = ""
    code: str = ""


def planned_clips(study: Study, store: Store, events: pd.DataFrame, rule: ReplayRule, coder: str,
                  stored_plan: str | None = None) -> tuple[str, pd.DataFrame]:
    """(plan id, this coder's CLIPS in plan order); stores the plan the first time it is made.

    A stored plan with the same rule whose clip digest differs from this device's logs
    is refused: the coder is told instead of getting a different plan silently.
    """
    if coder not in rule.coders:
        raise InputError(None, "coder", f"{coder!r} is not one of this plan's coders ({', '.join(rule.coders)}); "
                                        "type one of them as the coder, or add the name to the plan's coders")
    clips = cut_clips(events, study.roster, rule.learners, study.window_seconds)
    digest = clips_digest(clips)
    rule_json = json.dumps(asdict(rule), sort_keys=True)
    plans = store.replay_plans()
    same_rule = plans[(plans["rule_json"] == rule_json) | (plans["plan_id"] == (stored_plan or ""))]
    if len(same_rule) and digest not in set(same_rule["clips_digest"]):
        raise InputError(None, "replay plan", f"this device's logs differ from the ones plan "
                                              f"{same_rule['plan_id'].iloc[0]} was cut from (clip digest "
                                              f"{digest[:12]} vs {same_rule['clips_digest'].iloc[0][:12]}); copy the "
                                              "study's logs from the device that made the plan, then start again")
    identity = stored_plan or plan_id(rule, digest)
    assignment = assign_clips(clips, rule)
    store.record_replay_plan(plan_id=identity, rule_json=rule_json, description=rule.describe(),
                             clips_digest=digest, created_at=pd.Timestamp.now(tz="UTC").to_pydatetime(),
                             assignment=assignment)
    mine = assignment[assignment["coder"] == coder]
    return identity, mine[list(CLIP_COLUMNS)].reset_index(drop=True)


@dataclass(frozen=True)
class ReplayState:
    """Everything the replay screen shows, at one moment."""

    session_id: str
    position: int  # index of the current clip in the list (== clips when all are done)
    clips: int
    clip: str  # current clip id ("" when all are done)
    learner: str
    label: str  # roster label of the clip's learner
    start: datetime | None  # clip bounds on the log's clock, UTC
    end: datetime | None
    events: pd.DataFrame  # the clip's events: time_ns, action, outcome, item, offset_s
    coded: dict[str, str]
    missing: tuple[str, ...]
    saved_count: int  # code rows (corrections and retractions included)
    coded_clips: int  # clips with at least one code in effect
    skipped_clips: int  # clips left with nothing coded
    finished: bool  # every clip has been coded or skipped
    ended: bool
    message: str
    error: str | None


class ReplaySession:
    """One coder's replay session.  Create with ``start`` or ``reopen``."""

    def __init__(self, study: Study, store: Store, clock: Clock, *, session_id: str, events: pd.DataFrame,
                 clips: pd.DataFrame) -> None:
        self.study = study
        self.store = store
        self.clock = clock
        self.session_id = session_id
        self.events = events
        self.clips = clips
        learners = events["learner"].astype(str)
        self._events_by_log = {log_id: events[learners == log_id] for log_id in set(clips["log_id"])}
        self._labels = dict(zip(study.roster["learner"].astype(str), study.roster["label"].astype(str)))
        self._key_map = study.scheme.key_map()
        self._dimensions = study.scheme.dimension_names
        self._position = 0
        self._furthest = 0  # the furthest clip reached: where coding goes on after going back
        self._observation_ids: dict[int, str] = {}
        self._coded: dict[int, dict[str, tuple[str, str]]] = {}
        self._undo: list[_UndoEntry] = []
        self._skipped: set[int] = set()  # positions skipped with nothing coded
        self._listeners: list[Listener] = []
        self._saved_count = 0
        self._ended = False
        self._message = ""
        self._error: str | None = None

    # -- creation ----------------------------------------------------------------------
    @classmethod
    def start(cls, study: Study, store: Store, clock: Clock, *, coder: str, device: str,
              learners: Iterable[str] | None = None, sample: int | None = None,
              seed: int | None = None, rule: ReplayRule | None = None) -> ReplaySession:
        """Read the logs, cut (or plan) the clips and write the session row (see the module docstring)."""
        roster_ids = list(study.roster["learner"].astype(str))
        chosen = set(roster_ids if learners is None else learners)
        learners = [learner for learner in roster_ids if learner in chosen]
        seed = study.seed if seed is None else seed
        events, _ = read_study_logs(study)
        if rule is not None:
            identity, clips = planned_clips(study, store, events, rule, coder)
            order, seed, learners = f"{PLAN_PREFIX}{identity}", rule.seed, list(rule.learners)
        else:
            clips = cut_clips(events, study.roster, learners, study.window_seconds, sample, seed)
            order = ALL_CLIPS if sample is None else f"{SAMPLE_PREFIX}{sample}"
        session_id = store.start_session(
            coder=coder, device=device, mode="replay", started_at=clock.now_utc(),
            monotonic_start=clock.monotonic(), window_seconds=study.window_seconds,
            order=order, seed=seed, scheme_hash=study.scheme.content_hash, present=learners,
        )
        session = cls(study, store, clock, session_id=session_id, events=events, clips=clips)
        session._message = f"{len(clips)} clips to code"
        return session

    @classmethod
    def reopen(cls, study: Study, store: Store, clock: Clock, session_id: str) -> ReplaySession:
        """Continue a replay session after its last coded clip."""
        sessions = store.sessions()
        row = sessions[sessions["session_id"] == session_id].iloc[0]
        order = str(row["order"])
        sample = int(order.removeprefix(SAMPLE_PREFIX)) if order.startswith(SAMPLE_PREFIX) else None
        learners = [learner for learner in str(row["present"]).split("\n") if learner]
        events, _ = read_study_logs(study)
        if order.startswith(PLAN_PREFIX):
            identity = order.removeprefix(PLAN_PREFIX)
            stored = store.replay_plan(identity)
            if stored is None:
                raise InputError(study.store_path, f"session {session_id}", f"its replay plan {identity} is not in "
                                 "this store; import the store of the device that made the plan")
            rule = ReplayRule(**{key: tuple(value) if isinstance(value, list) else value
                                 for key, value in json.loads(stored[0]["rule_json"]).items()})
            _, clips = planned_clips(study, store, events, rule, str(row["coder"]), stored_plan=identity)
        else:
            clips = cut_clips(events, study.roster, learners, float(row["window_seconds"]), sample,
                              0 if pd.isna(row["seed"]) else int(row["seed"]))
        session = cls(study, store, clock, session_id=session_id, events=events, clips=clips)
        session._restore()
        return session

    def _restore(self) -> None:
        observations = self.store.observations(self._dimensions)
        mine = observations[observations["session_id"] == self.session_id]
        positions = {clip: number for number, clip in enumerate(self.clips["clip"])}
        codes = self.store.codes_log()
        self._saved_count = int(codes["observation_id"].isin(set(mine["observation_id"])).sum())
        latest = codes.groupby(["observation_id", "dimension"], sort=False).tail(1).set_index(["observation_id", "dimension"])
        for observation_id, clip in zip(mine["observation_id"].astype(str), mine["clip"].astype(str)):
            position = positions.get(clip)
            if position is None:
                continue
            self._observation_ids[position] = observation_id
            self._coded[position] = {
                dimension: (str(latest.loc[(observation_id, dimension), "code"]),
                            str(latest.loc[(observation_id, dimension), "code_id"]))
                for dimension in self._dimensions
                if (observation_id, dimension) in latest.index and pd.notna(latest.loc[(observation_id, dimension), "code"])
            }
        self._skipped = {positions[clip] for clip, empty in zip(mine["clip"].astype(str), mine["no_code"])
                         if empty and clip in positions}
        if self._observation_ids:
            last = max(self._observation_ids)
            partly = 0 < len(self._coded[last]) < len(self._dimensions)
            self._position = self._furthest = last if partly else last + 1
        self._message = f"Resumed at clip {min(self._position + 1, len(self.clips))} of {len(self.clips)}"

    # -- listening -----------------------------------------------------------------------
    def add_listener(self, listener: Listener) -> None:
        self._listeners.append(listener)

    def _emit(self) -> None:
        for listener in list(self._listeners):
            listener(CHANGED)

    # -- coding --------------------------------------------------------------------------
    @property
    def finished(self) -> bool:
        return self._position >= len(self.clips)

    @property
    def missing(self) -> tuple[str, ...]:
        coded = self._coded.get(self._position, {})
        return tuple(d for d in self._dimensions if d not in coded)

    def _blocked(self) -> str | None:
        if self._ended:
            return "The session has ended"
        if self.finished:
            return "Every clip is done: press F10 twice to end"
        return None

    def press(self, key: str) -> bool:
        """A scheme shortcut key -> code it; returns whether the key meant a code."""
        target = self._key_map.get(key.lower())
        if target is None:
            return False
        self.code(*target)
        return True

    def code(self, dimension: str, code: str) -> bool:
        """Code one dimension of the current clip; True once it is durable."""
        reason = self._blocked()
        if reason:
            self._message = reason
            self._emit()
            return False
        position = self._position
        coded = self._coded.setdefault(position, {})
        previous = coded.get(dimension)
        if previous is not None and previous[0] == code:
            return True
        code_id = self._write(position, dimension, code, supersedes=None if previous is None else previous[1])
        if code_id is None:
            return False
        if previous is not None:
            self._undo = [entry for entry in self._undo if entry.code_id != previous[1]]
        coded[dimension] = (code, code_id)
        self._undo.append(_UndoEntry(code_id, position, dimension, code))
        label = self.study.scheme.dimension(dimension).code(code).label
        learner = self.label(str(self.clips.iloc[position]["learner"]))
        self._message = f"Saved for {learner}, clip {position + 1}: {dimension} {label}" + (
            " (corrected)" if previous else "")
        if not self.missing:
            self._move_on()
        self._emit()
        return True

    def code_remaining_not_observed(self) -> bool:
        """Every dimension still missing in this clip gets its could-not-observe code."""
        position = self._position
        done = True
        for dimension in self.missing:
            if self._position != position:
                break
            done = self.code(dimension, self.study.scheme.dimension(dimension).could_not_observe) and done
        return done

    def skip(self) -> bool:
        """Leave the current clip: a no-code row when nothing was coded in it, then the next clip."""
        reason = self._blocked()
        if reason:
            self._message = reason
            self._emit()
            return False
        position = self._position
        if position not in self._observation_ids:
            clip = self.clips.iloc[position]
            try:
                self._observation_ids[position] = self.store.record_no_code(
                    session_id=self.session_id, learner=str(clip["learner"]), window_start=_utc(clip["start_ns"]),
                    window_end=_utc(clip["end_ns"]), scheme_hash=self.study.scheme.content_hash, slot=None,
                    clip=str(clip["clip"]))
            except sqlite3.Error as error:
                self._error = f"NOT SAVED: skipped clip ({error})"
                self._emit()
                return False
        self._undo.append(_UndoEntry(None, position))
        self._skipped.add(position)
        self._move_on()
        self._message = f"Skipped clip {position + 1} ({self.label(str(self.clips.iloc[position]['learner']))})"
        self._emit()
        return True

    def _move_on(self) -> None:
        """The current clip is done: the next one, or back to the furthest clip reached."""
        self._position = max(self._position + 1, self._furthest)
        self._furthest = self._position

    def _write(self, position: int, dimension: str, code: str | None, supersedes: str | None) -> str | None:
        clip = self.clips.iloc[position]
        observation_id = self._observation_ids.get(position) or new_id()
        entered_at = self.clock.now_utc()
        try:
            code_id = self.store.record_code(
                observation_id=observation_id, session_id=self.session_id, learner=str(clip["learner"]),
                window_start=_utc(clip["start_ns"]), window_end=_utc(clip["end_ns"]), dimension=dimension,
                code=code, entered_at=entered_at, scheme_hash=self.study.scheme.content_hash, slot=None,
                clip=str(clip["clip"]), supersedes=supersedes,
            )
        except sqlite3.Error as error:
            self._error = f"NOT SAVED: {dimension} ({error})"
            self._emit()
            return None
        self._observation_ids[position] = observation_id
        self._error = None
        self._saved_count += 1
        return code_id

    def undo(self) -> bool:
        """Retract the newest code still in effect; an earlier clip's code brings that clip back."""
        if self._ended or not self._undo:
            self._message = "Nothing to undo"
            self._emit()
            return False
        entry = self._undo[-1]
        if entry.code_id is None:  # undo a skip: back to the skipped clip, nothing to retract
            self._undo.pop()
            self._skipped.discard(entry.position)
            self._position = entry.position
            learner = self.label(str(self.clips.iloc[entry.position]["learner"]))
            self._message = f"Skip undone: back to clip {entry.position + 1} ({learner})"
            self._emit()
            return True
        if self._write(entry.position, entry.dimension, None, supersedes=entry.code_id) is None:
            return False
        self._undo.pop()
        self._coded[entry.position].pop(entry.dimension, None)
        back = entry.position != self._position
        self._position = entry.position
        label = self.study.scheme.dimension(entry.dimension).code(entry.code).label
        self._message = f"Undone {entry.dimension}: {label}" + (f" (back to clip {entry.position + 1})" if back else "")
        self._emit()
        return True

    def note(self, text: str) -> bool:
        """Attach a free-text note to the current clip (creating its row if it has none)."""
        text = text.strip()
        reason = self._blocked() or (None if text else "Empty note not saved")
        if reason:
            self._message = reason
            self._emit()
            return False
        position = self._position
        clip = self.clips.iloc[position]
        try:
            if position not in self._observation_ids:
                self._observation_ids[position] = self.store.record_no_code(
                    session_id=self.session_id, learner=str(clip["learner"]), window_start=_utc(clip["start_ns"]),
                    window_end=_utc(clip["end_ns"]), scheme_hash=self.study.scheme.content_hash, slot=None,
                    clip=str(clip["clip"]))
            self.store.record_note(self._observation_ids[position], text, self.clock.now_utc())
        except sqlite3.Error as error:
            self._error = f"NOT SAVED: note ({error})"
            self._emit()
            return False
        self._error = None
        self._message = "Note saved"
        self._emit()
        return True

    def end(self) -> None:
        """Write the session's end row."""
        if not self._ended:
            self.store.end_session(self.session_id, self.clock.now_utc())
            self._ended = True
            self._message = "Session ended"
            self._emit()

    # -- reading -------------------------------------------------------------------------
    def label(self, learner: str) -> str:
        return self._labels.get(learner, learner)

    def state(self) -> ReplayState:
        done = self.finished
        clip = None if done else self.clips.iloc[self._position]
        events = (clip_events(self._events_by_log[str(clip["log_id"])], str(clip["log_id"]), int(clip["start_ns"]),
                              int(clip["end_ns"])) if clip is not None else clip_events(self.events, "", 0, 0))
        return ReplayState(
            session_id=self.session_id, position=self._position, clips=len(self.clips),
            clip="" if clip is None else str(clip["clip"]), learner="" if clip is None else str(clip["learner"]),
            label="" if clip is None else self.label(str(clip["learner"])),
            start=None if clip is None else _utc(clip["start_ns"]), end=None if clip is None else _utc(clip["end_ns"]),
            events=events, coded={d: c for d, (c, _) in self._coded.get(self._position, {}).items()},
            missing=self.missing, saved_count=self._saved_count,
            coded_clips=sum(1 for codes in self._coded.values() if codes),
            skipped_clips=len(self._skipped - {p for p, codes in self._coded.items() if codes}), finished=done, ended=self._ended,
            message=self._message, error=self._error,
        )
