"""What the two simulated coders see and record, turn by turn.

Whose turn it is comes from ``observer_app.coding.schedule.RoundRobin`` and nothing else: each
coder runs their own schedule object with the study's window, order and seed.  A coded
session at a centre has two parts:

- paired: exactly what the app's signal start does (observer_app/coding/shared_start.py).
  The two devices share a pairing code; one coder counts "3, 2, 1, now" and each
  presses the start key on "now" after their own reaction time (0.15-0.55 s, so the
  presses differ by up to 0.4 s).  Each device anchors slot 0 at its own press on its
  own clock.  As in the app, the session row is written when the coder leaves the start
  form, SETUP_SECONDS before the countdown, with the pairing id and no start time; the
  store reads slot 0's start (``paired_start``) from the press, so the two devices'
  values differ by their clocks' offset.  Both follow the same schedule over the whole
  roster (same learner, same slot), each timing windows on its own drifting clock.
  Each press is stored as a paired sync mark (kind "signal start", the pairing id),
  and so is a press on the closing countdown at the end of the run ("signal end");
- solo: each coder follows their own schedule over their half of the roster and may
  close a turn early once everything is coded (``RoundRobin.finish_early``).

A window's code is the learner's true state (the state that fills most of the window on
the log's clock) seen through a confusion matrix: correct with the coder's accuracy,
otherwise one of the neighbouring states a coder could mistake it for.  Some windows
cannot be observed, a few end with nothing coded.  Affect cannot be read off an empty
bench, so windows whose true activity is ``away`` get the affect could-not-observe code.
Now and then the first activity key pressed is a slip (another code) that the coder
corrects a few seconds later: the store keeps both, and the correction wins.
Sync marks: now and then the coder presses the mark key on seeing a learner's isolated
wiring attempt; the mark is the device's reading of the event time plus a human delay.
"""
from __future__ import annotations

import uuid
from dataclasses import dataclass

import numpy as np
import pandas as pd

from demo_sessions.clocks import DeviceClock
from demo_sessions.latent_states import LatentStates, draw_categorical
from demo_sessions.scenario import ACTIVITY_STATES, AFFECT_STATES, Scenario
from demo_sessions.simulator_log import ATTEMPT
from observer_app.coding.schedule import RoundRobin
from observer_app.coding.shared_start import new_pairing_code
from observer_app.study.store import SIGNAL_END, SIGNAL_START

NAMESPACE = uuid.UUID("0b6a61d2-4f3e-5c7a-9e1d-3a2b8c4d5e6f")
ACTIVITY_NOT_SEEN = "not_visible"
AFFECT_NOT_SEEN = "unclear"
# States a coder may mistake each state for (common practice: confusions happen between
# behaviours that look alike from the back of the room).
ACTIVITY_NEIGHBOURS = {
    "on_task": ("task_discussion", "rapid_guessing"),
    "task_discussion": ("on_task", "off_task"),
    "off_task": ("task_discussion", "away"),
    "rapid_guessing": ("on_task",),
    "away": ("off_task",),
}
AFFECT_NEIGHBOURS = {
    "focused": ("confused", "bored"),
    "confused": ("focused", "frustrated"),
    "frustrated": ("confused",),
    "bored": ("focused",),
}
ISOLATION_SECONDS = 6.0  # a mark is only made on an action with no other action this close
MONOTONIC_START = 86_400.0  # the laptops had been up a day; only differences matter
# A coder's key press after the spoken "now" (from memory: simple reaction times to a
# spoken cue are a few tenths of a second); drawn from their own stream, so the rest of
# the demo does not move when this changes.
REACTION_RANGE_S = (0.15, 0.55)
SETUP_SECONDS = 30.0  # start form to countdown: the clock check and the pairing code read out


@dataclass(frozen=True)
class CodingSession:
    """One centre's coded session: who is there and when coding starts on the log clock."""

    centre: str
    learners: tuple[str, ...]  # study learner ids in roster order
    chains: np.ndarray         # each learner's row in the latent-state grids
    grid_start_ns: int         # log time of second 0 of the grids' rows
    coding_start_ns: int       # log time of the shared start signal


@dataclass(frozen=True)
class CodingRecord:
    """Everything the coders' devices write, plus the truth behind each window."""

    sessions: pd.DataFrame      # session_id, coder, device, mode, paired_start, started_ns,
                                # monotonic_start, window_seconds, order, seed, present, ended_ns,
                                # pairing_id (None when solo)
    observations: pd.DataFrame  # observation_id, session_id, device, learner, slot, window_start,
                                # window_end, coded_at, <dimensions>
    marks: pd.DataFrame         # mark_id, session_id, device, learner, marked_at, event_ns (log time
                                # of the marked action, or of the press for a signal), kind, pairing_id
    corrections: pd.DataFrame   # observation_id, dimension, first_code (the slip), corrected_at;
                                # the observation's final code is the one in ``observations``
    truth: pd.DataFrame         # observation_id, coder, device, learner, activity, affect,
                                # log_start_ns, log_end_ns


def confusion_matrix(states: tuple[str, ...], neighbours: dict[str, tuple[str, ...]], accuracy: float) -> np.ndarray:
    """Rows: true state; columns: coded state.  ``accuracy`` on the diagonal, the rest shared by neighbours."""
    matrix = np.zeros((len(states), len(states)))
    for row, state in enumerate(states):
        matrix[row, row] = accuracy
        for other in neighbours[state]:
            matrix[row, states.index(other)] = (1.0 - accuracy) / len(neighbours[state])
    return matrix


def _stable_id(*parts: object) -> str:
    return str(uuid.uuid5(NAMESPACE, "|".join(map(str, parts))))


def _turns(schedule: RoundRobin, duration: float, rng: np.random.Generator, window: float,
           early_finish: float) -> list[tuple[int, str, float, float, float]]:
    """Walk a schedule for ``duration`` device seconds: (slot, learner, start, end, coded) per turn.

    A paired run stops after a whole number of slots, the same on both laptops, however
    their clocks drift; a solo run stops when the next full window would not fit.
    """
    turns = []
    slots = round(duration / window)
    while (schedule.current.slot < slots) if schedule.paired else (schedule.current.start + window <= duration):
        turn = schedule.current
        if not schedule.paired and rng.random() < early_finish:
            coded = round(turn.start + rng.uniform(0.5 * window, window), 3)
            ended = schedule.finish_early(coded)
        else:
            coded = round(turn.start + rng.uniform(0.4 * window, 0.97 * window), 3)
            ended = schedule.advance_to(turn.end)[0]
        if ended.learner is not None:
            turns.append((ended.slot, ended.learner, ended.start, ended.end, coded))
    return turns


def _majority(grid: np.ndarray, chains: np.ndarray, first: np.ndarray, last: np.ndarray, states: int) -> np.ndarray:
    """Per window, the state filling most of seconds [first, last) of its chain's row."""
    counts = np.zeros((len(chains), states), dtype=np.int64)
    for state in range(states):
        cumulative = np.concatenate([np.zeros((grid.shape[0], 1), np.int64), np.cumsum(grid == state, axis=1)], axis=1)
        counts[:, state] = cumulative[chains, last] - cumulative[chains, first]
    return counts.argmax(axis=1)


def simulate_coding(rng: np.random.Generator, scenario: Scenario, seed: int, clocks: tuple[DeviceClock, ...],
                    states: LatentStates, events: pd.DataFrame, sessions: tuple[CodingSession, ...]) -> CodingRecord:
    """Both coders over every centre's session; see the module docstring for the rules."""
    window = float(scenario.window_seconds)
    session_rows, turn_rows, signal_rows = [], [], []
    reactions = np.random.default_rng([seed, 12]).uniform(*REACTION_RANGE_S, size=(len(sessions), 2, 2))
    for centre_index, session in enumerate(sessions):
        halves = (session.learners[: len(session.learners) // 2], session.learners[len(session.learners) // 2:])
        solo_start = scenario.paired_minutes * 60 + float(rng.uniform(20, 60))
        parts = (("paired", 0.0, scenario.paired_minutes * 60),
                 ("solo", solo_start, scenario.coded_minutes * 60 - solo_start))
        pairing_id = new_pairing_code(uuid.UUID(_stable_id(seed, session.centre, "pairing")).bytes)
        for part, true_start, true_duration in parts:
            signal_ns = session.coding_start_ns + int(round(true_start * 1e9))
            for coder_index, (coder, clock) in enumerate(zip(scenario.coders, clocks)):
                paired = part == "paired"
                learners = session.learners if paired else halves[coder_index]
                session_id = _stable_id(seed, session.centre, clock.device, part)
                # paired: slot 0 starts at this coder's own press; solo: when they start
                start_ns = signal_ns + int(round(reactions[centre_index, coder_index, 0] * 1e9)) if paired else signal_ns
                started_ns = int(clock.device_from_log(start_ns))
                if paired:
                    closing_ns = (session.coding_start_ns + int(round((true_start + true_duration) * 1e9))
                                  + int(round(reactions[centre_index, coder_index, 1] * 1e9)))
                    for kind, press_ns in ((SIGNAL_START, start_ns), (SIGNAL_END, closing_ns)):
                        signal_rows.append({
                            "mark_id": _stable_id(seed, "signal", session_id, kind), "session_id": session_id,
                            "device": clock.device, "learner": "",
                            "marked_at": pd.Timestamp(int(clock.device_from_log(press_ns)), tz="UTC"),
                            "event_ns": press_ns, "kind": kind, "pairing_id": pairing_id})
                schedule = RoundRobin(list(learners), window, order=scenario.schedule_order,
                                      seed=scenario.schedule_seed, paired=part == "paired")
                duration = float(clock.device_seconds(true_duration))
                turns = _turns(schedule, duration, rng, window, scenario.early_finish)
                session_rows.append({
                    "session_id": session_id, "coder": coder, "device": clock.device, "mode": "live",
                    "paired_start": None,  # typed starts only; a signal start's is its press (a mark)
                    "started_ns": started_ns - int(round(SETUP_SECONDS * 1e9)) * paired,
                    "monotonic_start": MONOTONIC_START + 3600.0 * centre_index + true_start - SETUP_SECONDS * paired,
                    "window_seconds": window, "order": scenario.schedule_order, "seed": scenario.schedule_seed,
                    "present": "\n".join(learners),
                    "ended_ns": started_ns + int(round((turns[-1][3] + 5.0) * 1e9)),
                    "pairing_id": pairing_id if paired else None,
                })
                for slot, learner, begin, end, coded in turns:
                    turn_rows.append((session_id, coder_index, centre_index, learner, slot, begin, end, coded,
                                      started_ns, start_ns))
    record = _code_turns(rng, scenario, seed, clocks, states, events, sessions, session_rows, turn_rows)
    marks = pd.concat([record.marks.assign(kind="", pairing_id=None), pd.DataFrame(signal_rows)], ignore_index=True)
    return CodingRecord(sessions=record.sessions, observations=record.observations, marks=marks,
                        corrections=record.corrections, truth=record.truth)


def _code_turns(rng: np.random.Generator, scenario: Scenario, seed: int, clocks: tuple[DeviceClock, ...],
                states: LatentStates, events: pd.DataFrame, sessions: tuple[CodingSession, ...],
                session_rows: list[dict], turn_rows: list[tuple]) -> CodingRecord:
    """Vectorised over all turns: device and log times, true and coded states, sync marks."""
    (session_id, coder_index, centre_index, learner, slot, begin, end, coded, started_ns,
     log_start_ns) = (np.asarray(column) for column in zip(*turn_rows))
    drift = np.array([clock.drift_ppm for clock in clocks])[coder_index] * 1e-6
    device_ns = {name: started_ns + np.rint(seconds * 1e9).astype(np.int64)
                 for name, seconds in (("start", begin), ("end", end), ("coded", coded))}
    log_ns = {name: log_start_ns + np.rint(seconds * 1e9 / (1.0 + drift)).astype(np.int64)
              for name, seconds in (("start", begin), ("end", end), ("coded", coded))}
    chain_of = {name: int(chain) for s in sessions for name, chain in zip(s.learners, s.chains)}
    grid_start = {name: s.grid_start_ns for s in sessions for name in s.learners}
    chains = np.array([chain_of[name] for name in learner])
    zero = np.array([grid_start[name] for name in learner])
    first = np.clip((log_ns["start"] - zero) // 1_000_000_000, 0, states.seconds - 1)
    last = np.clip((log_ns["end"] - zero) // 1_000_000_000, first + 1, states.seconds)
    true_activity = _majority(states.activity, chains, first, last, len(ACTIVITY_STATES))
    true_affect = _majority(states.affect, chains, first, last, len(AFFECT_STATES))

    count = len(turn_rows)
    activity_codes = np.empty(count, dtype=object)
    affect_codes = np.empty(count, dtype=object)
    for index, _ in enumerate(scenario.coders):
        mine = coder_index == index
        activity_matrix = confusion_matrix(ACTIVITY_STATES, ACTIVITY_NEIGHBOURS, scenario.accuracy[index])
        affect_matrix = confusion_matrix(AFFECT_STATES, AFFECT_NEIGHBOURS, scenario.affect_accuracy[index])
        activity_codes[mine] = np.asarray(ACTIVITY_STATES)[draw_categorical(rng, activity_matrix[true_activity[mine]])]
        affect_codes[mine] = np.asarray(AFFECT_STATES)[draw_categorical(rng, affect_matrix[true_affect[mine]])]
    unseen = rng.random(count) < scenario.could_not_observe
    activity_codes[unseen] = ACTIVITY_NOT_SEEN
    affect_codes[unseen | (true_activity == ACTIVITY_STATES.index("away"))] = AFFECT_NOT_SEEN
    nothing = rng.random(count) < scenario.no_code
    activity_codes[nothing] = None
    affect_codes[nothing] = None

    devices = np.asarray(scenario.devices)[coder_index]
    observation_id = np.array([_stable_id(seed, s, n) for s, n in zip(session_id, slot)])
    times = {name: pd.to_datetime(values, unit="ns", utc=True) for name, values in device_ns.items()}
    observations = pd.DataFrame({
        "observation_id": observation_id, "session_id": session_id, "device": devices, "learner": learner,
        "slot": slot.astype(np.int64), "window_start": times["start"], "window_end": times["end"],
        "coded_at": times["coded"], "activity": activity_codes, "affect": affect_codes,
    })
    truth = pd.DataFrame({
        "observation_id": observation_id, "coder": np.asarray(scenario.coders)[coder_index], "device": devices,
        "learner": learner, "activity": np.asarray(ACTIVITY_STATES)[true_activity],
        "affect": np.asarray(AFFECT_STATES)[true_affect],
        "log_start_ns": log_ns["start"], "log_end_ns": log_ns["end"],
    }).astype({c: "string" for c in ("observation_id", "coder", "device", "learner", "activity", "affect")})
    marks = _sync_marks(rng, scenario, seed, clocks, events, chains, coder_index, session_id, learner,
                        log_ns["start"], log_ns["coded"])
    return CodingRecord(sessions=pd.DataFrame(session_rows), observations=observations, marks=marks, truth=truth,
                        corrections=_slips(rng, scenario, observations))


def _slips(rng: np.random.Generator, scenario: Scenario, observations: pd.DataFrame) -> pd.DataFrame:
    """Coded windows whose first activity key was another code, corrected 2-8 s later."""
    coded = observations["activity"].notna() & observations["activity"].ne(ACTIVITY_NOT_SEEN)
    chosen = observations[coded.to_numpy() & (rng.random(len(observations)) < scenario.corrections)]
    final = chosen["activity"].map(ACTIVITY_STATES.index).to_numpy(dtype=np.int64)
    shift = rng.integers(1, len(ACTIVITY_STATES), size=len(chosen))  # never the final code itself
    return pd.DataFrame({
        "observation_id": chosen["observation_id"].to_numpy(), "dimension": "activity",
        "first_code": np.asarray(ACTIVITY_STATES)[(final + shift) % len(ACTIVITY_STATES)],
        "corrected_at": chosen["coded_at"].reset_index(drop=True) + pd.to_timedelta(
            np.round(rng.uniform(2.0, 8.0, len(chosen)), 3), unit="s"),
    })


def _sync_marks(rng: np.random.Generator, scenario: Scenario, seed: int, clocks: tuple[DeviceClock, ...],
                events: pd.DataFrame, chains: np.ndarray, coder_index: np.ndarray, session_id: np.ndarray,
                learner: np.ndarray, log_start: np.ndarray, log_coded: np.ndarray) -> pd.DataFrame:
    """Up to ``marks_per_session`` marks per device session, on isolated attempts seen in a window."""
    time_ns = events["time_ns"].to_numpy()
    event_chain = events["chain"].to_numpy()
    gap = np.diff(time_ns)
    same = np.diff(event_chain) == 0
    isolation = int(ISOLATION_SECONDS * 1e9)
    before_ok = np.r_[True, ~same | (gap >= isolation)]
    after_ok = np.r_[~same | (gap >= isolation), True]
    usable = before_ok & after_ok & (events["action"].to_numpy() == ATTEMPT)
    base = int(time_ns.min())
    span = np.int64(10 ** 15)  # > any time span here, so (chain, time) becomes one sortable key
    keys = event_chain[usable] * span + (time_ns[usable] - base)
    usable_times = time_ns[usable]
    low = chains * span + (log_start + 1_000_000_000 - base)
    high = chains * span + (log_coded - base)
    position = np.searchsorted(keys, low)
    found = (position < len(keys)) & (keys[np.minimum(position, len(keys) - 1)] < high)
    rows = []
    for session in pd.unique(session_id):
        candidates = np.flatnonzero(found & (session_id == session))
        if len(candidates) == 0:
            continue
        picks = candidates[np.unique(np.linspace(0, len(candidates) - 1, scenario.marks_per_session).round().astype(int))]
        for pick in picks:
            clock = clocks[coder_index[pick]]
            event_ns = int(usable_times[position[pick]])
            delay = rng.gamma(4.0, scenario.reaction_seconds / 4.0)
            rows.append({
                "mark_id": _stable_id(seed, "mark", session, event_ns), "session_id": session,
                "device": clock.device, "learner": learner[pick],
                "marked_at": pd.Timestamp(int(clock.device_from_log(event_ns)) + int(round(delay * 1e9)), tz="UTC"),
                "event_ns": event_ns,
            })
    return pd.DataFrame(rows)
