"""The demo's paired runs start the way the app does (a spoken countdown, each laptop on its
own clock) and stay in step in real time, checked against the generator's truth."""
from __future__ import annotations

import shutil

import numpy as np
import pandas as pd
import pytest

from agreement.pairing import pair_observations
from demo_sessions import committed_copy
from demo_sessions.truth_files import read_truth
from observer_app.study.store import SIGNAL_END, SIGNAL_START, Store
from sync.clock_pairs import relative_offsets

COPY = committed_copy().parent


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    scratch = tmp_path_factory.mktemp("copy") / "observations.sqlite"
    shutil.copy(COPY / "study" / "observations.sqlite", scratch)  # opening may migrate; keep the copy untouched
    with Store(scratch) as store:
        observations = store.observations(["activity", "affect"])
        marks, sessions = store.sync_marks(), store.sessions()
    header, _, truth = read_truth(COPY)
    return observations, marks, sessions, header, truth


def test_each_laptop_starts_a_paired_run_on_its_own_clock_with_a_shared_pairing_id(demo):
    observations, marks, sessions, header, _ = demo
    paired = sessions[sessions["pairing_id"].notna()]
    assert len(paired) == 4 and paired.groupby("pairing_id")["device"].nunique().eq(2).all()
    starts = paired.pivot(index="pairing_id", columns="device", values="paired_start")
    a, b = header["devices"]["laptop-a"], header["devices"]["laptop-b"]
    since = (starts["laptop-b"] - pd.Timestamp(a["reference"])).dt.total_seconds()  # log time, to a second
    planted = a["offset_s"] - b["offset_s"] + (a["drift_ppm"] - b["drift_ppm"]) * 1e-6 * since
    gap = (starts["laptop-a"] - starts["laptop-b"]).dt.total_seconds()
    assert (gap - planted).abs().max() < 1.0  # the clocks' offset shows; nothing forces a shared reading
    signals = marks[marks["kind"] != ""]
    assert sorted(signals.groupby(["pairing_id", "device"])["kind"].apply(tuple).map(sorted).map(tuple).unique()) \
        == [(SIGNAL_END, SIGNAL_START)]


def test_a_paired_run_stays_in_step_on_the_log_clock(demo):
    observations, _, _, _, truth = demo
    paired = observations[observations["pairing_id"].notna()].merge(
        truth[["observation_id", "log_start", "log_end"]], on="observation_id")
    wide = paired.pivot_table(index=["pairing_id", "slot"], columns="device",
                              values=["learner", "log_start", "log_end"], aggfunc="first").dropna()
    assert len(wide) >= 50
    assert (wide[("learner", "laptop-a")] == wide[("learner", "laptop-b")]).all()
    for edge in ("log_start", "log_end"):
        apart = (wide[(edge, "laptop-a")] - wide[(edge, "laptop-b")]).dt.total_seconds().abs()
        assert apart.max() < 0.5, apart.max()
    # pairing reads windows on the log's clock: here the generator's true log times
    on_log = observations.merge(truth[["observation_id", "log_start", "log_end"]], on="observation_id", how="left")
    on_log["log_start_ns"] = on_log.pop("log_start").astype("int64")
    on_log["log_end_ns"] = on_log.pop("log_end").astype("int64")
    units, report = pair_observations(on_log, ["activity", "affect"], tolerance_s=10.0)
    by_slot = units[units["matched_by"] == "slot"]["unit"].nunique()
    assert by_slot == len(wide)


def test_the_signal_marks_give_the_laptops_relative_offset(demo):
    _, marks, _, header, _ = demo
    signals = marks[marks["kind"] != ""]
    found = relative_offsets(pd.DataFrame({"pairing_id": signals["pairing_id"], "device": signals["device"],
                                           "kind": signals["kind"],
                                           "marked_ns": signals["marked_at"].astype("int64")})).iloc[0]
    assert (found["device_a"], found["device_b"], found["marks_used"]) == ("laptop-a", "laptop-b", 4)
    a, b = header["devices"]["laptop-a"], header["devices"]["laptop-b"]
    reference = pd.Timestamp(a["reference"]).value
    # the planted clocks read at the instant laptop-a shows reference_ns (truth.json's formula, solved for log time)
    log_ns = reference + (found["reference_ns"] - reference - a["offset_s"] * 1e9) / (1 + a["drift_ppm"] * 1e-6)
    b_reading = log_ns + b["offset_s"] * 1e9 + b["drift_ppm"] * 1e-6 * (log_ns - reference)
    planted = (b_reading - found["reference_ns"]) / 1e9
    assert abs(found["offset_s"] - planted) < 0.5
    assert np.isfinite(found["standard_error_s"]) and found["standard_error_s"] > 0
