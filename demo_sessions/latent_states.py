"""What each apprentice is really doing, second by second: two linked semi-Markov chains.

Apparent affect (focused, confused, frustrated, bored) follows its own chain; activity
(on_task, task_discussion, off_task, rapid_guessing, away; state indices follow
scenario.ACTIVITY_STATES and AFFECT_STATES) follows a chain whose next state
leans on the current affect: frustration breeds rapid trial and error, boredom breeds
off-task time and trips away, confusion breeds discussion of the task.  Each state lasts a
gamma-distributed number of whole seconds (at least ``MIN_DWELL``), so states persist as
they do in a room, instead of flickering every second as a plain Markov chain would.

The simulation loops over *segments* (a few dozen) and is vectorised over learners;
the result is a (learners x seconds) grid of state indices per dimension.
"""
from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

import numpy as np
import pandas as pd


MIN_DWELL = 5  # seconds; shorter episodes would be invisible to a coder anyway

# Mean dwell in seconds per state, in ACTIVITY_STATES / AFFECT_STATES order.
ACTIVITY_DWELL = np.array([120.0, 40.0, 60.0, 30.0, 90.0])
AFFECT_DWELL = np.array([240.0, 90.0, 60.0, 150.0])

ACTIVITY_START = np.array([0.85, 0.05, 0.05, 0.0, 0.05])
AFFECT_START = np.array([0.7, 0.15, 0.05, 0.1])

# Where a state goes next (rows: from, columns: to; the diagonal is never used).
ACTIVITY_NEXT = np.array([
    # on_task task_discussion off_task rapid away
    [0.00, 0.45, 0.25, 0.15, 0.15],   # on_task
    [0.75, 0.00, 0.20, 0.05, 0.00],   # task_discussion
    [0.60, 0.15, 0.00, 0.05, 0.20],   # off_task
    [0.70, 0.10, 0.15, 0.00, 0.05],   # rapid_guessing
    [0.75, 0.10, 0.15, 0.00, 0.00],   # away
])
# How the current affect reweights the activity a learner moves to (rows: affect).
ACTIVITY_PULL = np.array([
    [1.5, 1.0, 1.0, 1.0, 1.0],   # focused: back to the panel
    [1.0, 2.0, 1.0, 1.5, 1.0],   # confused: ask about the task, or try things
    [1.0, 1.0, 1.0, 4.0, 1.0],   # frustrated: rapid trial and error
    [1.0, 1.0, 3.0, 1.0, 1.5],   # bored: off task, away
])
AFFECT_NEXT = np.array([
    # focused confused frustrated bored
    [0.00, 0.50, 0.15, 0.35],   # focused
    [0.55, 0.00, 0.30, 0.15],   # confused
    [0.30, 0.30, 0.00, 0.40],   # frustrated
    [0.60, 0.20, 0.20, 0.00],   # bored
])


@dataclass(frozen=True)
class LatentStates:
    """State index per learner (row) and second (column), one grid per dimension."""

    activity: np.ndarray  # int8, indices into ACTIVITY_STATES
    affect: np.ndarray    # int8, indices into AFFECT_STATES

    @property
    def seconds(self) -> int:
        return int(self.activity.shape[1])


def draw_categorical(rng: np.random.Generator, weights: np.ndarray) -> np.ndarray:
    """One categorical draw per row of ``weights`` (rows need not be normalised), vectorised."""
    cumulative = np.cumsum(weights, axis=1)
    cumulative /= cumulative[:, -1:]
    return (rng.random((weights.shape[0], 1)) > cumulative).sum(axis=1)


def _dwell(rng: np.random.Generator, means: np.ndarray) -> np.ndarray:
    """Whole seconds a state lasts: gamma with shape 2 (a mode above zero), at least MIN_DWELL."""
    return np.maximum(MIN_DWELL, np.rint(rng.gamma(2.0, means / 2.0))).astype(np.int64)


def _fill_grid(states: list[np.ndarray], durations: list[np.ndarray], seconds: int) -> np.ndarray:
    """Segments (one column per segment) -> (chains x seconds) grid, last segment cut at the end."""
    state_matrix = np.stack(states, axis=1)
    ends = np.cumsum(np.stack(durations, axis=1), axis=1)
    starts = ends - np.stack(durations, axis=1)
    clipped = np.clip(np.minimum(ends, seconds) - starts, 0, None)
    return np.repeat(state_matrix.ravel(), clipped.ravel()).reshape(len(state_matrix), seconds).astype(np.int8)


def _run_chain(rng: np.random.Generator, start: np.ndarray, dwell: np.ndarray, learners: int, seconds: int,
               next_weights: Callable[[np.ndarray, np.ndarray], np.ndarray]) -> np.ndarray:
    """One semi-Markov chain per learner as a (learners x seconds) grid: each state lasts
    ``_dwell(dwell[state])``; ``next_weights(state, clock)`` weighs where each learner goes
    when its state ends at ``clock`` seconds."""
    state = draw_categorical(rng, np.tile(start, (learners, 1)))
    states, durations, clock = [], [], np.zeros(learners, dtype=np.int64)
    while (clock < seconds).any():
        duration = _dwell(rng, dwell[state])
        states.append(state)
        durations.append(duration)
        clock = clock + duration
        state = draw_categorical(rng, next_weights(state, clock))
    return _fill_grid(states, durations, seconds)


def simulate_latent_states(rng: np.random.Generator, learners: int, seconds: int) -> LatentStates:
    """Affect first, then activity leaning on affect; both as (learners x seconds) grids."""
    affect = _run_chain(rng, AFFECT_START, AFFECT_DWELL, learners, seconds,
                        lambda state, clock: AFFECT_NEXT[state])
    rows = np.arange(learners)
    activity = _run_chain(
        rng, ACTIVITY_START, ACTIVITY_DWELL, learners, seconds,
        lambda state, clock: ACTIVITY_NEXT[state] * ACTIVITY_PULL[affect[rows, np.minimum(clock, seconds - 1)]])
    return LatentStates(activity=activity, affect=affect)


def state_segments(grid: np.ndarray, names: tuple[str, ...], learners: list[str],
                   start_ns: np.ndarray, dimension: str) -> pd.DataFrame:
    """A state grid as runs: learner, dimension, state, start_ns, end_ns (UTC ns, log clock).

    ``start_ns`` gives each row's second 0 on the log's clock.
    """
    chains, seconds = grid.shape
    change = np.ones((chains, seconds), dtype=bool)
    change[:, 1:] = grid[:, 1:] != grid[:, :-1]
    row, second = np.nonzero(change)
    next_second = np.append(second[1:], seconds)
    next_second[np.append(row[1:] != row[:-1], True)] = seconds
    return pd.DataFrame({
        "learner": pd.array(np.asarray(learners)[row], dtype="string"),
        "dimension": pd.array(np.full(len(row), dimension), dtype="string"),
        "state": pd.array(np.asarray(names)[grid[row, second]], dtype="string"),
        "start_ns": start_ns[row] + second.astype(np.int64) * 1_000_000_000,
        "end_ns": start_ns[row] + next_second.astype(np.int64) * 1_000_000_000,
    })
