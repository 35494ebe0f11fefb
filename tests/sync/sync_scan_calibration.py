"""The automatic scan against the demo generator's PLANTED clocks, sync marks unused.

For one seed: generate the demo (demo_sessions.generate.generate_demo; truth.json holds
the clocks it drew before anything was fitted), run ``sync.clock_scan.scan_offset`` on
each device's live observations exactly as ``fieldmark align --method auto`` feeds it
(roster log ids, could-not-observe codes blanked), and compare with the truth:

  offset_error_s  the model's offset minus the planted clock's offset at the model's
                  reference instant (ClockModel.at_reference read backwards);
  span_error_s    the largest |model - planted| device->log difference at the first and
                  the last observed window (both clocks are lines, so the largest over
                  the span is at an end).

Shared by tests/sync/test_sync_scan_calibration.py (3 seeds) and
tests/perf/test_scan_calibration_perf.py (50 seeds, the coverage figure).
"""
from __future__ import annotations

import json
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from demo_sessions.generate import generate_demo
from observer_app.pipeline.alignment import read_study_logs
from observer_app.study.folder import load_study
from observer_app.study.store import Store
from sync.clock import ClockModel
from sync.clock_scan import scan_offset
from sync.time_column import datetime_column_ns


@dataclass(frozen=True)
class Recovered:
    seed: int
    device: str
    offset_error_s: float
    offset_standard_error_s: float
    span_error_s: float
    span_standard_error_s: float
    warnings: tuple[str, ...]


def recovered_clocks(seed: int, folder: Path, size: str = "full") -> list[Recovered]:
    """One row per device of the demo of ``seed`` (generated into ``folder``)."""
    generate_demo(folder, seed, size)
    study = load_study(folder / "study")
    events, _ = read_study_logs(study)
    with Store(study.store_path) as store:
        observations = store.observations(study.scheme.dimension_names)
    log_ids = dict(zip(study.roster["learner"].astype(str), study.roster["log_id"].astype(str)))
    observations = observations.assign(log_id=observations["learner"].astype(str).map(log_ids).fillna(""))
    for dimension in study.scheme.dimensions:
        column = observations[dimension.name]
        observations[dimension.name] = column.where(column != dimension.could_not_observe)
    planted = json.loads((folder / "truth.json").read_text())["devices"]  # PLANTED truth
    rows = []
    for device, clock in sorted(planted.items()):
        live = observations[(observations["device"] == device) & (observations["mode"] == "live")]
        model = scan_offset(live, events, list(study.scheme.dimension_names))
        truth = ClockModel(device=device, method="manual", offset_s=clock["offset_s"], drift_ppm=clock["drift_ppm"],
                           reference_ns=pd.Timestamp(clock["reference"]).value)
        start = datetime_column_ns(live["window_start"])
        ends = truth.to_log_ns(np.array([start.min(), start.max()]))
        span_error = np.abs(model.to_device_ns(ends) - truth.to_device_ns(ends)).max() / 1e9
        rows.append(Recovered(seed, device, model.offset_s - truth.at_reference(model.reference_ns).offset_s,
                              model.offset_standard_error_s, float(span_error), model.span_standard_error_s,
                              model.warnings))
    return rows
