"""Small labelled study inputs for export tests: panel-wiring apprentices, two coders."""
from __future__ import annotations

import functools

import numpy as np
import pandas as pd
from export.labelled_windows import ExportSettings, label_windows
from export.writer import build_manifest, write_windows

SECOND = 1_000_000_000
DIMENSIONS = ["activity", "affect"]
CANNOT = {"activity": "not_visible", "affect": "unclear"}
KEY = bytes(range(32))


def study_inputs(learners: int = 10, rounds: int = 24, seed: int = 0) -> tuple[pd.DataFrame, pd.DataFrame, pd.DataFrame]:
    """Fresh copies of ``generated_inputs`` (generated once per test run)."""
    return tuple(frame.copy() for frame in generated_inputs(learners, rounds, seed))


@functools.cache
def generated_inputs(learners: int, rounds: int, seed: int) -> tuple[pd.DataFrame, pd.DataFrame, pd.DataFrame]:
    """(events, windows, roster).  Off-task windows have few events, on-task windows many,
    so a detector has something to find; every unit is coded by two coders."""
    rng = np.random.default_rng(seed)
    roster = pd.DataFrame({
        "learner": [f"L{number:02d}" for number in range(1, learners + 1)],
        "label": [f"Bench {number}" for number in range(1, learners + 1)],
        "log_id": [f"n-{number:04d}" for number in range(1, learners + 1)],
        "site": ["north", "south"] * (learners // 2),
        "cohort": ["A"] * (learners // 2) + ["B"] * (learners - learners // 2),
    })
    start0 = 1_780_000_000 * SECOND
    event_rows, window_rows = [], []
    for round_number in range(rounds):
        for position, learner in enumerate(roster.itertuples()):
            start = start0 + (round_number * learners + position) * 20 * SECOND
            activity = rng.choice(["on_task", "off_task", "not_visible"], p=[0.6, 0.35, 0.05])
            affect = rng.choice(["focused", "bored", "unclear"], p=[0.6, 0.3, 0.1])
            rate = 1.0 if activity == "on_task" else 0.1
            count = rng.poisson(rate * 20)
            times = np.sort(rng.uniform(0, 20, count))
            for offset in times:
                event_rows.append((learner.log_id, start + int(offset * SECOND), rng.choice(["connect_wire", "hint", "measure_voltage"]),
                                   rng.choice(["correct", "incorrect", ""]), f"step-{rng.integers(5)}", rng.choice(["breaker", "earth"])))
            unit = f"{learner.learner}-round-{round_number}"  # agreement's unit ids may well contain learner ids
            for coder, shift in (("ana", 0), ("ben", 1)):
                second_opinion = activity if rng.random() < 0.85 else rng.choice(["on_task", "off_task"])
                window_rows.append({
                    "observation_id": f"obs-{round_number}-{position}-{coder}", "session_id": f"session-{coder}",
                    "coder": coder, "device": f"laptop-{coder}", "mode": "live", "learner": learner.learner,
                    "slot": round_number, "clip": "", "log_id": learner.log_id,
                    "start_ns": start + shift * SECOND // 10, "end_ns": start + 20 * SECOND + shift * SECOND // 10,
                    "coded_ns": start + 18 * SECOND, "unit": unit,
                    "activity": activity if coder == "ana" else second_opinion, "affect": affect,
                    "no_code": False, "note": f"{learner.label} looked away", "scheme_hash": "scheme-1", "corrected": False,
                })
    events = pd.DataFrame(event_rows, columns=["learner", "time_ns", "action", "outcome", "item", "skill"])
    return events, pd.DataFrame(window_rows), roster


def export_file(directory, output_format: str = "parquet", keep_ids: bool = False, **settings) -> tuple:
    """Run the export library end to end into ``directory``; returns (path, LabelledWindows)."""
    events, windows, roster = study_inputs()
    export_settings = ExportSettings(keep_ids=keep_ids, **settings)
    result = label_windows(events, windows, roster, DIMENSIONS, CANNOT, None if keep_ids else KEY, settings=export_settings)
    path = directory / f"windows.{output_format}"
    manifest = build_manifest(
        result, version="0.1.0", scheme_hash="scheme-1", parameters=export_settings.parameters(),
        clock_models=[{"device": "laptop-ana", "offset_s": 12.5, "drift_ppm": 20.0}],
        inputs={"logs/centre_north.csv": "sha256:00"}, output_format=output_format,
    )
    write_windows(result, path, manifest)
    return path, result

