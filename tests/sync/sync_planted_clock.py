"""A small simulated study with a PLANTED clock truth, built inside the tests.

PLANTED TRUTH: the coder's device clock = log clock + OFFSET_S + DRIFT_PPM * 1e-6 *
(log - REFERENCE).  Everything else (learners' hidden states, their log events, the
coder's codes and sync marks) is simulated from a seeded generator, so a fitted model
can be checked against the truth that made the data -- not against our own output.

Scenario (ours): apprentice electricians on a panel-wiring simulator; each learner's
hidden state runs in segments (mean 45 s); the simulator logs events at a rate that
depends on the state; a coder watches learners round-robin in 20 s windows over three
5-hour days and codes the state that filled most of the window (10% coding errors).
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from sync.clock import ClockModel
from sync.event_table import build_events, combine_events

OFFSET_S = 37.4
DRIFT_PPM = 45.0
REFERENCE = pd.Timestamp("2026-03-02T08:00:00Z")
TRUTH = ClockModel(device="laptop-b", method="manual", offset_s=OFFSET_S, drift_ppm=DRIFT_PPM,
                   reference_ns=REFERENCE.value)

STATES = ("on_task", "rapid_guessing", "off_task", "away")
EVENTS_PER_SECOND = {"on_task": 0.35, "rapid_guessing": 1.6, "off_task": 0.04, "away": 0.0}
STATE_SHARE = (0.5, 0.15, 0.2, 0.15)
MEAN_SEGMENT_S = 45.0
WINDOW_S = 20.0
LEARNERS = 9
DAYS = 8
HOURS_PER_DAY = 4.0


@dataclass
class PlantedStudy:
    events: pd.DataFrame         # EVENTS table on the log clock
    observations: pd.DataFrame   # device clock, with log_id already mapped
    marks: pd.DataFrame          # SYNC MARKS on the device clock, with log_id
    roster: pd.DataFrame         # learner, log_id


def build(seed: int = 11, marks_every_s: float = 600.0, outlying_marks: int = 2, days: int = DAYS) -> PlantedStudy:
    """The planted study over its first ``days`` days (fewer days: the same first days, faster)."""
    rng = np.random.default_rng(seed)
    log_ids = [f"n-{i:04d}" for i in range(1, LEARNERS + 1)]
    roster = pd.DataFrame({"learner": [f"L{i:02d}" for i in range(1, LEARNERS + 1)], "log_id": log_ids})
    day_starts = [REFERENCE + pd.Timedelta(days=d) for d in range(days)]
    day_s = HOURS_PER_DAY * 3600
    event_parts, observations, marks = [], [], []
    states = {}
    for day, day_start in enumerate(day_starts):
        base = day_start.value
        for learner in log_ids:
            # Hidden state segments over the day, on the log clock.
            lengths = np.maximum(5.0, rng.exponential(MEAN_SEGMENT_S, int(day_s / 5) + 10))
            edges = np.concatenate(([0.0], np.cumsum(lengths)))
            edges = edges[: int(np.searchsorted(edges, day_s + 120)) + 1]
            labels = [STATES[i] for i in rng.choice(len(STATES), len(edges) - 1, p=STATE_SHARE)]
            states[(day, learner)] = (edges, labels)
            rates = np.array([EVENTS_PER_SECOND[label] for label in labels])
            lengths = np.diff(edges)
            per_segment = rng.poisson(rates * lengths)
            seconds = np.sort(np.repeat(edges[:-1], per_segment)
                              + rng.random(per_segment.sum()) * np.repeat(lengths, per_segment))
            event_parts.append(build_events(
                learner=[learner] * len(seconds), time_ns=base + np.round(seconds * 1e9).astype(np.int64),
                action=rng.choice(["place_wire", "test_circuit", "reset"], len(seconds)),
                source="simulated", source_row=np.arange(1, len(seconds) + 1)))
        # Round-robin windows, on the log clock, then onto the device clock.
        t = 60.0
        while t + WINDOW_S < day_s:
            for learner in rng.permutation(log_ids):
                if t + WINDOW_S >= day_s:
                    break
                edges, labels = states[(day, learner)]
                covered = np.clip(np.minimum(edges[1:], t + WINDOW_S) - np.maximum(edges[:-1], t), 0, None)
                code = labels[int(np.argmax(covered))]
                if rng.random() < 0.1:
                    code = STATES[rng.integers(len(STATES))]
                observations.append((learner, base + int(t * 1e9), base + int((t + WINDOW_S) * 1e9), code,
                                     rng.choice(["focused", "confused", "bored"])))
                t += WINDOW_S
        # Sync marks: the coder marks the moment a learner's event happens (reaction noise 0.2 s).
        for at in np.arange(300.0, day_s, marks_every_s):
            learner = log_ids[rng.integers(LEARNERS)]
            part = event_parts[-LEARNERS + log_ids.index(learner)]
            candidates = part["time_ns"].to_numpy()
            candidates = candidates[candidates >= base + int(at * 1e9)]
            if len(candidates):
                marks.append((learner, int(candidates[0]) + int(rng.normal(0, 0.2) * 1e9)))
    events = combine_events(event_parts)
    obs = pd.DataFrame(observations, columns=["log_id", "start_log", "end_log", "activity", "affect"])
    to_device = TRUTH.to_device_ns
    obs["window_start"] = pd.to_datetime(to_device(obs["start_log"].to_numpy()), utc=True)
    obs["window_end"] = pd.to_datetime(to_device(obs["end_log"].to_numpy()), utc=True)
    obs["coded_at"] = obs["window_end"] - pd.Timedelta(seconds=2)
    obs["device"] = "laptop-b"
    obs["learner"] = obs["log_id"].map(dict(zip(roster["log_id"], roster["learner"])))
    obs["observation_id"] = [f"obs-{i}" for i in range(len(obs))]
    mark_frame = pd.DataFrame(marks, columns=["log_id", "log_ns"])
    device_ns = to_device(mark_frame["log_ns"].to_numpy())
    # Outlying marks: pressed late by several seconds.
    late = rng.choice(len(device_ns), outlying_marks, replace=False)
    device_ns[late] += (np.arange(outlying_marks) + 6) * 10**9
    mark_frame["marked_at"] = pd.to_datetime(device_ns, utc=True)
    mark_frame["mark_id"] = [f"mark-{i}" for i in range(len(mark_frame))]
    mark_frame["device"] = "laptop-b"
    mark_frame["learner"] = mark_frame["log_id"].map(dict(zip(roster["log_id"], roster["learner"])))
    mark_frame["outlier_planted"] = False
    mark_frame.loc[late, "outlier_planted"] = True
    return PlantedStudy(events=events, observations=obs.drop(columns=["start_log", "end_log"]),
                        marks=mark_frame.drop(columns=["log_ns"]), roster=roster)
