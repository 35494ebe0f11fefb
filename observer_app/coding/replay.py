"""Replay coding: a coder codes short clips cut from a learner's log, with no Qt in sight.

A ``ReplaySession`` is the replay kind of coding session: it reads the study's logs
once, cuts the chosen learners' events into clips, and lets the coder code each clip
exactly as a live window (observer_app/coding/coding_session.py: the key map,
could-not-observe, undo by retraction, a note, durable before shown).  The Qt view
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

from collections.abc import Iterable
import json
from dataclasses import asdict, dataclass
from datetime import datetime

import numpy as np
import pandas as pd

from observer_app.coding.replay_plan import ReplayRule, assign_clips, clips_digest, plan_id
from observer_app.pipeline.alignment import roster_logs
from observer_app.coding.clock import Clock
from observer_app.coding.coding_session import CodedUnit, CodingSession, UndoEntry
from observer_app.study.scheme_binding import scheme_fits_store
from observer_app.study.store import Store
from observer_app.study.folder import Study
from observer_app.study.importing import IMPORTED_ORDER
from sync.errors import InputError

ALL_CLIPS = "time"
SAMPLE_PREFIX = "sample:"
PLAN_PREFIX = "plan:"

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


@dataclass
class _Clip(CodedUnit):
    """A clip as the session sees it: where it is in the list, its row and the codes in effect."""

    position: int


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


class ReplaySession(CodingSession):
    """One coder's replay session (a kind of CodingSession: the clip list).  Create with ``start`` or
    ``reopen``."""

    def __init__(self, study: Study, store: Store, clock: Clock, *, session_id: str, events: pd.DataFrame,
                 clips: pd.DataFrame) -> None:
        super().__init__(study, store, clock, session_id=session_id)
        self.events = events
        self.clips = clips
        learners = events["learner"].astype(str)
        self._events_by_log = {log_id: events[learners == log_id] for log_id in set(clips["log_id"])}
        self._position = 0
        self._furthest = 0  # the furthest clip reached: where coding goes on after going back
        self._units: dict[int, _Clip] = {}  # position -> the clip as coded so far
        self._skipped: set[int] = set()  # positions skipped with nothing coded

    # -- creation ----------------------------------------------------------------------
    @classmethod
    def start(cls, study: Study, store: Store, clock: Clock, *, coder: str, device: str,
              learners: Iterable[str] | None = None, sample: int | None = None,
              seed: int | None = None, rule: ReplayRule | None = None,
              events: pd.DataFrame | None = None) -> ReplaySession:
        """Read the logs (unless ``events``, the roster's logs as ``roster_logs`` reads them, came
        from a background read), cut (or plan) the clips and write the session row (see the
        module docstring)."""
        roster_ids = list(study.roster["learner"].astype(str))
        chosen = set(roster_ids if learners is None else learners)
        learners = [learner for learner in roster_ids if learner in chosen]
        seed = study.seed if seed is None else seed
        events = roster_logs(study) if events is None else events
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
    def reopen(cls, study: Study, store: Store, clock: Clock, session_id: str,
               events: pd.DataFrame | None = None) -> ReplaySession:
        """Continue a replay session after its last coded clip (``events`` as for ``start``)."""
        sessions = store.sessions()
        row = sessions[sessions["session_id"] == session_id].iloc[0]
        order = str(row["order"])
        sample = int(order.removeprefix(SAMPLE_PREFIX)) if order.startswith(SAMPLE_PREFIX) else None
        learners = [learner for learner in str(row["present"]).split("\n") if learner]
        events = roster_logs(study) if events is None else events
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
            self._units[position] = _Clip(position, observation_id=observation_id, has_row=True, coded={
                dimension: (str(latest.loc[(observation_id, dimension), "code"]),
                            str(latest.loc[(observation_id, dimension), "code_id"]))
                for dimension in self._dimensions
                if (observation_id, dimension) in latest.index and pd.notna(latest.loc[(observation_id, dimension), "code"])
            })
        self._skipped = {positions[clip] for clip, empty in zip(mine["clip"].astype(str), mine["no_code"])
                         if empty and clip in positions}
        if self._units:
            last = max(self._units)
            partly = 0 < len(self._units[last].coded) < len(self._dimensions)
            self._position = self._furthest = last if partly else last + 1
        self._message = f"Resumed at clip {min(self._position + 1, len(self.clips))} of {len(self.clips)}"

    # -- coding: the kind's part of CodingSession --------------------------------------------
    @property
    def finished(self) -> bool:
        return self._position >= len(self.clips)

    def _current(self) -> _Clip:
        unit = self._units.get(self._position)
        if unit is None:
            unit = self._units[self._position] = _Clip(self._position)
        return unit

    def _row_fields(self, unit: CodedUnit) -> dict[str, object]:
        clip = self.clips.iloc[unit.position]
        return {"learner": str(clip["learner"]), "window_start": _utc(clip["start_ns"]),
                "window_end": _utc(clip["end_ns"]), "slot": None, "clip": str(clip["clip"])}

    def _clip_learner(self, position: int) -> str:
        return self.label(str(self.clips.iloc[position]["learner"]))

    def _unit_name(self, unit: CodedUnit) -> str:
        return f"{self._clip_learner(unit.position)}, clip {unit.position + 1}"

    def _blocked(self) -> str | None:
        reason = super()._blocked()
        if reason is None and self.finished:
            return "Every clip is done: press F10 twice to end"
        return reason

    def _coded(self, unit: CodedUnit) -> None:
        """A clip ends as soon as every dimension is coded."""
        if not self.missing:
            self._move_on()

    def _undone(self, entry: UndoEntry) -> str:
        """Back to the clip of the undone code or skip."""
        position = entry.unit.position
        back = position != self._position
        self._position = position
        if entry.code_id is None:
            self._skipped.discard(position)
            return f"Skip undone: back to clip {position + 1} ({self._clip_learner(position)})"
        back_to = f" (back to clip {position + 1})" if back else ""
        return f"Undone {entry.dimension}: {self._code_label(entry)}{back_to}"

    def skip(self) -> bool:
        """Leave the current clip: a no-code row when nothing was coded in it, then the next clip."""
        reason = self._blocked()
        if reason:
            return self._refuse(reason)
        unit = self._current()
        if self._durable("skipped clip", lambda: self._write_row(unit)) is None:
            return False
        self._undo.append(UndoEntry(None, unit))
        self._skipped.add(unit.position)
        self._move_on()
        self._message = f"Skipped clip {unit.position + 1} ({self._clip_learner(unit.position)})"
        self._emit()
        return True

    def _move_on(self) -> None:
        """The current clip is done: the next one, or back to the furthest clip reached."""
        self._position = max(self._position + 1, self._furthest)
        self._furthest = self._position

    def end(self) -> None:
        """Write the session's end row."""
        self._write_end()

    # -- reading -------------------------------------------------------------------------
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
            events=events, coded={d: c for d, (c, _) in self._current().coded.items()},
            missing=self.missing, saved_count=self._saved_count,
            coded_clips=sum(1 for unit in self._units.values() if unit.coded),
            skipped_clips=len(self._skipped - {p for p, unit in self._units.items() if unit.coded}), finished=done,
            ended=self._ended,
            message=self._message, error=self._error,
        )
