"""A small study folder with PLANTED device clocks, built inside the tests.

PLANTED TRUTH, per day d: the coder's device clock = log clock + offsets_s[d] + drift_ppm *
1e-6 * (log - REFERENCE).  A different offset on a later day is a clock corrected between
days (network time sync overnight).  Everything else is simulated from a seeded
generator: each learner's hidden state runs in segments (mean 45 s), the simulator logs
events at a rate that depends on the state, one coder watches learners round-robin in
20 s windows and codes the state that filled most of the window (or, with
``informative=False``, a code drawn at random: codes that say nothing about the log),
and presses a sync mark at a learner's event every ``marks_every_s`` seconds (reaction
noise 0.2 s).  The study is written as a lab would have it: study.toml, roster.csv, a CSV
log, and the store with one live session per day.

Scenario (ours): apprentice electricians on a panel-wiring simulator.
"""
from __future__ import annotations

from datetime import timedelta
from pathlib import Path

import numpy as np
import pandas as pd

from observer_app.study.folder import load_study
from observer_app.study.store import Store
from sync.clock import ClockModel
from tests.conftest import call_cli

REFERENCE = pd.Timestamp("2026-03-02T09:00:00Z")
STATES = ("on_task", "rapid_guessing", "off_task", "away")
EVENTS_PER_SECOND = {"on_task": 0.35, "rapid_guessing": 1.6, "off_task": 0.04, "away": 0.0}
STATE_SHARE = (0.5, 0.15, 0.2, 0.15)
MEAN_SEGMENT_S = 45.0
WINDOW_S = 20.0
DEVICE = "laptop-b"


def planted_clock(offset_s: float, drift_ppm: float) -> ClockModel:
    return ClockModel(device=DEVICE, method="manual", offset_s=offset_s, drift_ppm=drift_ppm,
                      reference_ns=REFERENCE.value)


def build_study(folder: Path, offsets_s: tuple[float, ...] = (31.0,), drift_ppm: float = 20.0,
                hours_per_day: float = 1.0, learners: int = 6, marks_every_s: float | None = 300.0,
                informative: bool = True, seed: int = 3) -> Path:
    """Write the study into ``folder`` (created by `fieldmark init`); one day per offset."""
    assert call_cli("init", folder).returncode == 0
    rng = np.random.default_rng(seed)
    log_ids = [f"n-{i:04d}" for i in range(1, learners + 1)]
    roster = pd.DataFrame({"learner": [f"L{i:02d}" for i in range(1, learners + 1)],
                           "label": [f"Bench {i}" for i in range(1, learners + 1)], "log_id": log_ids})
    roster.to_csv(folder / "roster.csv", index=False)
    to_learner = dict(zip(log_ids, roster["learner"]))
    day_s = hours_per_day * 3600
    events, windows, marks = [], [], []
    for day, offset in enumerate(offsets_s):
        base = REFERENCE.value + day * 86_400 * 10**9
        clock = planted_clock(offset, drift_ppm)
        states = {}
        for learner in log_ids:
            lengths = np.maximum(5.0, rng.exponential(MEAN_SEGMENT_S, int(day_s / 5) + 10))
            edges = np.concatenate(([0.0], np.cumsum(lengths)))
            edges = edges[: int(np.searchsorted(edges, day_s + 120)) + 1]
            labels = [STATES[i] for i in rng.choice(len(STATES), len(edges) - 1, p=STATE_SHARE)]
            states[learner] = (edges, labels)
            rates = np.array([EVENTS_PER_SECOND[label] for label in labels])
            per_segment = rng.poisson(rates * np.diff(edges))
            seconds = np.sort(np.repeat(edges[:-1], per_segment)
                              + rng.random(per_segment.sum()) * np.repeat(np.diff(edges), per_segment))
            events.append(pd.DataFrame({"trainee": learner, "time_ns": base + np.round(seconds * 1e9).astype(np.int64),
                                        "event": rng.choice(["place_wire", "test_circuit"], len(seconds))}))
        t = 60.0
        while t + WINDOW_S < day_s:
            for learner in rng.permutation(log_ids):
                if t + WINDOW_S >= day_s:
                    break
                edges, labels = states[learner]
                covered = np.clip(np.minimum(edges[1:], t + WINDOW_S) - np.maximum(edges[:-1], t), 0, None)
                code = labels[int(np.argmax(covered))] if informative else STATES[rng.integers(len(STATES))]
                start, end = clock.to_device_ns(np.array([base + int(t * 1e9), base + int((t + WINDOW_S) * 1e9)]))
                windows.append((day, to_learner[learner], int(start), int(end), code))
                t += WINDOW_S
        if marks_every_s:
            for at in np.arange(120.0, day_s, marks_every_s):
                learner = log_ids[rng.integers(learners)]
                times = events[-learners + log_ids.index(learner)]["time_ns"].to_numpy()
                later = times[times >= base + int(at * 1e9)]
                if len(later):
                    marked = int(clock.to_device_ns(later[:1])[0]) + int(rng.normal(0, 0.2) * 1e9)
                    marks.append((day, to_learner[learner], marked))
    log = pd.concat(events, ignore_index=True)
    log["timestamp"] = pd.to_datetime(log.pop("time_ns"), unit="ns", utc=True).dt.strftime("%Y-%m-%dT%H:%M:%S.%fZ")
    (folder / "logs").mkdir(exist_ok=True)
    log.to_csv(folder / "logs" / "centre_north.csv", index=False)
    text = (folder / "study.toml").read_text()
    (folder / "study.toml").write_text(
        text[: text.index("\n[[logs]]") + 1]
        + '[[logs]]\npath = "logs/centre_north.csv"\nformat = "csv"\n[logs.columns]\n'
          'learner = "trainee"\ntime = "timestamp"\naction = "event"\n')
    scheme_hash = load_study(folder).scheme.content_hash
    with Store(folder / "observations.sqlite") as store:
        sessions = {}
        for day in range(len(offsets_s)):
            first = min(w[2] for w in windows if w[0] == day)
            sessions[day] = store.start_session(
                coder="ben", device=DEVICE, mode="live", started_at=pd.Timestamp(first, tz="UTC").to_pydatetime(),
                monotonic_start=0.0, window_seconds=WINDOW_S, order="shuffled", seed=1, scheme_hash=scheme_hash,
                session_id=f"day-{day + 1}")
        for index, (day, learner, start, end, code) in enumerate(windows):
            begin = pd.Timestamp(start, tz="UTC").to_pydatetime()
            store.record_observation(session_id=sessions[day], learner=learner, window_start=begin,
                                     window_end=pd.Timestamp(end, tz="UTC").to_pydatetime(),
                                     coded_at=begin + timedelta(seconds=WINDOW_S - 1),
                                     codes={"activity": code, "affect": "focused"}, scheme_hash=scheme_hash,
                                     slot=index, observation_id=f"obs-{index}")
        for day, learner, marked in marks:
            store.record_sync_mark(session_id=sessions[day], learner=learner,
                                   marked_at=pd.Timestamp(marked, tz="UTC").to_pydatetime())
    return folder
