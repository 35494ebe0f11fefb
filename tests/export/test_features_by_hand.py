"""Window features on tiny logs, worked out by hand (the arithmetic is in the comments)."""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from export.column_descriptions import feature_description
from export.features import FEATURE_OF_COLUMN, FEATURES, FeatureSettings, WindowEvents, compute_features, feature

S = 1_000_000_000  # one second in ns


def log(rows: list[tuple]) -> pd.DataFrame:
    return pd.DataFrame(rows, columns=["learner", "time_ns", "action", "outcome", "item", "skill"])


def windows(rows: list[tuple]) -> pd.DataFrame:
    frame = pd.DataFrame(rows, columns=["log_id", "start_ns", "end_ns"])
    frame["coded_ns"] = frame["end_ns"]
    return frame


# Learner "a": eight events; learner "b" interleaved in time, to tempt leakage.
EVENTS = log([
    ("a", 0 * S, "try", "incorrect", "i1", "s1"),
    ("a", 10 * S, "try", "incorrect", "i1", "s1"),
    ("a", 11 * S, "hint", "", "", ""),
    ("a", 14 * S, "try", "correct", "i2", "s1"),
    ("a", 20 * S, "try", "incorrect", "i3", "s2"),   # exactly at a window start: inside
    ("a", 21 * S, "try", "incorrect", "i3", "s2"),
    ("a", 30 * S, "try", "incorrect", "i3", "s2"),   # exactly at that window's end: outside
    ("a", 31 * S, "try", "correct", "i3", "s2"),
    ("b", 12 * S, "try", "incorrect", "j1", "s1"),
    ("b", 22 * S, "hint", "", "", ""),
])


def test_features_of_a_window_worked_by_hand() -> None:
    result = compute_features(EVENTS, windows([("a", 10 * S, 20 * S)]), settings=FeatureSettings(rapid_seconds=2)).iloc[0]
    # window [10 s, 20 s) of learner a: events at 10, 11, 14 (20 is the end: excluded)
    assert result["event_count"] == 3
    assert result["events_per_minute"] == pytest.approx(3 / (10 / 60))           # 18 per minute
    assert result["action_try"] == 2 and result["action_hint"] == 1
    assert result["outcome_incorrect"] == 1 and result["outcome_correct"] == 1
    assert result["error_rate"] == pytest.approx(1 / 2)                          # attempts at 10 (wrong) and 14 (right)
    assert result["help_requests"] == 1
    assert result["seconds_since_previous"] == 10                                # 10 s - event at 0 s
    assert result["gap_mean_s"] == pytest.approx(2.0)                            # gaps 1 and 3: (14 - 10) / 2
    assert result["gap_median_s"] == pytest.approx(2.0)                          # median of {1, 3}
    assert result["gap_max_s"] == 3
    assert result["idle_longest_s"] == 6                                         # last event 14 -> window end 20
    assert result["rapid_share"] == pytest.approx(1 / 3)                         # only 11 s came < 2 s after the previous
    assert result["distinct_items"] == 2                                         # i1, i2 ("" is no item)
    assert result["attempts_without_success"] == 0                               # latest attempt (14 s) succeeded
    assert result["history_attempts"] == 3                                       # 0, 10, 14; b's 12 s is not a's
    assert result["history_error_rate"] == pytest.approx(2 / 3)


def test_window_bounds_start_inclusive_end_exclusive() -> None:
    result = compute_features(EVENTS, windows([("a", 20 * S, 30 * S)])).iloc[0]
    # window [20 s, 30 s): 20 and 21 are in, 30 is not
    assert result["event_count"] == 2
    assert result["idle_longest_s"] == 9                                         # 21 -> 30
    assert result["seconds_since_previous"] == 6                                 # 20 - 14
    assert result["attempts_without_success"] == 2                               # s2 at 20 and 21, no success yet
    assert result["history_attempts"] == 5                                       # 0, 10, 14, 20, 21 (30 is not before the end)


def test_history_ignores_other_learners_and_everything_after_the_window() -> None:
    # b's window [0 s, 20 s): b has one attempt (12 s, wrong); a's eight events and b's later hint never count.
    result = compute_features(EVENTS, windows([("b", 0, 20 * S)])).iloc[0]
    assert result["history_attempts"] == 1
    assert result["history_error_rate"] == 1
    assert result["event_count"] == 1
    assert result["attempts_without_success"] == 1
    assert np.isnan(result["seconds_since_previous"])


def test_history_features_do_not_change_when_the_future_changes() -> None:
    spans = windows([("a", 10 * S, 20 * S), ("b", 0, 20 * S)])
    before = compute_features(EVENTS, spans)
    future = EVENTS.copy()
    later = future["time_ns"] >= 20 * S
    future.loc[later, "outcome"] = "correct"                                     # rewrite everything after the windows
    future = pd.concat([future, log([("a", 25 * S, "try", "incorrect", "i9", "s1")] * 5)])
    pd.testing.assert_frame_equal(compute_features(future, spans), before)


def test_wheel_spinning_flag_at_ten_attempts_without_success() -> None:
    # common practice: ten attempts without mastery flags wheel-spinning
    rows = [("a", t * S, "try", "incorrect", "i1", "s1") for t in range(10)]
    spans = windows([("a", 0, 9 * S), ("a", 0, 10 * S)])
    result = compute_features(log(rows), spans)
    assert list(result["attempts_without_success"]) == [9, 10]
    assert list(result["wheel_spinning"]) == [0, 1]


def test_a_window_of_a_learner_without_events_is_empty_not_an_error() -> None:
    result = compute_features(EVENTS, windows([("nobody", 0, 60 * S)])).iloc[0]
    assert result["event_count"] == 0 and result["history_attempts"] == 0
    assert result["idle_longest_s"] == 60
    assert np.isnan(result["error_rate"]) and np.isnan(result["gap_max_s"])


def test_results_come_back_in_the_callers_window_order() -> None:
    spans = windows([("b", 0, 20 * S), ("a", 20 * S, 30 * S), ("a", 10 * S, 20 * S)])
    spans.index = [7, 3, 5]
    result = compute_features(EVENTS, spans)
    assert list(result.index) == [7, 3, 5]
    assert list(result["event_count"]) == [1, 2, 3]


def test_a_lab_adds_its_own_feature_as_one_function() -> None:
    registry = dict(FEATURES)

    def long_pauses(view: WindowEvents) -> dict[str, np.ndarray]:
        """Pauses of five seconds or more inside the window."""
        return {"long_pauses": view.count_members(view.internal_gap_ns >= 5 * S)}

    registry["long_pauses"] = long_pauses
    computed = compute_features(EVENTS, windows([("a", 0, 40 * S)]), features=registry)
    assert computed.iloc[0]["long_pauses"] == 3                                  # gaps 10, 6 and 9 s
    source = computed.attrs[FEATURE_OF_COLUMN]
    assert source["long_pauses"] == "long_pauses" and source["event_count"] == "activity"
    assert feature_description("long_pauses", source, registry) == "Pauses of five seconds or more inside the window."
    assert "long_pauses" not in FEATURES


def test_the_feature_decorator_registers_under_the_function_name() -> None:
    try:
        @feature
        def always_one(view: WindowEvents) -> dict[str, np.ndarray]:
            """One."""
            return {"always_one": np.ones(len(view.counts))}

        assert FEATURES["always_one"] is always_one
        assert compute_features(EVENTS, windows([("a", 0, S)]))["always_one"].iloc[0] == 1
    finally:
        FEATURES.pop("always_one", None)


def test_feature_column_names_are_typeable_and_never_collide():
    from export.features import column_names
    # xAPI verb ids are IRIs (xAPI 1.0.3 Part Two, 2.4.3 Verb: "id" is an IRI); the column keeps the last segment
    names = column_names("action", ["http://adlnet.gov/expapi/verbs/attempted", "help request", "Attempt"])
    assert names == ["action_attempted", "action_help_request", "action_attempt"]
    clashing = column_names("action", ["http://a.example/verbs/asked", "http://b.example/verbs/asked"])
    assert len(set(clashing)) == 2 and all(name.startswith("action_asked_") for name in clashing)
