"""What the generator knows and the pipeline must recover, kept OUTSIDE the study folder.

DIR/truth.json
    seed, size, clock_model (the formula), devices {device: {coder, offset_s, drift_ppm,
    reference}}, sessions [{centre, log_format, coding_start, grid_start, grid_end}],
    learners {learner: {log_id, centre}}, counts {learners, events, observations,
    sync_marks}, ranges {offset_s, drift_ppm per device: the documented [low, high]},
    site_behaviour {centres {centre: {behaviour, actions_per_second {activity: rate},
    help_request_scale}}, planted (bool), expected (in words), metric {dimension, figure,
    attribute, lower [centres]} or null}: the planted difference between the centres
DIR/truth_states.parquet -- the latent-state timelines, one row per run of one state:
    learner, dimension ("activity" | "affect"), state, start, end (UTC, log clock; end exclusive)
DIR/truth_windows.parquet -- the true state behind every coded window:
    observation_id, coder, device, learner, activity, affect, log_start, log_end (UTC, log clock)
"""
from __future__ import annotations

import json
from pathlib import Path

import pandas as pd

TRUTH_JSON = "truth.json"
TRUTH_STATES = "truth_states.parquet"
TRUTH_WINDOWS = "truth_windows.parquet"


def _utc(values) -> pd.Series:
    return pd.to_datetime(values, unit="ns", utc=True)


def write_truth(directory: Path, header: dict, segments: pd.DataFrame, windows: pd.DataFrame) -> None:
    (directory / TRUTH_JSON).write_text(json.dumps(header, indent=2, sort_keys=True) + "\n", encoding="utf-8")
    states = segments.assign(start=_utc(segments["start_ns"]), end=_utc(segments["end_ns"]))
    states.drop(columns=["start_ns", "end_ns"]).to_parquet(directory / TRUTH_STATES, index=False)
    truth = windows.assign(log_start=_utc(windows["log_start_ns"]), log_end=_utc(windows["log_end_ns"]))
    truth.drop(columns=["log_start_ns", "log_end_ns"]).to_parquet(directory / TRUTH_WINDOWS, index=False)


def read_truth(directory: Path) -> tuple[dict, pd.DataFrame, pd.DataFrame]:
    """(truth.json as a dict, truth_states, truth_windows) from a generator output folder."""
    header = json.loads((directory / TRUTH_JSON).read_text(encoding="utf-8"))
    return header, pd.read_parquet(directory / TRUTH_STATES), pd.read_parquet(directory / TRUTH_WINDOWS)
