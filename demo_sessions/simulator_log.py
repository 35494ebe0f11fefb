"""What the panel-wiring simulator logs, given what each apprentice is really doing.

Per second, each learner produces a Poisson number of actions at a rate set by the
activity state (and lowered by confusion); each action is a help request with a
probability set by activity and affect, otherwise a wiring attempt that succeeds with
a probability set by both.  Rapid trial and error gives bursts of short, mostly wrong
attempts; off-task and away seconds give idle gaps.  Every step of the panel task
needs ``ATTEMPTS_PER_STEP`` correct attempts.

The centres' apprentices honestly work differently (the planted site difference, stated
in truth.json): at a "shared_bench" centre they work faster on task, ask for help twice as
often, and keep tinkering with the simulator while they talk or are off task, so what
they do in the log says less about their activity than at a "own_bench" centre.  All of it is vectorised over the
(learners x seconds) grid; times are rounded to the millisecond that logs carry.
"""
from __future__ import annotations

import numpy as np
import pandas as pd

from demo_sessions.latent_states import LatentStates

# Actions per second by activity (on_task, task_discussion, off_task, rapid_guessing, away).
ACTION_RATE = np.array([0.12, 0.03, 0.01, 0.6, 0.0])
# Per centre behaviour: actions per second by activity, and the multiplier of help requests.
BEHAVIOUR_ACTION_RATE: dict[str, np.ndarray] = {
    "own_bench": ACTION_RATE,
    "shared_bench": np.array([0.14, 0.12, 0.12, 0.2, 0.10]),  # the partner keeps the bench busy
}
BEHAVIOUR_HELP_SCALE: dict[str, float] = {"own_bench": 1.0, "shared_bench": 2.0}
# Multiplier of that rate by affect (focused, confused, frustrated, bored).
AFFECT_RATE = np.array([1.0, 0.7, 1.1, 0.8])
# Chance that an action is a help request (rows: activity, columns: affect).
HELP_SHARE = np.array([
    [0.02, 0.15, 0.12, 0.02],
    [0.10, 0.20, 0.15, 0.05],
    [0.02, 0.02, 0.02, 0.02],
    [0.03, 0.05, 0.05, 0.03],
    [0.00, 0.00, 0.00, 0.00],
])
# Chance that a wiring attempt is correct (rows: activity, columns: affect).
CORRECT_SHARE = np.array([
    [0.80, 0.50, 0.45, 0.65],
    [0.70, 0.55, 0.50, 0.60],
    [0.50, 0.50, 0.50, 0.50],
    [0.20, 0.15, 0.15, 0.20],
    [0.50, 0.50, 0.50, 0.50],
])
# Median seconds an action takes (rapid attempts are short).
ATTEMPT_SECONDS = np.array([7.0, 5.0, 6.0, 0.8, 6.0])
HELP_SECONDS = 3.0
ATTEMPTS_PER_STEP = 2
SKILLS: tuple[str, ...] = (
    "isolate_supply", "strip_conductor", "terminate_breaker", "bond_earth", "test_continuity", "label_circuit",
)
ATTEMPT = "attempt"
HELP = "help_request"


def simulate_log(rng: np.random.Generator, states: LatentStates, start_ns: np.ndarray,
                 behaviour: np.ndarray | None = None) -> pd.DataFrame:
    """One row per simulator event, sorted by (chain, time_ns).

    Columns: chain (int64, the learner's row in ``states``), time_ns (int64, UTC ns on
    the log server's clock, whole milliseconds), action ("attempt" | "help_request"),
    correct (boolean, NA for help requests), duration_s (float64, whole milliseconds),
    step (int64, panel step from 1), skill (string).  ``behaviour``: per chain, a key of
    BEHAVIOUR_ACTION_RATE (default "own_bench" for every chain).
    """
    activity, affect = states.activity, states.affect
    behaviour = np.full(activity.shape[0], "own_bench") if behaviour is None else np.asarray(behaviour)
    rate_table = np.stack([BEHAVIOUR_ACTION_RATE[name] for name in behaviour])           # (chains, activities)
    help_scale = np.array([BEHAVIOUR_HELP_SCALE[name] for name in behaviour])
    counts = rng.poisson(np.take_along_axis(rate_table, activity.astype(np.int64), axis=1) * AFFECT_RATE[affect]).ravel()
    cell = np.repeat(np.arange(counts.size), counts)
    chain, second = np.divmod(cell, states.seconds)
    event_activity, event_affect = activity.ravel()[cell], affect.ravel()[cell]
    offset_ms = np.floor(rng.random(cell.size) * 1000).astype(np.int64)
    time_ns = start_ns[chain] + second * 1_000_000_000 + offset_ms * 1_000_000
    order = np.lexsort((time_ns, chain))
    chain, time_ns = chain[order], time_ns[order]
    event_activity, event_affect = event_activity[order], event_affect[order]

    is_help = rng.random(cell.size) < np.minimum(1.0, HELP_SHARE[event_activity, event_affect] * help_scale[chain])
    correct = ~is_help & (rng.random(cell.size) < CORRECT_SHARE[event_activity, event_affect])
    median = np.where(is_help, HELP_SECONDS, ATTEMPT_SECONDS[event_activity])
    duration = np.maximum(0.2, np.round(median * rng.lognormal(0.0, 0.4, cell.size), 3))

    # Correct attempts so far within the learner, before this event -> the current step.
    done = np.cumsum(correct) - correct
    first = np.r_[0, np.flatnonzero(np.diff(chain)) + 1]
    done -= np.repeat(done[first], np.diff(np.r_[first, chain.size]))
    step = done // ATTEMPTS_PER_STEP + 1
    return pd.DataFrame({
        "chain": chain,
        "time_ns": time_ns,
        "action": pd.array(np.where(is_help, HELP, ATTEMPT), dtype="string"),
        "correct": pd.array(np.where(is_help, None, correct), dtype="boolean"),
        "duration_s": duration,
        "step": step,
        "skill": pd.array(np.asarray(SKILLS)[(step - 1) % len(SKILLS)], dtype="string"),
    })
