"""A light twin of the demo for the site audit: the demo's latent states and simulator log
with or without the planted site difference, windows labelled with the true activity
(no coders, no clocks), and the export's features.  Fast enough to repeat over many seeds."""
from __future__ import annotations

import numpy as np
import pandas as pd

from demo_sessions.latent_states import simulate_latent_states
from demo_sessions.scenario import ACTIVITY_STATES
from demo_sessions.simulator_log import simulate_log
from export.features import compute_features

SECOND = 1_000_000_000


def site_windows(seed: int, planted: bool, learners_per_centre: int = 12, windows_per_learner: int = 20,
                 window_seconds: int = 20, minutes: int = 60) -> tuple[pd.DataFrame, pd.Series, pd.Series, pd.Series]:
    """(features, true activity, learner, site) for two centres: north steady, south busy when planted."""
    state_rng, log_rng, window_rng = (np.random.default_rng(child) for child in np.random.SeedSequence(seed).spawn(3))
    learners = 2 * learners_per_centre
    seconds = minutes * 60
    states = simulate_latent_states(state_rng, learners, seconds)
    behaviour = np.repeat(["own_bench", "shared_bench" if planted else "own_bench"], learners_per_centre)
    events = simulate_log(log_rng, states, np.zeros(learners, dtype=np.int64), behaviour)
    log = pd.DataFrame({
        "learner": pd.array([f"x-{chain}" for chain in events["chain"]], dtype="string"),
        "time_ns": events["time_ns"], "action": events["action"],
        "outcome": events["correct"].map({True: "correct", False: "incorrect"}).astype("string"),
        "item": events["step"].astype("string"), "skill": events["skill"],
    })
    slots = seconds // window_seconds
    chosen = np.stack([window_rng.choice(slots - 1, windows_per_learner, replace=False) + 1 for _ in range(learners)])
    chain = np.repeat(np.arange(learners), windows_per_learner)
    start = chosen.ravel() * window_seconds
    windows = pd.DataFrame({"log_id": [f"x-{c}" for c in chain], "start_ns": start * SECOND,
                            "end_ns": (start + window_seconds) * SECOND})
    features = compute_features(log, windows).drop(columns=["start_ns", "end_ns"])
    truth = np.asarray(ACTIVITY_STATES)[states.activity[chain, start + window_seconds // 2]]
    site = np.where(chain < learners_per_centre, "north", "south")
    return features, pd.Series(truth), pd.Series([f"L{c:02d}" for c in chain]), pd.Series(site)
