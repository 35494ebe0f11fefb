"""Window features on random logs against DuckDB as the reference.

DuckDB answers the same questions the obvious way -- a range join of windows to events
(same learner, start <= time < end) and GROUP BY, wid functions for gaps -- so any
slip in our searches, segment reductions or prefix counts shows up as a difference.
"""
from __future__ import annotations

import duckdb
import numpy as np
import pandas as pd
import pyarrow as pa
import pytest

from export.features import FeatureSettings, compute_features

SECOND = 1_000_000_000
ACTIONS = ["connect_wire", "strip_insulation", "measure_voltage", "hint", "select_tool", "undo"]


def random_log(seed: int, learners: int = 12, events: int = 3000, windows: int = 400, longest_s: int = 90) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Events with unique times per learner (so "latest" is unambiguous), windows anywhere."""
    rng = np.random.default_rng(seed)
    learner = np.sort(rng.integers(0, learners, events))
    gaps = rng.exponential(4.0, events) * SECOND
    time_ns = np.zeros(events, dtype=np.int64)
    for code in range(learners):  # test data only: a short loop over learners
        mine = learner == code
        time_ns[mine] = 1_750_000_000 * SECOND + np.cumsum(gaps[mine].astype(np.int64) + 1)
    frame = pd.DataFrame({
        "learner": [f"n-{code:03d}" for code in learner],
        "time_ns": time_ns,
        "action": rng.choice(ACTIONS, events),
        "outcome": rng.choice(["correct", "incorrect", "", "completed"], events, p=[0.35, 0.3, 0.3, 0.05]),
        "item": rng.choice(["", "step-1", "step-2", "step-3", "step-4", "step-5"], events),
        "skill": rng.choice(["", "breaker", "terminal", "earth"], events, p=[0.1, 0.3, 0.3, 0.3]),
    }).sample(frac=1.0, random_state=seed)  # unsorted on purpose: sorting is our job
    window_learner = rng.integers(0, learners + 1, windows)  # learners + 1: an id with no events
    start = 1_750_000_000 * SECOND + rng.integers(-60, 2200, windows) * SECOND
    # a quarter of the windows start exactly on an event, to exercise the inclusive bound
    on_event = rng.random(windows) < 0.25
    start[on_event] = rng.choice(time_ns, on_event.sum())
    length = rng.integers(5, longest_s, windows) * SECOND
    window_frame = pd.DataFrame({
        "log_id": [f"n-{code:03d}" for code in window_learner],
        "start_ns": start, "end_ns": start + length, "coded_ns": start + length + rng.integers(0, 5, windows) * SECOND,
    })
    # a quarter end exactly on an event, to exercise the exclusive bound
    on_end = rng.random(windows) < 0.25
    window_frame.loc[on_end, "end_ns"] = np.maximum(rng.choice(time_ns, on_end.sum()), window_frame.loc[on_end, "start_ns"])
    return frame, window_frame


REFERENCE = """
WITH ev AS (
    SELECT *, time_ns - lag(time_ns) OVER (PARTITION BY learner ORDER BY time_ns) AS gap,
              lag(time_ns) OVER (PARTITION BY learner ORDER BY time_ns) AS previous
    FROM events
), inside AS (
    SELECT w.wid, count(ev.time_ns) AS event_count,
           count(*) FILTER (WHERE ev.outcome IN ('correct', 'incorrect')) AS attempts,
           count(*) FILTER (WHERE ev.outcome = 'incorrect') AS errors,
           count(*) FILTER (WHERE ev.action = 'hint') AS help_requests,
           count(*) FILTER (WHERE ev.action = 'undo') AS action_undo,
           count(*) FILTER (WHERE ev.outcome = 'completed') AS outcome_completed,
           count(DISTINCT ev.item) FILTER (WHERE ev.item <> '') AS distinct_items,
           count(*) FILTER (WHERE ev.gap < $rapid) AS rapid,
           max(ev.gap) FILTER (WHERE ev.previous >= w.s) AS gap_max,
           median(ev.gap) FILTER (WHERE ev.previous >= w.s) AS gap_median,
           min(ev.time_ns) AS first_time, max(ev.time_ns) AS last_time
    FROM spans w LEFT JOIN ev ON ev.learner = w.log_id AND ev.time_ns >= w.s AND ev.time_ns < w.e
    GROUP BY w.wid
), history AS (
    SELECT w.wid,
           count(*) FILTER (WHERE ev.outcome IN ('correct', 'incorrect')) AS history_attempts,
           count(*) FILTER (WHERE ev.outcome = 'incorrect') AS history_errors,
           max(ev.time_ns) FILTER (WHERE ev.time_ns < w.s) AS previous_time
    FROM spans w LEFT JOIN ev ON ev.learner = w.log_id AND ev.time_ns < w.e
    GROUP BY w.wid
), attempts AS (
    SELECT * FROM events WHERE outcome IN ('correct', 'incorrect') AND skill <> ''
), latest AS (
    SELECT w.wid, w.log_id, arg_max(a.skill, a.time_ns) AS skill, max(a.time_ns) AS t
    FROM spans w JOIN attempts a ON a.learner = w.log_id AND a.time_ns < w.e
    GROUP BY w.wid, w.log_id
), last_success AS (
    SELECT l.wid, max(a.time_ns) AS t
    FROM latest l JOIN attempts a ON a.learner = l.log_id AND a.skill = l.skill AND a.time_ns <= l.t
    WHERE a.outcome = 'correct' GROUP BY l.wid
), streak AS (
    SELECT l.wid, count(*) AS attempts_without_success
    FROM latest l LEFT JOIN last_success s ON s.wid = l.wid
    JOIN attempts a ON a.learner = l.log_id AND a.skill = l.skill AND a.time_ns <= l.t
                    AND a.time_ns > coalesce(s.t, -1)
    GROUP BY l.wid
)
SELECT w.wid, w.s, w.e, inside.* EXCLUDE (wid), history.* EXCLUDE (wid), coalesce(streak.attempts_without_success, 0) AS attempts_without_success
FROM spans w JOIN inside USING (wid) JOIN history USING (wid) LEFT JOIN streak USING (wid)
ORDER BY w.wid
"""


def duckdb_reference(events: pd.DataFrame, windows: pd.DataFrame, start: np.ndarray, end: np.ndarray, rapid_ns: int) -> pd.DataFrame:
    spans = pd.DataFrame({"wid": np.arange(len(windows)), "log_id": windows["log_id"], "s": start, "e": end})
    connection = duckdb.connect()
    connection.register("events", events)
    connection.register("spans", spans)
    return connection.execute(REFERENCE, {"rapid": rapid_ns}).df()


@pytest.mark.parametrize("seed", [1, 2, 3])
@pytest.mark.parametrize("longest_s", [90, 600])
def test_window_counts_and_sums_match_duckdb(seed: int, longest_s: int) -> None:
    events, windows = random_log(seed, longest_s=longest_s)
    settings = FeatureSettings(rapid_seconds=1.5, help_actions=("hint",))
    ours = compute_features(events, windows, settings)
    reference = duckdb_reference(events, windows, windows["start_ns"].to_numpy(), windows["end_ns"].to_numpy(), int(1.5 * SECOND))
    assert (ours["start_ns"].to_numpy() == windows["start_ns"].to_numpy()).all()

    def same(column: str, expected: pd.Series) -> None:
        np.testing.assert_allclose(ours[column].to_numpy(float), expected.to_numpy(float), rtol=1e-12, equal_nan=True, err_msg=column)

    same("event_count", reference["event_count"])
    same("help_requests", reference["help_requests"])
    same("action_undo", reference["action_undo"])
    same("outcome_completed", reference["outcome_completed"])
    same("distinct_items", reference["distinct_items"])
    attempts = reference["attempts"].astype(float)
    same("error_rate", (reference["errors"] / attempts).where(attempts > 0))
    count = reference["event_count"].astype(float)
    same("rapid_share", (reference["rapid"] / count).where(count > 0))
    same("gap_max_s", reference["gap_max"].astype(float) / SECOND)
    same("gap_median_s", reference["gap_median"].astype(float) / SECOND)
    same("gap_mean_s", ((reference["last_time"] - reference["first_time"]).astype(float) / (count - 1) / SECOND).where(count > 1))
    same("seconds_since_previous", (reference["s"] - reference["previous_time"]).astype(float) / SECOND)
    history = reference["history_attempts"].astype(float)
    same("history_attempts", history)
    same("history_error_rate", (reference["history_errors"] / history).where(history > 0))
    same("attempts_without_success", reference["attempts_without_success"])
    window_minutes = (reference["e"] - reference["s"]).astype(float) / (60 * SECOND)
    same("events_per_minute", count / window_minutes)


def test_arrow_input_gives_the_same_features_as_pandas_input() -> None:
    events, windows = random_log(5)
    from_pandas = compute_features(events, windows)
    table = pa.Table.from_pandas(events, preserve_index=False)
    dictionary = table.set_column(0, "learner", table.column("learner").dictionary_encode())
    pd.testing.assert_frame_equal(compute_features(dictionary, windows), from_pandas)
