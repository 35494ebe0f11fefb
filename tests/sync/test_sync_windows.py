"""Observations -> windows on the log clock (sync/windows.py), with literal expected
instants worked out by hand from the convention in sync/tables.py."""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from sync.clock import ClockModel, manual_model
from sync.tables import WINDOW_EXTRA_COLUMNS
from sync.windows import observations_to_windows

ROSTER = pd.DataFrame({"learner": ["L01", "L02"], "label": ["Bench 1", "Bench 2"], "log_id": ["n-0001", "n-0002"]})


def ns(text: str) -> int:
    return pd.Timestamp(text).value


def observations(rows):
    frame = pd.DataFrame(rows, columns=["observation_id", "device", "learner", "window_start", "window_end",
                                        "coded_at", "activity"])
    for column in ("window_start", "window_end", "coded_at"):
        frame[column] = pd.to_datetime(frame[column], utc=True)
    return frame


def test_default_window_is_the_observed_window_moved_by_the_offset():
    obs = observations([("o1", "laptop-a", "L01", "2026-03-10T09:00:30Z", "2026-03-10T09:00:50Z",
                         "2026-03-10T09:00:48Z", "on_task")])
    windows = observations_to_windows(obs, {"laptop-a": manual_model("laptop-a", 30.0)}, ROSTER)
    # A device 30 s ahead: its 09:00:30-09:00:50 is the log's 09:00:00-09:00:20.
    row = windows.iloc[0]
    assert (row["log_id"], row["start_ns"], row["end_ns"], row["coded_ns"]) == (
        "n-0001", ns("2026-03-10T09:00:00Z"), ns("2026-03-10T09:00:20Z"), ns("2026-03-10T09:00:18Z"))
    assert list(windows.columns) == list(obs.columns) + list(WINDOW_EXTRA_COLUMNS)


def test_drift_is_applied_by_the_convention():
    # device = log + 10 s + 100 ppm * (log - 08:00).  At log 10:00 (7200 s later) the
    # device reads 10:00:10.72; so device 10:00:10.72 maps back to log 10:00:00 exactly.
    model = ClockModel(device="d", method="marks", offset_s=10.0, drift_ppm=100.0, reference_ns=ns("2026-03-10T08:00:00Z"))
    obs = observations([("o1", "d", "L02", "2026-03-10T10:00:10.72Z", "2026-03-10T10:00:30.722Z",
                         "2026-03-10T10:00:30.722Z", "away")])
    row = observations_to_windows(obs, {"d": model}, ROSTER).iloc[0]
    assert row["start_ns"] == ns("2026-03-10T10:00:00Z")
    assert row["end_ns"] == ns("2026-03-10T10:00:20Z")  # 20 s of log time last 20.002 s on the device


def test_coded_anchor_with_before_and_after():
    obs = observations([("o1", "laptop-a", "L01", "2026-03-10T09:00:30Z", "2026-03-10T09:00:50Z",
                         "2026-03-10T09:00:45Z", "on_task")])
    models = {"laptop-a": manual_model("laptop-a", 30.0)}
    row = observations_to_windows(obs, models, ROSTER, anchor="coded", before_s=10, after_s=2).iloc[0]
    assert (row["start_ns"], row["end_ns"]) == (ns("2026-03-10T09:00:05Z"), ns("2026-03-10T09:00:17Z"))
    row = observations_to_windows(obs, models, ROSTER, anchor="start", before_s=5, after_s=10).iloc[0]
    assert (row["start_ns"], row["end_ns"]) == (ns("2026-03-10T08:59:55Z"), ns("2026-03-10T09:00:10Z"))


def test_device_without_model_and_learner_without_log_id_are_reported():
    obs = observations([
        ("o1", "laptop-z", "L01", "2026-03-10T09:00:00Z", "2026-03-10T09:00:20Z", "2026-03-10T09:00:19Z", "on_task"),
        ("o2", "laptop-z", "L99", "2026-03-10T09:00:20Z", "2026-03-10T09:00:40Z", None, None),
    ])
    windows = observations_to_windows(obs, {}, ROSTER)
    assert windows["start_ns"].tolist() == [ns("2026-03-10T09:00:00Z"), ns("2026-03-10T09:00:20Z")]
    assert windows["log_id"].tolist() == ["n-0001", ""]
    assert windows["coded_ns"].isna().tolist() == [False, True]
    warnings = " ".join(windows.attrs["warnings"])
    assert "laptop-z" in warnings and "no clock model" in warnings and "L99" in warnings


def test_back_to_back_windows_share_no_instant():
    obs = observations([
        ("o1", "d", "L01", "2026-03-10T09:00:00Z", "2026-03-10T09:00:20Z", "2026-03-10T09:00:19Z", "on_task"),
        ("o2", "d", "L01", "2026-03-10T09:00:20Z", "2026-03-10T09:00:40Z", "2026-03-10T09:00:39Z", "on_task"),
    ])
    windows = observations_to_windows(obs, {"d": manual_model("d", -3.25)}, ROSTER)
    event = np.int64(windows["end_ns"].iloc[0])  # an event exactly on the shared bound
    inside = (windows["start_ns"] <= event) & (event < windows["end_ns"])
    assert inside.tolist() == [False, True]


@pytest.mark.parametrize(("anchor", "before", "after"), [("middle", 0, None), ("coded", 0, None), ("start", 5, -5)])
def test_impossible_window_requests_are_refused(anchor, before, after):
    obs = observations([("o1", "d", "L01", "2026-03-10T09:00:00Z", "2026-03-10T09:00:20Z", "2026-03-10T09:00:19Z", "x")])
    with pytest.raises(ValueError):
        observations_to_windows(obs, {}, ROSTER, anchor=anchor, before_s=before, after_s=after)


def test_replay_windows_are_already_on_the_log_clock():
    # a replayed clip is coded against the log itself: its times are log times, so the
    # device's clock model must not move them (the live row from the same device is moved)
    obs = observations([("o1", "laptop-a", "L01", "2026-03-10T09:00:30Z", "2026-03-10T09:00:50Z",
                         "2026-03-10T09:00:48Z", "on_task"),
                        ("o2", "laptop-a", "L02", "2026-03-10T09:00:30Z", "2026-03-10T09:00:50Z",
                         "2026-03-10T09:00:48Z", "on_task")])
    obs["mode"] = ["live", "replay"]
    windows = observations_to_windows(obs, {"laptop-a": manual_model("laptop-a", 30.0)}, ROSTER)
    live, replay = windows.iloc[0], windows.iloc[1]
    assert live["start_ns"] == ns("2026-03-10T09:00:00Z")
    assert (replay["start_ns"], replay["end_ns"]) == (ns("2026-03-10T09:00:30Z"), ns("2026-03-10T09:00:50Z"))
    assert windows.attrs["warnings"] == []


def test_observations_on_log_clock_moves_live_rows_and_keeps_replay_rows():
    from sync.windows import observations_on_log_clock

    obs = observations([("o1", "laptop-a", "L01", "2026-03-10T09:00:30Z", "2026-03-10T09:00:50Z",
                         "2026-03-10T09:00:48Z", "on_task"),
                        ("o2", "laptop-a", "L01", "2026-03-10T09:00:30Z", "2026-03-10T09:00:50Z",
                         "2026-03-10T09:00:48Z", "on_task"),
                        ("o3", "laptop-b", "L02", "2026-03-10T09:00:30Z", "2026-03-10T09:00:50Z",
                         "2026-03-10T09:00:48Z", "on_task")]).assign(mode=["live", "replay", "live"])
    moved = observations_on_log_clock(obs, {"laptop-a": manual_model("laptop-a", 30.0)})
    # laptop-a 30 s ahead: its 09:00:30 is the log's 09:00:00; a replayed clip is on the log's clock already;
    # laptop-b has no model: its own times, with a warning naming it
    assert moved["log_start_ns"].tolist() == [ns("2026-03-10T09:00:00Z"), ns("2026-03-10T09:00:30Z"),
                                              ns("2026-03-10T09:00:30Z")]
    assert moved["log_end_ns"].tolist() == [ns("2026-03-10T09:00:20Z"), ns("2026-03-10T09:00:50Z"),
                                            ns("2026-03-10T09:00:50Z")]
    assert any("laptop-b" in warning for warning in moved.attrs["warnings"])


def test_the_clock_mapping_of_pairing_and_of_export_windows_is_the_same():
    """Pairing (observations_on_log_clock) and export's windows (observations_to_windows)
    must put every observed window at the same log instants, for any clock model."""
    from hypothesis import given, settings, strategies as st

    from sync.clock import ClockModel
    from sync.windows import observations_on_log_clock

    @settings(max_examples=40, deadline=None)
    @given(offset=st.floats(-50_000, 50_000), drift=st.floats(-500, 500), starts=st.lists(
        st.integers(0, 10 * 86_400), min_size=1, max_size=20), replay=st.booleans())
    def check(offset, drift, starts, replay):
        base = pd.Timestamp("2026-03-10T08:00:00Z")
        obs = pd.DataFrame({
            "observation_id": [f"o{i}" for i in range(len(starts))], "device": "laptop-a", "learner": "L01",
            "window_start": [base + pd.Timedelta(seconds=s) for s in starts],
            "window_end": [base + pd.Timedelta(seconds=s + 20) for s in starts],
            "coded_at": [base + pd.Timedelta(seconds=s + 15) for s in starts], "activity": "on_task",
            "mode": "replay" if replay else "live"})
        models = {"laptop-a": ClockModel(device="laptop-a", method="marks", offset_s=offset, drift_ppm=drift,
                                         reference_ns=ns("2026-03-12T00:00:00Z"))}
        moved = observations_on_log_clock(obs, models)
        windows = observations_to_windows(obs, models, ROSTER)
        assert moved["log_start_ns"].tolist() == windows["start_ns"].tolist()
        assert moved["log_end_ns"].tolist() == windows["end_ns"].tolist()

    check()
