"""Benchmark: the demo's simulator log, vectorised over the (learners x seconds) grid,
against the obvious per-second Python loop over the same latent states.

Run: FIELDMARK_PERF=1 pytest tests/perf/test_demo_generation_speed.py -s
"""
from __future__ import annotations

import time

import numpy as np

from demo_sessions.generate import generate_demo
from demo_sessions.latent_states import simulate_latent_states
from demo_sessions.simulator_log import ACTION_RATE, AFFECT_RATE, CORRECT_SHARE, HELP_SHARE, simulate_log


def _looped_log(rng: np.random.Generator, activity: np.ndarray, affect: np.ndarray) -> int:
    """The same draws made one learner-second at a time; returns the number of events."""
    events = 0
    for chain in range(activity.shape[0]):
        for second in range(activity.shape[1]):
            state, mood = activity[chain, second], affect[chain, second]
            for _ in range(rng.poisson(ACTION_RATE[state] * AFFECT_RATE[mood])):
                rng.random()  # time within the second
                if rng.random() >= HELP_SHARE[state, mood]:
                    rng.random() < CORRECT_SHARE[state, mood]
                events += 1
    return events


def test_vectorised_log_against_a_per_second_loop(tmp_path):
    learners, seconds = 240, 3600  # ten times the demo's learners
    states = simulate_latent_states(np.random.default_rng(1), learners, seconds)
    start = np.zeros(learners, dtype=np.int64)
    began = time.perf_counter()
    vectorised = simulate_log(np.random.default_rng(2), states, start)
    ours = time.perf_counter() - began
    began = time.perf_counter()
    looped = _looped_log(np.random.default_rng(2), states.activity, states.affect)
    loop = time.perf_counter() - began
    assert abs(len(vectorised) - looped) < 0.05 * looped  # same model, about the same number of events
    began = time.perf_counter()
    generate_demo(tmp_path, 1, "full")
    whole = time.perf_counter() - began
    print(f"\nsimulator log, {learners} learners x {seconds} s ({len(vectorised)} events): vectorised {ours:.3f} s, "
          f"per-second loop {loop:.2f} s, ratio loop/vectorised {loop / ours:.0f}x; whole demo generation {whole:.2f} s")
    assert ours < loop
