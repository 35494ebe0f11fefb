"""agreement.pairing's clock shift hints: a peak at one whole time-zone step, not a flat count.

Window length 20 s, pairing tolerance 10 s (half a window, common practice).  The counts
are checked against a plain brute-force count over every pair of observations.
"""
from __future__ import annotations

import numpy as np
import pandas as pd

from agreement.pairing import pair_observations, pairing_tolerance_s

LEARNERS = ["L01", "L02", "L03", "L04"]


def _round_robin(observations, coder: str, start_s: float, rounds: int, rng=None, learners=LEARNERS) -> None:
    for number in range(rounds):
        order = list(rng.permutation(learners)) if rng is not None else learners
        for position, learner in enumerate(order):
            observations.add(coder, learner, start_s + (number * len(learners) + position) * 20.0, activity="on_task")


def _hints(frame):
    _, report = pair_observations(frame, ["activity", "affect"], pairing_tolerance_s(20.0))
    return report.as_dict()["clock_shift_hints"]


def test_a_coder_an_hour_late_on_the_same_schedule_gets_a_hint(observations):
    _round_robin(observations, "ann", 0.0, rounds=10)
    _round_robin(observations, "ben", 3600.0 + 2.0, rounds=10)  # the same windows, his clock an hour ahead
    hints = _hints(observations.frame())
    assert hints == [{"device": "laptop-ben", "other_device": "laptop-ann", "shift_hours": -1.0,
                      "would_pair": 40, "of": 40}]


def test_two_shuffled_sessions_an_hour_apart_get_none(observations):
    rng = np.random.default_rng(7)
    _round_robin(observations, "ann", 0.0, rounds=45, rng=rng, learners=LEARNERS[:2])
    _round_robin(observations, "ben", 3600.0, rounds=45, rng=rng, learners=LEARNERS[:2])
    frame = observations.frame()
    # Brute force: the share of ben's windows within 10 s of an ann window of the same learner,
    # ben moved back an hour.  Chance pairing of two independent orders of two learners: about half.
    ann, ben = frame[frame["coder"] == "ann"], frame[frame["coder"] == "ben"]
    paired = sum(any(abs(b.log_start_ns - 3600e9 - a.log_start_ns) <= 10e9 for a in ann.itertuples()
                     if a.learner == b.learner) for b in ben.itertuples())
    assert 0.3 < paired / len(ben) < 0.7
    assert _hints(frame) == []


def test_one_coder_on_two_devices_is_never_hinted(observations):
    _round_robin(observations, "ann", 0.0, rounds=5)
    frame = observations.frame()
    later = frame.assign(device="laptop-ann-2", observation_id=frame["observation_id"] + "-2",
                         log_start_ns=frame["log_start_ns"] + 3_600_000_000_000)
    assert _hints(pd.concat([frame, later], ignore_index=True)) == []
